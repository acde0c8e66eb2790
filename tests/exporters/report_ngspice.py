"""Print ngspice vs reported as-built figures for the designs of ``design_cases``.

Not a test (prints figures). Run from the project root:
``.venv/bin/python tests/exporters/report_ngspice.py``.
For each design: POST /v1/designs (reported as-built gain and corners) and POST
/v1/exports/netlist.cir (the deck), then ``ngspice -b`` on the deck.
"""

from __future__ import annotations

import logging
import math
import os
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))  # tests/
sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__)))))

from design_cases import DESIGNS  # noqa: E402
from spice_run import band_from_table, parse_print_table, run_deck  # noqa: E402

from service import create_app  # noqa: E402


def _rel(a, b):
    if a is None or b is None or (isinstance(a, float) and math.isnan(a)):
        return "  n/a "
    return f"{100 * (a - b) / b:+.4f}%"


def main() -> None:
    logging.disable(logging.CRITICAL)
    client = create_app({"TESTING": True}).test_client()
    print(f"{'design':24} {'n':>2} {'gain dB rep/sim':>21} {'f_low Hz rep/sim (err)':>36} "
          f"{'f_high Hz rep/sim (err)':>40}")
    for key, body in DESIGNS.items():
        design = client.post("/v1/designs", json=body).get_json()
        built = design["performance"]["as_built"]
        deck = client.post("/v1/exports/netlist.cir", json=body).get_data(as_text=True)
        f_hz, vdb, _ = parse_print_table(run_deck(deck)[0]).T
        peak_db, f_low, f_high = band_from_table(f_hz, vdb)
        fl = built["f_low_hz"]
        fl_text = "DC coupled / none" if fl is None else f"{fl:.4g}/{f_low:.4g} ({_rel(f_low, fl)})"
        print(f"{key:24} {design['stage_count']:>2} {built['gain_db']:>9.4f}/{peak_db:<9.4f} "
              f"{fl_text:>36} "
              f"{built['f_high_hz']:>12.6g}/{f_high:<12.6g} ({_rel(f_high, built['f_high_hz'])})")


if __name__ == "__main__":
    main()
