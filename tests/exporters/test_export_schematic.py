"""The schematic drawing (``exporters.schematic``), as a pure function of the board.

References: the SVG is parsed by the standard library's XML parser (``xml.etree``, a
general-purpose XML 1.0 reader); the BOM references and values come from the BOM CSV
export read back by the standard library's ``csv`` module; the PNG is opened by Pillow.
Circuits: the hand-built set of ``export_circuits`` (both topologies, both supplies,
buffered and unbuffered bias, DC coupling, packages of 1, 2 and 4 channels).
"""

from __future__ import annotations

import csv
import dataclasses
import io
import xml.etree.ElementTree as ET

import pytest
from export_circuits import CIRCUITS, HOSTILE_NAMES, dual_dc, dual_inv, single_inv, single_ni
from PIL import Image

from exporters.board import Part, Pin, build_board
from exporters.bom_csv import bom_csv
from exporters.schematic import MAX_PX, MIN_PX, image_size, plan, schematic

SVG_NS = "{http://www.w3.org/2000/svg}"


def svg_texts(data: bytes) -> list[str]:
    """Every ``<text>`` element's content, read by xml.etree (the SVG must parse)."""
    root = ET.fromstring(data)
    assert root.tag == SVG_NS + "svg"
    return ["".join(t.itertext()).strip() for t in root.iter(SVG_NS + "text")]


def bom_rows(board) -> list[dict]:
    """The BOM CSV export read back with the csv module."""
    return list(csv.DictReader(io.StringIO(bom_csv(board))))


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_every_bom_reference_and_value_is_on_the_sheet(key):
    board = build_board(CIRCUITS[key](), name=key)
    texts = svg_texts(schematic(board, fmt="svg"))
    tokens = {tok for text in texts for tok in text.split()}
    rows = bom_rows(board)  # reference: the csv module reading our BOM export
    refs = [ref for row in rows for ref in row["Reference"].split(",")]
    assert refs and sorted(refs) == sorted(p.ref for p in board.parts)
    missing = [ref for ref in refs if ref not in texts]
    assert not missing, f"references not drawn: {missing}"
    for row in rows:
        assert row["Value"] in tokens, row  # the value exactly as the BOM writes it


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_every_op_amp_unit_is_drawn_spares_included(key):
    board = build_board(CIRCUITS[key]())
    texts = svg_texts(schematic(board, fmt="svg"))
    channels = board.circuit.opamp.channels_per_package
    for unit in board.units:
        label = f"{unit.ref}{unit.unit}" if channels > 1 else unit.ref
        assert label in texts, (label, unit.role)
    spares = [u for u in board.units if u.role.startswith("unused")]
    if spares:
        assert any(t == "spare unit" for t in texts)


def test_the_cases_cover_topologies_supplies_bias_and_channels():
    """The parametrised set above spans what the issue asks for (a check on the fixtures)."""
    circuits = [make() for make in CIRCUITS.values()]
    assert {c.topology for c in circuits} == {"non_inverting", "inverting"}
    assert {c.supply.kind for c in circuits} == {"single", "dual"}
    assert {c.bias.buffered for c in circuits if c.bias is not None} == {True, False}
    assert {c.opamp.channels_per_package for c in circuits} == {1, 2, 4}
    boards = [build_board(c) for c in circuits]
    assert any(u.role.startswith("unused") for b in boards for u in b.units)


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_plan_places_each_part_once(key):
    board = build_board(CIRCUITS[key]())
    p = plan(board)
    placed = [part.ref for up in p.stages + p.spares + ([p.follower] if p.follower else [])
              for part in [x for x, _ in up.series] + up.feedback
              + [x for chain in up.p_chains + up.n_chains for x, _ in chain]]
    placed += [x.ref for x, _ in p.output_series]
    placed += [x.ref for x in p.bias_top + p.bias_bottom + p.supply + p.packages + p.others]
    placed += [x.ref for x in p.connectors.values()]
    assert sorted(placed) == sorted(x.ref for x in board.parts)
    assert not p.others  # today's boards need no generic placement


def test_stage_parts_go_where_a_sketch_puts_them():
    """Non-inverting: coupling capacitor in series, bias resistor to REF off +in, feedback
    between output and -in, gain leg from -in; inverting: C and R in series to -in."""
    board = build_board(single_ni(2, buffered=True))
    p = plan(board)
    s1 = p.stages[0]
    assert [x.role for x, _ in s1.series] == ["stage 1 coupling"]
    assert [x.role for x in s1.feedback] == ["stage 1 feedback"]
    assert [[x.role for x, _ in chain] for chain in s1.p_chains] == [["stage 1 bias"]]
    assert [[x.role for x, _ in chain] for chain in s1.n_chains] == [
        ["stage 1 gain", "stage 1 gain leg"]]
    assert p.follower is not None and p.follower.unit.role == "bias follower"
    assert {x.role for x in p.bias_top} == {"bias divider top"}
    assert {x.role for x in p.bias_bottom} == {"bias divider bottom", "bias bypass"}
    assert [x.role for x, _ in p.output_series] == ["output coupling"]
    inv = plan(build_board(single_inv(2))).stages[1]
    assert inv.n_top and [x.role for x, _ in inv.series] == ["stage 2 coupling", "stage 2 input"]


