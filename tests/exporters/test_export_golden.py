"""Golden files: regression snapshots of the text formats for one hand-built circuit.

These are NOT independent references (the parsers and ngspice in the other tests are); they
pin the exact bytes so that any change in references, net names, ordering or quoting shows
up in review (style anchors: "netlists are text, compared exactly against golden files").
Snapshots written by gainchain's exporters on 2026-12-02. After an intended change,
regenerate with: ``.venv/bin/python tests/exporters/test_export_golden.py``.
"""

from __future__ import annotations

import os
import sys

import pytest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from export_circuits import single_ni  # noqa: E402

from exporters.board import build_board  # noqa: E402
from exporters.bom_csv import bom_csv  # noqa: E402
from exporters.kicad_sexpr import kicad_net  # noqa: E402
from exporters.kicad_xml import kicad_xml  # noqa: E402
from exporters.spice import spice_deck  # noqa: E402

GOLDEN = os.path.join(os.path.dirname(os.path.abspath(__file__)), "golden")


def render() -> dict[str, bytes]:
    board = build_board(single_ni(3, buffered=True), name="golden 3-stage buffered")
    return {
        "single_ni_3_buffered.csv": bom_csv(board).encode("utf-8"),
        "single_ni_3_buffered.cir": spice_deck(board).encode("utf-8"),
        "single_ni_3_buffered.net": kicad_net(board).encode("utf-8"),
        "single_ni_3_buffered.xml": kicad_xml(board),
    }


@pytest.mark.parametrize("filename", sorted(render()))
def test_matches_golden_file(filename):
    with open(os.path.join(GOLDEN, filename), "rb") as fh:
        assert render()[filename] == fh.read()


if __name__ == "__main__":
    for name, data in render().items():
        with open(os.path.join(GOLDEN, name), "wb") as fh:
            fh.write(data)
