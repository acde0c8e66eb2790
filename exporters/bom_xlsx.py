"""Spreadsheet BOM (openpyxl): sheets BOM, Design and Response, byte-identical per request.

* ``BOM``: the CSV's lines (:func:`exporters.bom.bom_lines`), bold frozen header, autofilter,
  widths from the content, ``Qty`` and costs stored as numbers, then a bold ``Total`` row
  (Qty summed; ``Extended cost`` the sum of the priced lines, empty when none is priced;
  the description names the currency and the count of unpriced lines). Text cells are
  written with ``data_type = "s"`` (openpyxl would store a leading ``=`` as a formula), line
  breaks and tabs removed; one that starts like a formula also gets the quote-prefix style
  flag instead of the CSV's visible apostrophe (OWASP CSV-injection guidance).
* ``Design``: the cautions line, target vs ideal vs as-built, the per-stage table,
  shortfalls, predicted yield and the build checks, headroom,
  bias and warnings (from the design response when there is one; otherwise the as-built band
  of the circuit from the engine).
* ``Response``: frequency, gain (dB) and phase (degrees) of Vout/Vs from the engine's nodal
  solution, with a native scatter chart on a logarithmic frequency axis.

The design identity (``Board.design_id``) is the workbook's document identifier
(``dc:identifier`` of ``docProps/core.xml``) and a ``Design ID`` column of the BOM sheet.

Same bytes for the same input (PLM systems detect revisions by content hash): the document
dates are fixed (``date`` when given, else 1980-01-01, the zip format's epoch) and the zip is
rewritten with fixed entry dates.
"""

from __future__ import annotations

import datetime as dt
import io
import math
import re
import zipfile
from decimal import Decimal

from openpyxl import Workbook
from openpyxl.chart import Reference, ScatterChart, Series
from openpyxl.styles import Font
from openpyxl.utils import get_column_letter

from exporters.board import Board
from exporters.bom import COLUMNS, EXTENDED_COST_COLUMN, QTY_COLUMN, bom_lines, bom_total
from exporters.names import is_formula_lead, sheet_text
from exporters.response import (
    BandEdges,
    analysis_range,
    band_edges,
    edges_from_report,
    response_table,
)
from exporters.stock import PartsLibrary

XLSX_MIME = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
CAUTIONS = ("A design aid, not a certified design: prototype and measure before use; follow "
            "applicable standards, local codes and licensed practice; electrolytic capacitors "
            "have polarity and voltage ratings: fit them as marked and never exceed them.")
NO_DATE = dt.datetime(1980, 1, 1)
RESPONSE_POINTS_PER_DECADE = 20
_BOLD = Font(bold=True)


def bom_xlsx(board: Board, *, report: dict | None = None, date: dt.date | None = None,
             library: PartsLibrary | None = None) -> bytes:
    """The workbook as bytes. ``report`` is a design response (JSON form) or None;
    ``library`` the stocked parts the BOM lines are matched against (or None)."""
    wb = Workbook()
    _bom_sheet(wb.active, board, library)
    edges = _edges(board, report)
    _design_sheet(wb.create_sheet("Design"), board, report, edges)
    _response_sheet(wb.create_sheet("Response"), board, edges)
    stamp = NO_DATE if date is None else dt.datetime(date.year, date.month, date.day)
    wb.properties.creator = "gainchain"
    wb.properties.created = stamp
    wb.properties.identifier = board.design_id
    buf = io.BytesIO()
    wb.save(buf)
    return _fixed_zip(buf.getvalue(), stamp)


def _edges(board: Board, report: dict | None) -> BandEdges:
    """The reported as-built band when there is a report, else the engine's."""
    as_built = ((report or {}).get("performance") or {}).get("as_built")
    return edges_from_report(as_built) or band_edges(board.circuit)


def _put(ws, row: int, col: int, value):
    """Write one cell: numbers as numbers, booleans as booleans, text neutralised."""
    cell = ws.cell(row=row, column=col)
    if value is None:
        return cell
    if isinstance(value, bool):
        cell.value = value
    elif isinstance(value, Decimal):
        cell.value = float(value)
    elif isinstance(value, int | float):
        cell.value = value if math.isfinite(value) else None
    else:
        text = sheet_text(value)
        cell.value = text
        cell.data_type = "s"
        if is_formula_lead(text):
            # Text cell with the quote-prefix flag: shown as typed (no visible apostrophe)
            # and still taken as text if someone edits it (OWASP CSV-injection guidance).
            cell.quotePrefix = True
    return cell


