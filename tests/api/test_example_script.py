"""examples/explore_and_download.py runs against the service and fetches the five files of
the first Pareto candidate.

The app is served by werkzeug's own WSGI server (``make_server``) on 127.0.0.1 in a thread
of the test, and the script runs in a separate Python process with ``requests``. The files
are read back with the ``csv`` module and python-calamine (independent readers); the
parts library is the invented demo stock of examples/.
"""

from __future__ import annotations

import csv
import io
import subprocess
import sys
import threading
from pathlib import Path

import pytest
from python_calamine import CalamineWorkbook
from werkzeug.serving import make_server

from service import create_app

ROOT = Path(__file__).resolve().parents[2]
SCRIPT = ROOT / "examples" / "explore_and_download.py"

pytestmark = pytest.mark.slow


@pytest.fixture
def server():
    app = create_app({"TESTING": True,
                      "GAINCHAIN_PARTS_LIBRARY": str(ROOT / "examples" / "parts-library.json")})
    srv = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{srv.server_port}", app
    finally:
        srv.shutdown()
        thread.join(timeout=10)


def test_script_explores_and_downloads_the_first_pareto_candidate(server, tmp_path):
    url, app = server
    out = subprocess.run([sys.executable, str(SCRIPT), "--base-url", url, "--out",
                          str(tmp_path)], capture_output=True, text=True, timeout=300,
                         cwd=ROOT)
    assert out.returncode == 0, out.stdout + out.stderr
    files = sorted(p.name for p in tmp_path.iterdir())
    assert files == sorted(f"ultrasonic-rx-40k-{k}" for k in (
        "bom.xlsx", "bom.csv", "netlist.cir", "netlist.net", "netlist.xml"))
    # the files are those of the exploration's first Pareto candidate
    explored = app.test_client().post("/v1/explorations", json={
        "name": "ultrasonic-rx-40k",
        "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
        "supply": {"kind": "single", "v_pos": 5},
        "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 200, "load_ohm": 10000},
    }).get_json()
    chosen = next(c for c in explored["candidates"] if c["pareto"])
    assert f"design_id {chosen['design_id']}" in out.stdout
    rows = list(csv.DictReader(io.StringIO(
        (tmp_path / "ultrasonic-rx-40k-bom.csv").read_text(encoding="utf-8"))))
    assert {r["Design ID"] for r in rows} == {chosen["design_id"]}
    for row in rows:  # the demo stock covers every line of this design
        assert row["Stocked"] == "yes" and row["Internal PN"] and row["Unit cost"]
    sheet = CalamineWorkbook.from_filelike(io.BytesIO(
        (tmp_path / "ultrasonic-rx-40k-bom.xlsx").read_bytes())).get_sheet_by_name("BOM")
    head, *_lines, total = sheet.to_python()
    assert total[0] == "Total"
    assert total[head.index("Extended cost")] == pytest.approx(chosen["bom_cost"]["total"])
    deck = (tmp_path / "ultrasonic-rx-40k-netlist.cir").read_text(encoding="utf-8")
    assert f"* design_id {chosen['design_id']}" in deck
