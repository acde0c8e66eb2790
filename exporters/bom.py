"""BOM lines shared by the CSV and the spreadsheet: one line per group of equal parts.

Columns follow KiCad's built-in BOM export (KiCad schematic-editor manual, BOM):
``Reference``, ``Value``, ``Datasheet``, ``Footprint``, ``Qty``, ``DNP``, then our fields.
Parts group when value, footprint and every field agree; references are joined in natural
order with a bare comma ("R1,R2,R10"); a multi-unit op-amp package counts once. Groups are
ordered by their first reference (natural order). Every text cell is neutralised by
:func:`exporters.names.cell_text`.
"""

from __future__ import annotations

from exporters.board import Board
from exporters.names import cell_text
from exporters.values import join_refs, natural_key

COLUMNS = ("Reference", "Value", "Datasheet", "Footprint", "Qty", "DNP", "Description",
           "Tolerance", "Voltage", "Dielectric", "Manufacturer", "MPN")
QTY_COLUMN = COLUMNS.index("Qty")


def bom_lines(board: Board, *, text=cell_text) -> list[list]:
    """Rows (without the header): text cells as ``text(cell)`` (CSV-neutralised by
    default; the workbook passes :func:`exporters.names.sheet_text`), ``Qty`` as ``int``."""
    groups: dict[tuple, list[str]] = {}
    for part in board.parts:
        key = (part.value, part.footprint, part.description, part.field("Tolerance"),
               part.field("Voltage"), part.field("Dielectric"), part.field("Manufacturer"),
               part.field("MPN"))
        groups.setdefault(key, []).append(part.ref)
    rows = []
    for key, refs in groups.items():
        value, footprint, description, tol, volt, diel, manufacturer, mpn = key
        rows.append([join_refs(refs), value, "~", footprint, len(refs), "", description, tol,
                     volt, diel, manufacturer, mpn])
    rows.sort(key=lambda row: natural_key(row[0].split(",")[0]))
    return [[cell if isinstance(cell, int) else text(cell) for cell in row]
            for row in rows]