def _widths(ws, cap: int = 60) -> None:
    widths: dict[int, int] = {}
    for row in ws.iter_rows():
        for cell in row:
            if cell.value is not None:
                widths[cell.column] = max(widths.get(cell.column, 0), len(str(cell.value)))
    for col, width in widths.items():
        ws.column_dimensions[get_column_letter(col)].width = min(cap, width + 2)


def _bom_sheet(ws, board: Board, library: PartsLibrary | None = None) -> None:
    ws.title = "BOM"
    for col, name in enumerate(COLUMNS, start=1):
        _put(ws, 1, col, name).font = _BOLD
    rows = bom_lines(board, library, text=sheet_text)
    for r, row in enumerate(rows, start=2):
        for col, value in enumerate(row, start=1):
            _put(ws, r, col, value)
    total = bom_total(rows)
    unpriced = sum(1 for row in rows if not isinstance(row[EXTENDED_COST_COLUMN], Decimal))
    last = len(rows) + 2
    note = "Total"
    if library is not None:
        note = f"Total in {library.currency}; {unpriced} line(s) without a price"
    _put(ws, last, 1, "Total").font = _BOLD
    _put(ws, last, QTY_COLUMN + 1, sum(row[QTY_COLUMN] for row in rows)).font = _BOLD
    _put(ws, last, COLUMNS.index("Description") + 1, note).font = _BOLD
    if total is not None:
        _put(ws, last, EXTENDED_COST_COLUMN + 1, total).font = _BOLD
    ws.freeze_panes = "A2"
    ws.auto_filter.ref = f"A1:{get_column_letter(len(COLUMNS))}{len(rows) + 1}"
    _widths(ws)


def _design_sheet(ws, board: Board, report: dict | None, edges: BandEdges) -> None:
    c = board.circuit
    report = report or {}
    rows: list[list] = [
        ["Design", board.name or "gainchain design"],
        ["Caution", CAUTIONS],
        [],
        ["Status", report.get("status", "not designed here (circuit given)")],
        ["Topology", c.topology],
        ["Supply", f"{c.supply.kind}, v_pos {c.supply.v_pos:g} V"
         + (f", v_neg {c.supply.v_neg:g} V" if c.supply.kind == "dual" else "")],
        ["Op-amp", c.opamp.mpn or c.opamp.id or "inline op-amp"],
        ["Stages", c.n_stages],
        [],
        ["Figure", "Target", "Ideal", "As built"],
    ]
    header_rows = {1, 10}
    target = report.get("target") or {}
    perf = report.get("performance") or {}
    ideal = perf.get("ideal") or {}
    as_built = perf.get("as_built") or {}
    ideal_gain = None
    if ideal.get("stage_gain"):
        ideal_gain = float(ideal["stage_gain"]) ** c.n_stages
    built_gain = as_built.get("gain", edges.gain)
    bw = None if edges.f_low_hz is None else edges.f_high_hz - edges.f_low_hz
    rows += [
        ["gain", target.get("gain"), ideal_gain, built_gain],
        ["gain_db", target.get("gain_db"),
         None if ideal_gain is None else 20 * math.log10(ideal_gain),
         as_built.get("gain_db", 20 * math.log10(edges.gain))],
        ["f_low_hz", target.get("f_low_hz"), ideal.get("f_low_hz"),
         as_built.get("f_low_hz", edges.f_low_hz)],
        ["f_high_hz", target.get("f_high_hz"), ideal.get("f_high_hz"),
         as_built.get("f_high_hz", edges.f_high_hz)],
        ["bandwidth_hz", None, ideal.get("bandwidth_hz"), as_built.get("bandwidth_hz", bw)],
    ]
    stages = as_built.get("stages") or []
    if stages:
        keys = [k for k in stages[0] if not isinstance(stages[0][k], dict | list)]
        rows += [[], ["stage"] + keys]
        header_rows.add(len(rows))
        for k, stage in enumerate(stages, start=1):
            rows.append([k] + [stage.get(key) for key in keys])
    rows += _verdict_rows(report, header_rows, len(rows))
    for title in ("headroom", "bias"):
        if report.get(title):
            rows += [[], [title, "value"]]
            header_rows.add(len(rows))
            rows += [[path, value] for path, value in _flatten(report[title])]
    warnings = report.get("warnings") or []
    if warnings:
        rows += [[], ["warning", "message"]]
        header_rows.add(len(rows))
        rows += [[w.get("code"), w.get("message")] for w in warnings]
    for r, row in enumerate(rows, start=1):
        for col, value in enumerate(row, start=1):
            cell = _put(ws, r, col, value)
            if r in header_rows:
                cell.font = _BOLD
    _widths(ws, cap=90)


