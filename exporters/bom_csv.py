"""KiCad-compatible CSV BOM: every field quoted, inner quotes doubled, LF line ends.

Layout of KiCad's built-in BOM export, "CSV" preset (KiCad schematic-editor manual, BOM),
plus our fields;
cells neutralised against formula injection (:func:`exporters.names.cell_text`).
"""

from __future__ import annotations

import csv
import io

from exporters.board import Board
from exporters.bom import COLUMNS, bom_lines


def bom_csv(board: Board) -> str:
    """The BOM as CSV text (UTF-8 when encoded; no byte-order mark)."""
    buf = io.StringIO()
    writer = csv.writer(buf, quoting=csv.QUOTE_ALL, lineterminator="\n")
    writer.writerow(COLUMNS)
    for row in bom_lines(board):
        writer.writerow([str(cell) for cell in row])
    return buf.getvalue()
