"""KiCad-compatible CSV BOM: every field quoted, inner quotes doubled, LF line ends.

Layout of KiCad's built-in BOM export, "CSV" preset (KiCad schematic-editor manual, BOM),
plus our fields;
cells neutralised against formula injection (:func:`exporters.names.cell_text`).
"""

from __future__ import annotations

import csv
import io
from decimal import Decimal

from exporters.board import Board
from exporters.bom import COLUMNS, bom_lines
from exporters.stock import PartsLibrary


def bom_csv(board: Board, library: PartsLibrary | None = None) -> str:
    """The BOM as CSV text (UTF-8 when encoded; no byte-order mark). Costs are written as
    plain decimals (``0.0036``), empty when unknown."""
    buf = io.StringIO()
    writer = csv.writer(buf, quoting=csv.QUOTE_ALL, lineterminator="\n")
    writer.writerow(COLUMNS)
    for row in bom_lines(board, library):
        writer.writerow([format(cell, "f") if isinstance(cell, Decimal) else str(cell)
                         for cell in row])
    return buf.getvalue()