#: Columns of the build-check table (the response's ``checks`` entries, README "Build checks").
CHECK_COLUMNS = ("check", "stage", "value", "limit", "unit", "passed", "detail")


def _verdict_rows(report: dict, header_rows: set, start: int) -> list[list]:
    """Rows for the shortfalls, the predicted yield and the build checks of a design
    response (none for a bare circuit); header rows are added to ``header_rows``."""
    rows: list[list] = []
    shortfalls = report.get("shortfalls") or []
    if shortfalls:
        rows += [[], ["shortfall", "stage", "achieved", "target"]]
        header_rows.add(start + len(rows))
        rows += [[s.get("quantity"), s.get("stage"), s.get("achieved"), s.get("target")]
                 for s in shortfalls]
    est = report.get("yield")
    if est:
        rows += [[], ["yield", "predicted", "min_yield", "method"]]
        header_rows.add(start + len(rows))
        rows.append(["", est.get("predicted"), est.get("min_yield"), est.get("method")])
    checks = report.get("checks") or []
    if checks:
        rows += [[], list(CHECK_COLUMNS)]
        header_rows.add(start + len(rows))
        rows += [[c.get(key) for key in CHECK_COLUMNS] for c in checks]
    return rows


def _flatten(value, prefix: str = ""):
    """``(dotted path, scalar)`` pairs of a nested JSON value (lists indexed from 1)."""
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _flatten(item, f"{prefix}.{key}" if prefix else str(key))
    elif isinstance(value, list):
        if all(not isinstance(v, dict | list) for v in value):
            yield prefix, ", ".join(str(v) for v in value)
        else:
            for i, item in enumerate(value, start=1):
                yield from _flatten(item, f"{prefix}.{i}")
    else:
        yield prefix, value


def _response_sheet(ws, board: Board, edges: BandEdges) -> None:
    f_start, f_stop = analysis_range(edges)
    f_hz, gain_db, phase_deg = response_table(board.circuit, f_start, f_stop,
                                              RESPONSE_POINTS_PER_DECADE)
    for col, name in enumerate(("frequency_hz", "gain_db", "phase_deg"), start=1):
        _put(ws, 1, col, name).font = _BOLD
    for r, values in enumerate(zip(f_hz, gain_db, phase_deg, strict=True), start=2):
        for col, value in enumerate(values, start=1):
            _put(ws, r, col, float(value))
    ws.freeze_panes = "A2"
    _widths(ws)
    last = len(f_hz) + 1
    chart = ScatterChart()
    chart.title = "Gain of Vout/Vs"
    chart.style = 13
    chart.scatterStyle = "line"
    chart.x_axis.title = "Frequency (Hz)"
    chart.y_axis.title = "Gain (dB)"
    chart.x_axis.scaling.logBase = 10
    chart.x_axis.scaling.min = f_start
    chart.x_axis.scaling.max = f_stop
    chart.x_axis.delete = False
    chart.y_axis.delete = False
    xs = Reference(ws, min_col=1, min_row=2, max_row=last)
    ys = Reference(ws, min_col=2, min_row=1, max_row=last)
    series = Series(ys, xs, title_from_data=True)
    series.marker.symbol = "none"
    series.smooth = False
    chart.series.append(series)
    chart.height, chart.width = 9, 18
    ws.add_chart(chart, "E2")


_CORE_DATES = re.compile(rb"(<dcterms:(created|modified)[^>]*>)[^<]*(</dcterms:\2>)")


def _fixed_zip(data: bytes, stamp: dt.datetime) -> bytes:
    """Rewrite the package with fixed document dates and fixed zip entry dates."""
    iso = stamp.strftime("%Y-%m-%dT%H:%M:%SZ").encode("ascii")
    src = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            body = src.read(info.filename)
            if info.filename == "docProps/core.xml":
                body = _CORE_DATES.sub(lambda m: m.group(1) + iso + m.group(3), body)
            entry = zipfile.ZipInfo(info.filename, date_time=stamp.timetuple()[:6])
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = 0o600 << 16
            dst.writestr(entry, body)
    return out.getvalue()
