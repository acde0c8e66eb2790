"""BOM lines shared by the CSV and the spreadsheet: one line per group of equal parts.

Columns follow KiCad's built-in BOM export (KiCad schematic-editor manual, BOM):
``Reference``, ``Value``,
``Datasheet``, ``Footprint``, ``Qty``, ``DNP``, then our fields, then the stock columns
``Internal PN``, ``Unit cost``, ``Extended cost`` (unit cost x Qty), ``Stocked`` ("yes" |
"no") and ``Design ID`` (the design identity, ``service.engine.model.identity``, on every
line so that a line read alone still names its design). Parts group when value, footprint
and every field agree; references are joined in natural order with a bare comma
("R1,R2,R10"); a multi-unit op-amp package counts once. Groups are ordered by their first
reference (natural order). Every text cell is neutralised by
:func:`exporters.names.cell_text`; costs are exact decimals (``exporters.stock.money``).

A line is stocked when a parts library is given and its part matches a stocked part
(:func:`exporters.stock.match`); the stocked part's internal number, manufacturer, MPN and
price fill the line. An op-amp line keeps the op-amp's (catalog) manufacturer and MPN unless
a stocked ``opamp`` entry gives its own.
"""

from __future__ import annotations

from decimal import Decimal

from exporters.board import Board
from exporters.names import cell_text
from exporters.stock import (
    CAPACITOR,
    KIND_OF_PREFIX,
    RESISTOR,
    PartsLibrary,
    match,
    money,
)
from exporters.values import join_refs, natural_key

COLUMNS = ("Reference", "Value", "Datasheet", "Footprint", "Qty", "DNP", "Description",
           "Tolerance", "Voltage", "Dielectric", "Manufacturer", "MPN", "Internal PN",
           "Unit cost", "Extended cost", "Stocked", "Design ID")
QTY_COLUMN = COLUMNS.index("Qty")
UNIT_COST_COLUMN = COLUMNS.index("Unit cost")
EXTENDED_COST_COLUMN = COLUMNS.index("Extended cost")
STOCKED_COLUMN = COLUMNS.index("Stocked")
#: Columns holding numbers (``int`` or ``Decimal``; "" when a cost is unknown).
NUMBER_COLUMNS = (QTY_COLUMN, UNIT_COST_COLUMN, EXTENDED_COST_COLUMN)


def _groups(board: Board) -> list[tuple[list[str], object]]:
    groups: dict[tuple, list] = {}
    for part in board.parts:
        key = (part.value, part.footprint, part.description, part.field("Tolerance"),
               part.field("Voltage"), part.field("Dielectric"), part.field("Manufacturer"),
               part.field("MPN"))
        groups.setdefault(key, [[], part])[0].append(part.ref)
    out = [(refs, part) for refs, part in groups.values()]
    out.sort(key=lambda item: natural_key(sorted(item[0], key=natural_key)[0]))
    return out


def bom_lines(board: Board, library: PartsLibrary | None = None, *,
              text=cell_text) -> list[list]:
    """Rows (without the header): text cells as ``text(cell)`` (CSV-neutralised by
    default; the workbook passes :func:`exporters.names.sheet_text`), ``Qty`` as ``int``,
    costs as ``Decimal`` (or ``""`` when not priced)."""
    rows = []
    for refs, part in _groups(board):
        stock = match(part, library, opamp_id=board.circuit.opamp.id)
        manufacturer, mpn = part.field("Manufacturer"), part.field("MPN")
        internal_pn, unit, extended = "", "", ""
        if stock is not None:
            manufacturer = stock.manufacturer or manufacturer
            mpn = stock.mpn or mpn
            internal_pn = stock.internal_pn
            if stock.unit_cost is not None:
                unit = money(stock.unit_cost)
                extended = unit * len(refs)
        rows.append([join_refs(refs), part.value, "~", part.footprint, len(refs), "",
                     part.description, part.field("Tolerance"), part.field("Voltage"),
                     part.field("Dielectric"), manufacturer, mpn, internal_pn, unit, extended,
                     "yes" if stock is not None else "no", board.design_id])
    return [[cell if isinstance(cell, int | Decimal) else text(cell) for cell in row]
            for row in rows]


def bom_total(rows: list[list]) -> Decimal | None:
    """Sum of the priced lines' extended costs; None when no line is priced."""
    priced = [row[EXTENDED_COST_COLUMN] for row in rows
              if isinstance(row[EXTENDED_COST_COLUMN], Decimal)]
    return sum(priced, Decimal(0)) if priced else None


def bom_cost(board: Board, library: PartsLibrary | None) -> dict | None:
    """``{"currency", "total", "unpriced_lines"}`` of the board; None without a library.

    ``total`` sums the priced lines (None when none is priced); ``unpriced_lines`` counts
    the lines without a price (unstocked lines, op-amps and connectors included).
    """
    if library is None:
        return None
    rows = bom_lines(board, library)
    total = bom_total(rows)
    unpriced = sum(1 for row in rows if not isinstance(row[EXTENDED_COST_COLUMN], Decimal))
    return {"currency": library.currency, "total": None if total is None else float(total),
            "unpriced_lines": unpriced}


def unstocked_references(board: Board, library: PartsLibrary | None) -> list[str]:
    """References of the lines no stocked part matches, among the kinds the library holds
    (resistors and capacitors always; op-amps and connectors when it lists any)."""
    if library is None:
        return []
    kinds = {p.kind for p in library.parts} | {RESISTOR, CAPACITOR}
    return [row[0] for row in bom_lines(board, library)
            if row[STOCKED_COLUMN] == "no" and KIND_OF_PREFIX.get(row[0][:1]) in kinds]
