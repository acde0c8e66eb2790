"""One entry point per download format: ``export(kind, circuit, ...) -> bytes``.

Used by the web layer (``service/blueprints/exports.py``) and usable from a CLI or a batch
job: no Flask here. ``kind`` is the file suffix the API uses (``bom.csv``, ``bom.xlsx``,
``netlist.cir``, ``netlist.net``, ``netlist.xml``).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from exporters.board import DEFAULT_SIZE, build_board
from exporters.bom_csv import bom_csv
from exporters.bom_xlsx import XLSX_MIME, bom_xlsx
from exporters.kicad_sexpr import kicad_net
from exporters.kicad_xml import kicad_xml
from exporters.names import safe_filename
from exporters.response import edges_from_report
from exporters.spice import spice_deck
from exporters.stock import PartsLibrary
from service.engine.model.circuit import Circuit
from service.engine.model.parts import Tolerances

#: kind -> Content-Type of the download.
MIME_TYPES = {
    "bom.csv": "text/csv; charset=utf-8",
    "bom.xlsx": XLSX_MIME,
    "netlist.cir": "text/plain; charset=utf-8",
    "netlist.net": "text/plain; charset=utf-8",
    "netlist.xml": "application/xml",
}
KINDS = tuple(MIME_TYPES)


@dataclass(frozen=True)
class ExportFile:
    filename: str
    mimetype: str
    data: bytes


def export(kind: str, circuit: Circuit, *, name: str | None = None, report: dict | None = None,
           size: str = DEFAULT_SIZE, date: dt.date | None = None,
           resistor_tolerance_pct: float | None = None,
           capacitor_tolerance_pct: float | None = None,
           tolerances: Tolerances | None = None,
           library: PartsLibrary | None = None) -> ExportFile:
    """Render ``circuit`` (and, when given, its design response ``report``) as ``kind``;
    the BOMs match their lines against ``library`` (stocked parts) when one is given.

    ``tolerances`` (default: the design response's ``tolerances`` block when ``report``
    carries one, else the engine defaults) sets the tolerance each BOM line states.

    :raise ValueError: unknown ``kind`` or ``size``.
    """
    if kind not in MIME_TYPES:
        raise ValueError(f"kind must be one of {', '.join(KINDS)}, got {kind!r}")
    if tolerances is None and (report or {}).get("tolerances"):
        tolerances = Tolerances(**report["tolerances"])
    board = build_board(circuit, name=name or "", size=size,
                        resistor_tolerance_pct=resistor_tolerance_pct,
                        capacitor_tolerance_pct=capacitor_tolerance_pct,
                        tolerances=tolerances)
    date_text = None if date is None else date.isoformat()
    if kind == "bom.csv":
        data = bom_csv(board, library).encode("utf-8")
    elif kind == "bom.xlsx":
        data = bom_xlsx(board, report=report, date=date, library=library)
    elif kind == "netlist.cir":
        as_built = ((report or {}).get("performance") or {}).get("as_built")
        data = spice_deck(board, edges=edges_from_report(as_built)).encode("utf-8")
    elif kind == "netlist.net":
        data = kicad_net(board, date=date_text, library=library).encode("utf-8")
    else:
        data = kicad_xml(board, date=date_text, library=library)
    return ExportFile(filename=f"{safe_filename(name)}-{kind}", mimetype=MIME_TYPES[kind],
                      data=data)
