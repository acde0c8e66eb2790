"""BOM CSV and spreadsheet: layout, grouping, read-back, determinism, inert text.

References: the standard library's ``csv`` reader; ``python-calamine`` (an independent,
Rust-based xlsx reader) for the workbook; the zip/XML parts of the workbook read with
``zipfile`` and ``xml.etree``; ngspice 39 for the Response sheet's numbers; KiCad's BOM CSV
layout and the OWASP CSV-injection leads (KiCad schematic-editor manual; OWASP CSV injection).
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import io
import re
import xml.etree.ElementTree as ET
import zipfile

import numpy as np
import pytest
from export_circuits import CIRCUITS, HOSTILE_NAMES, opamp, single_ni
from python_calamine import CalamineWorkbook
from spice_run import parse_print_table, require_ngspice, run_deck

from exporters.board import build_board
from exporters.bom_csv import bom_csv
from exporters.bom_xlsx import CAUTIONS, bom_xlsx
from exporters.spice import spice_deck
from exporters.values import natural_key

KICAD_COLUMNS = ["Reference", "Value", "Datasheet", "Footprint", "Qty", "DNP"]
QUOTED_LINE = re.compile(r'"(?:[^"]|"")*"(?:,"(?:[^"]|"")*")*')
FORMULA_LEADS = ("=", "+", "-", "@", "\t", "\r")


def csv_rows(text: str) -> list[dict]:
    return list(csv.DictReader(io.StringIO(text)))


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_csv_layout_and_grouping(key):
    board = build_board(CIRCUITS[key](), name=key)
    text = bom_csv(board)
    assert "\r" not in text and text.endswith("\n")
    lines = text.splitlines()
    assert all(QUOTED_LINE.fullmatch(line) for line in lines)  # every field quoted
    rows = csv_rows(text)
    assert list(rows[0])[:6] == KICAD_COLUMNS
    refs = [r for row in rows for r in row["Reference"].split(",")]
    assert sorted(refs) == sorted(p.ref for p in board.parts)  # each part exactly once
    assert sum(int(row["Qty"]) for row in rows) == len(board.parts)
    for row in rows:
        group = row["Reference"].split(",")
        assert group == sorted(group, key=natural_key) and int(row["Qty"]) == len(group)
    keys = [tuple(v for k, v in row.items() if k not in ("Reference", "Qty")) for row in rows]
    assert len(keys) == len(set(keys))  # one line per group


def test_csv_groups_follow_kicad_example():
    rows = csv_rows(bom_csv(build_board(single_ni(3))))
    by_value = {(r["Value"], r["Footprint"]): r for r in rows}
    # three stages: the three 9.09k feedback resistors form one line, R2,R5,R8
    assert by_value[("9.09k", "Resistor_SMD:R_0603_1608Metric")]["Reference"] == "R2,R5,R8"
    assert rows[0]["Reference"].startswith("C1")


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_xlsx_bom_sheet_equals_csv_line_by_line(key):
    board = build_board(CIRCUITS[key](), name=key)
    wb = CalamineWorkbook.from_filelike(io.BytesIO(bom_xlsx(board)))
    assert wb.sheet_names == ["BOM", "Design", "Response"]
    sheet = wb.get_sheet_by_name("BOM").to_python()
    expected = list(csv.reader(io.StringIO(bom_csv(board))))
    *lines, total = sheet  # the workbook adds a Total row under the CSV's lines
    assert len(lines) == len(expected)
    for got, want in zip(lines, expected, strict=True):
        as_text = [str(int(v)) if isinstance(v, float) else v for v in got]
        assert as_text == want
    qty = [row[4] for row in lines[1:]]
    assert all(isinstance(q, int | float) for q in qty)  # numbers stored as numbers
    assert total[0] == "Total" and total[4] == sum(qty) == len(board.parts)


def test_xlsx_sheet_features_and_log_chart():
    data = bom_xlsx(build_board(single_ni(3, buffered=True)))
    zf = zipfile.ZipFile(io.BytesIO(data))
    sheet1 = zf.read("xl/worksheets/sheet1.xml").decode()
    assert re.search(r'<pane [^>]*ySplit="1"[^>]*state="frozen"', sheet1)  # frozen header
    assert re.search(r'<c r="A1" [^>]*s="[1-9]', sheet1)  # header styled (bold)
    assert "<autoFilter" in sheet1
    charts = [n for n in zf.namelist() if n.startswith("xl/charts/chart")]
    assert len(charts) == 1
    root = ET.fromstring(zf.read(charts[0]))
    ns = {"c": "http://schemas.openxmlformats.org/drawingml/2006/chart"}
    assert root.find(".//c:scatterChart", ns) is not None
    assert root.find(".//c:valAx/c:scaling/c:logBase", ns).get("val") == "10"
    # the chart reads the Response sheet
    assert "'Response'!$A$2:$A$" in zf.read(charts[0]).decode()


@pytest.mark.ngspice
def test_response_sheet_matches_ngspice():
    """The Response sheet's gain (dB) equals ngspice's at the same frequencies."""
    require_ngspice()
    board = build_board(single_ni(3))
    wb = CalamineWorkbook.from_filelike(io.BytesIO(bom_xlsx(board)))
    sheet = np.array(wb.get_sheet_by_name("Response").to_python()[1:], dtype=float)
    stdout, _ = run_deck(spice_deck(board))
    sim = parse_print_table(stdout)
    # both grids start at the same decade; the deck has 100 points per decade, the sheet 20
    assert sim[0, 0] == pytest.approx(sheet[0, 0], rel=1e-6)
    np.testing.assert_allclose(sim[::5, 0], sheet[:, 0], rtol=1e-5)
    np.testing.assert_allclose(sim[::5, 1], sheet[:, 1], atol=0.01)


def test_xlsx_design_sheet_has_the_cautions_line():
    wb = CalamineWorkbook.from_filelike(io.BytesIO(bom_xlsx(build_board(single_ni(2),
                                                                         name="demo"))))
    rows = wb.get_sheet_by_name("Design").to_python()
    assert rows[0][:2] == ["Design", "demo"]
    assert rows[1][:2] == ["Caution", CAUTIONS]
    assert "electrolytic" in CAUTIONS and "standards" in CAUTIONS


def test_xlsx_is_byte_identical_and_dated_only_on_request():
    board = build_board(single_ni(3), name="same")
    first, second = bom_xlsx(board), bom_xlsx(build_board(single_ni(3), name="same"))
    assert first == second
    dated = bom_xlsx(board, date=dt.date(2026, 1, 31))
    assert dated != first and dated == bom_xlsx(board, date=dt.date(2026, 1, 31))
    core = zipfile.ZipFile(io.BytesIO(dated)).read("docProps/core.xml").decode()
    assert core.count("2026-01-31T00:00:00Z") == 2
    for info in zipfile.ZipFile(io.BytesIO(first)).infolist():
        assert info.date_time == (1980, 1, 1, 0, 0, 0)


def _hostile_board(text: str):
    amp = opamp(2, id=text, mpn=text, manufacturer=text, description=text)
    return build_board(dataclasses.replace(single_ni(2), opamp=amp), name=text)


@pytest.mark.parametrize("name", HOSTILE_NAMES)
def test_hostile_text_is_inert_in_csv(name):
    text = bom_csv(_hostile_board(name))
    for row in csv.reader(io.StringIO(text)):
        for cell in row:
            assert not cell.startswith(FORMULA_LEADS)
            assert "\n" not in cell and "\r" not in cell and "\t" not in cell


@pytest.mark.parametrize("name", HOSTILE_NAMES)
def test_hostile_text_is_inert_in_xlsx(name):
    # OWASP CSV-injection guidance: in a workbook a formula-like text must be a text cell
    # (never a <f> formula) and keep the quote-prefix flag, without a visible apostrophe.
    data = bom_xlsx(_hostile_board(name))
    zf = zipfile.ZipFile(io.BytesIO(data))
    styles = zf.read("xl/styles.xml").decode()
    xfs = re.search(r"<cellXfs[^>]*>(.*?)</cellXfs>", styles, re.S).group(1)
    quoted_styles = {i for i, xf in enumerate(re.findall(r"<xf\b[^>]*>", xfs))
                     if 'quotePrefix="1"' in xf}
    for part in zf.namelist():
        if part.startswith("xl/worksheets/sheet"):
            xml = zf.read(part).decode()
            assert "<f>" not in xml  # no formula cell anywhere
            for style, text in re.findall(
                    r'<c r="[A-Z]+\d+"(?: s="(\d+)")? t="inlineStr"><is><t[^>]*>([^<]*)</t>',
                    xml):
                if text.startswith(FORMULA_LEADS):
                    assert style and int(style) in quoted_styles, (part, text)
    wb = CalamineWorkbook.from_filelike(io.BytesIO(data))
    for sheet in wb.sheet_names:
        for row in wb.get_sheet_by_name(sheet).to_python():
            for cell in row:
                if isinstance(cell, str):
                    assert not (cell.startswith("'") and cell[1:].startswith(FORMULA_LEADS))


def test_xlsx_design_sheet_shows_ranges_without_a_quote():
    # A common-mode window that starts below the rail ("-0.1, 5.1" for a CMOS part whose
    # input reaches 0.1 V beyond each rail) is shown as written, read back with
    # python-calamine (an independent xlsx reader).
    amp = opamp(2, cm_to_pos_v=-0.1, cm_to_neg_v=-0.1)
    circuit = dataclasses.replace(single_ni(2), opamp=amp)
    from service.engine import report as report_mod

    rep = report_mod.analysis_block(circuit, target=None, input_peak_v=0.01)
    wb = CalamineWorkbook.from_filelike(io.BytesIO(bom_xlsx(build_board(circuit),
                                                            report=rep)))
    cells = [c for row in wb.get_sheet_by_name("Design").to_python() for c in row
             if isinstance(c, str)]
    windows = [c for c in cells if c.startswith("-0.1, ")]
    assert windows, [c for c in cells if "," in c][:10]
    assert not any(c.startswith("'") for c in cells)
