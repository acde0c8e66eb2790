"""Exporters are pure functions: no Flask, no GPL reader, no I/O (issue 3, Endpoints)."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import ngspice_support
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def test_exporters_import_without_flask_or_test_readers():
    code = ("import sys, exporters.formats, exporters.schematic; "
            "bad = {'flask', 'werkzeug', 'kicad_netlist_reader', 'kinparse'} & set(sys.modules); "
            "print(sorted(bad))")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True,
                         text=True, timeout=60, check=True).stdout.strip()
    assert out == "[]"


def test_missing_ngspice_skips_locally_but_fails_under_ci(monkeypatch):
    """Issue 3: without ngspice the SPICE checks skip, except under CI=true where they fail."""
    monkeypatch.setattr(ngspice_support, "NGSPICE", None)
    monkeypatch.delenv("CI", raising=False)
    with pytest.raises(pytest.skip.Exception):
        ngspice_support.require_ngspice()
    monkeypatch.setenv("CI", "true")
    with pytest.raises(pytest.fail.Exception):
        ngspice_support.require_ngspice()


def test_sources_cite_published_references_only():
    """Issue 10: comments and docstrings cite the published sources (KiCad's file-format
    documentation, the ngspice manual, OWASP, IEC 60063, "common practice"), never an
    internal brief that is not part of this repository."""
    banned = re.compile("format" + r"\s+" + "brief|" + "eda-" + "formats", re.I)
    cited = []
    root = Path(ROOT)
    for folder in ("exporters", "service", "schemas", "tests", "docker"):
        for path in (root / folder).rglob("*.py"):
            for no, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
                if banned.search(line):
                    cited.append(f"{path.relative_to(root)}:{no}")
    assert cited == []
