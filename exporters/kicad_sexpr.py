"""KiCad S-expression netlist (``.net``, what the PCB editor imports).

Layout and rules from KiCad's file-format documentation (S-expression format and the
netlist export of the schematic editor): the first line holds
``(export`` and a space, ``(version "E")`` first, every atom quoted through the one escaper
:func:`exporters.names.sx`, deterministic uuid5 time stamps per placed unit, net codes from 1,
no ``units``/``groups``/``variants`` items. No date unless one is given. The design identity
sits in the root sheet's title block, comment 1: ``design_id <id>`` (KiCad's title-block
comment fields).
"""

from __future__ import annotations

from exporters.board import Board
from exporters.kicad_common import DESIGN_ID_COMMENT, TOOL, comp_fields
from exporters.names import sx
from exporters.stock import PartsLibrary


def kicad_net(board: Board, *, date: str | None = None,
              library: PartsLibrary | None = None) -> str:
    """The ``.net`` file as text (LF line ends)."""
    design = f"(source {sx(board.name or 'gainchain design')})"
    if date:
        design += f" (date {sx(date)})"
    design += f" (tool {sx(TOOL)})"
    design += (f' (sheet (number "1") (name "/") (tstamps "/") (title_block '
               f'(title {sx(board.name or "gainchain design")}) '
               f'(comment (number "1") (value {sx(DESIGN_ID_COMMENT + board.design_id)}))))')
    lines = ['(export (version "E")', f"  (design {design})", "  (components"]
    for part in board.parts:
        lines.append(f"    (comp (ref {sx(part.ref)}) (value {sx(part.value)}) "
                     f"(footprint {sx(part.footprint)})")
        fields = comp_fields(part, library, board.circuit.opamp.id)
        if fields:
            lines.append("      (fields " + " ".join(
                f"(field (name {sx(name)}) {sx(value)})" for name, value in fields) + ")")
        lines.append(f"      (libsource (lib {sx(part.lib)}) (part {sx(part.symbol)}) "
                     f"(description {sx(part.description)}))")
        lines.append('      (sheetpath (names "/") (tstamps "/"))')
        lines.append("      (tstamps " + " ".join(sx(t) for t in part.tstamps) + "))")
    lines[-1] += ")"
    lines.append("  (nets")
    pin_info = {(p.ref, pin.number): pin for p in board.parts for pin in p.pins}
    for code, (net, nodes) in enumerate(board.nets.items(), start=1):
        lines.append(f"    (net (code {sx(str(code))}) (name {sx(net)})")
        for ref, number in nodes:
            pin = pin_info[(ref, number)]
            func = f" (pinfunction {sx(pin.function)})" if pin.function else ""
            lines.append(f"      (node (ref {sx(ref)}) (pin {sx(number)}){func} "
                         f"(pintype {sx(pin.type)}))")
        lines[-1] += ")"
    lines[-1] += "))"
    return "\n".join(lines) + "\n"