def _with_parts(board, *extra: Part):
    return dataclasses.replace(board, parts=board.parts + tuple(extra))


def test_a_part_new_to_the_board_is_drawn_from_its_nets():
    """A capacitor across stage 1's feedback resistor joins the feedback network, and a part
    on nets no rule knows is still drawn with its reference."""
    board = build_board(dual_inv(2, channels=2))
    unit = board.units[0]
    c_fb = Part(ref="C90", value="10p", footprint="", lib="Device", symbol="C",
                description="", pins=(Pin("1", unit.out), Pin("2", unit.inn)), value_si=1e-11)
    odd = Part(ref="R91", value="1M", footprint="", lib="Device", symbol="R",
               description="", pins=(Pin("1", "S2_M"), Pin("2", "S1_M")), value_si=1e6)
    tp = Part(ref="TP1", value="TestPoint", footprint="", lib="Connector", symbol="TestPoint",
              description="", pins=(Pin("1", "OUT"),))
    j4 = Part(ref="J4", value="Conn_01x01", footprint="", lib="Connector_Generic",
              symbol="Conn_01x01", description="", role="monitor", pins=(Pin("1", "OUT"),))
    board = _with_parts(board, c_fb, odd, tp, j4)
    p = plan(board)
    assert "C90" in [x.ref for x in p.stages[0].feedback]
    assert {x.ref for x in p.others} == {"R91", "TP1", "J4"}
    texts = svg_texts(schematic(board, fmt="svg"))
    assert {"C90", "R91", "TP1", "J4"} <= set(texts)


def test_a_spare_unit_wired_as_a_gain_stage_is_drawn_from_its_nets():
    """The board parks each spare unit of a part stable only at higher noise gains as an
    amplifier of REF (a feedback resistor and a gain resistor to REF): both resistors are
    drawn on that unit."""
    board = build_board(dual_dc(2, channels=4))
    spare_parts = [x for x in board.parts if x.role.startswith("spare ")]
    assert len(spare_parts) == 4  # two spare units, two resistors each
    p = plan(board)
    assert len(p.spares) == 2 and not p.others
    for up in p.spares:
        assert len(up.feedback) == 1 and up.feedback[0].role.endswith("feedback")
        assert [[x.role.split()[-1] for x, _ in chain] for chain in up.n_chains] == [["gain"]]
    texts = svg_texts(schematic(board, fmt="svg"))
    assert {x.ref for x in spare_parts} <= set(texts)


def test_same_board_same_bytes():
    board = build_board(single_ni(3, buffered=True, channels=4), name="repeat")
    assert schematic(board, fmt="svg") == schematic(board, fmt="svg")
    assert schematic(board, fmt="png", width_px=500) == schematic(board, fmt="png", width_px=500)
    svg = schematic(board, fmt="svg").decode()
    for stamp in ("Date", "date", "uuid", "Created"):  # no timestamps or ids
        assert stamp not in svg


@pytest.mark.parametrize("size", [(640, 400), (MIN_PX, MIN_PX), (1200, 300)])
def test_png_has_the_asked_size(size):
    board = build_board(single_inv(2))
    data = schematic(board, fmt="png", width_px=size[0], height_px=size[1])
    image = Image.open(io.BytesIO(data))  # reference: Pillow's PNG reader
    assert image.format == "PNG" and image.size == size


def test_svg_carries_the_asked_size_and_default_sizes_keep_the_aspect():
    board = build_board(single_ni(2))
    root = ET.fromstring(schematic(board, fmt="svg", width_px=800, height_px=600))
    assert (root.get("width"), root.get("height")) == ("800", "600")
    natural = ET.fromstring(schematic(board, fmt="svg"))
    w, h = int(natural.get("width")), int(natural.get("height"))
    _, _, vb_w, vb_h = (float(v) for v in natural.get("viewBox").split())
    assert w / h == pytest.approx(vb_w / vb_h, rel=0.02)
    assert image_size(10000, 5000, None, None) == (MAX_PX, MAX_PX // 2)
    assert image_size(1000, 500, 800, None) == (800, 400)
    assert image_size(1000, 500, None, 300) == (600, 300)


@pytest.mark.parametrize("name", HOSTILE_NAMES + ["costs $5 & $6", "a\x01b", "<b>&amp;</b>"])
def test_names_are_inert_text(name):
    board = build_board(single_ni(1), name=name)
    texts = svg_texts(schematic(board, fmt="svg"))  # still well-formed XML
    shown = " ".join(name.replace("\x01", " ").split())
    assert any(" ".join(t.split()) == shown for t in texts), texts[-6:]
    png = schematic(board, fmt="png", width_px=400, height_px=300)
    assert Image.open(io.BytesIO(png)).size == (400, 300)


def test_bad_arguments_are_refused():
    board = build_board(single_ni(1))
    with pytest.raises(ValueError):
        schematic(board, fmt="pdf")
    with pytest.raises(ValueError):
        schematic(board, fmt="svg", width_px=MAX_PX + 1)
