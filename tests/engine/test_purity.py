"""The numeric engine is importable without the web stack (architecture rule of issue 2)."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

PROBE = """
import importlib, json, pkgutil, sys
import service.engine as engine
for info in pkgutil.walk_packages(engine.__path__, "service.engine."):
    importlib.import_module(info.name)
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


#: The engine's wings, lowest first: a wing may import its own modules and the wings below
#: it, never one above (the synthesis uses the judges, never the other way round).
LAYERS = ("model", "solver", "judge", "synthesis")


def _engine_imports(path: Path) -> set[str]:
    text = path.read_text(encoding="utf-8")
    found = set(re.findall(r"^\s*from service\.engine\.(\w+)", text, flags=re.M))
    found |= set(re.findall(r"^\s*import service\.engine\.(\w+)", text, flags=re.M))
    return found


def test_engine_wings_only_import_downward():
    engine_dir = ROOT / "service" / "engine"
    checked = 0
    for rank, wing in enumerate(LAYERS):
        for path in sorted((engine_dir / wing).glob("*.py")):
            upward = {w for w in _engine_imports(path) if w in LAYERS[rank + 1:]}
            assert upward == set(), f"{path.relative_to(ROOT)} imports {upward}"
            checked += 1
    assert checked >= 12  # the walk found the modules (it cannot pass on an empty tree)


def test_layer_probe_flags_an_upward_import(tmp_path):
    fake = tmp_path / "m.py"
    fake.write_text("from service.engine.synthesis import design\n", encoding="utf-8")
    assert _engine_imports(fake) == {"synthesis"}
