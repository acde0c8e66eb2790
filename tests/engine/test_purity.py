"""The numeric engine is importable without the web stack (architecture rule of issue 2)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

PROBE = """
import importlib, json, pkgutil, sys
import service.engine as engine
for info in pkgutil.iter_modules(engine.__path__):
    importlib.import_module("service.engine." + info.name)
print(json.dumps(sorted(m for m in sys.modules
                        if m.split(".")[0] in ("flask", "werkzeug", "marshmallow"))))
"""


def test_engine_imports_without_web_stack():
    out = subprocess.run([sys.executable, "-c", PROBE], cwd=ROOT, capture_output=True,
                         text=True, check=True, timeout=60)
    assert json.loads(out.stdout.strip().splitlines()[-1]) == []


def test_probe_detects_the_web_stack():
    """The probe itself can fail: importing the app factory module pulls in Flask."""
    probe = PROBE.replace("import service.engine as engine",
                          "import service.app\nimport service.engine as engine")
    out = subprocess.run([sys.executable, "-c", probe], cwd=ROOT, capture_output=True,
                         text=True, timeout=60)
    assert out.returncode == 0, out.stderr
    assert "flask" in json.loads(out.stdout.strip().splitlines()[-1])
