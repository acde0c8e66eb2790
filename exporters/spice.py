"""Self-contained SPICE deck (ngspice / SPICE3 subset) of a circuit's small-signal model.

The deck reproduces the circuit model exactly (issue 2, "The circuit object and its model"):

* op-amp subcircuit ``GC_OPAMP inp inn out``: ``E1`` gives ``A0 (V+ - V-)`` (no input current:
  a VCVS draws none), ``RPOLE``/``CPOLE`` a pole with ``RC = A0 / (2 pi gbw_hz)``, ``E2`` a
  zero-impedance output, so ``A(s) = A0 / (1 + s A0 / (2 pi gbw_hz))``;
* the ideal source ``VS`` (``AC 1``, ground referenced) behind ``RSOURCE``, the supplies as DC
  sources (AC grounds), every R and C of the board (:mod:`exporters.board`) under its board
  reference, one ``X<ref><unit>`` call per op-amp unit (spare units included), and the load
  ``RLOAD`` from ``out`` to its return (``0``, or ``vmid`` when the load returns to VMID);
* numbers in plain exponent form (``1e-06``), never with SPICE scale suffixes (``1M`` is milli);
* one ``.ac dec`` sweep from at least a decade below the as-built f_low to a decade above
  f_high, and ``.print ac`` of ``vdb`` and ``vp`` (radians) of the voltage across RLOAD, so
  ``ngspice -b deck.cir`` prints the response as is.

The second line is the comment ``* design_id <id>`` (the design identity, ``Board.design_id``).
No ``.control`` block, ``.include``, ``.lib`` or ``shell`` is ever written; the only
user-chosen text (the design name, the op-amp id) passes :func:`exporters.names.spice_title`.
"""

from __future__ import annotations

import math

from exporters.board import Board
from exporters.names import spice_title
from exporters.response import BandEdges, analysis_range, band_edges
from exporters.values import spice_number as num

POINTS_PER_DECADE = 100
SUBCKT = "GC_OPAMP"


def spice_node(net: str) -> str:
    """Board net -> SPICE node: GND is ``0``; others lower case (names are ``[A-Z0-9_]``)."""
    return "0" if net == "GND" else net.lower()


def spice_deck(board: Board, *, edges: BandEdges | None = None,
               points_per_decade: int = POINTS_PER_DECADE) -> str:
    """The deck as text (LF line ends). ``edges`` defaults to the engine's as-built corners."""
    c = board.circuit
    edges = edges or band_edges(c)
    f_start, f_stop = analysis_range(edges)
    a0 = c.opamp.a0
    out_ret = spice_node(board.load_return_net)
    lines = [
        spice_title(board.name, default="gainchain design"),
        f"* design_id {board.design_id}",
        "* Small-signal SPICE deck written by gainchain from the circuit model.",
        "* A design aid: prototype and measure; follow applicable standards.",
        f"* op-amp: {spice_title(c.opamp.mpn or c.opamp.id or 'generic', default='generic')}",
        "* single pole: A(s) = A0/(1 + s*A0/(2*pi*GBW)), no input current, zero output",
        "* impedance; RPOLE*CPOLE = A0/(2*pi*GBW)",
        f".subckt {SUBCKT} inp inn out",
        f"E1 n1 0 inp inn {num(a0)}",
        "RPOLE n1 n2 1e+00",
        f"CPOLE n2 0 {num(a0 / (2.0 * math.pi * c.opamp.gbw_hz))}",
        "E2 out 0 n2 0 1e+00",
        f".ends {SUBCKT}",
        "* signal source (ground referenced) and its source impedance",
        "VS vs 0 DC 0 AC 1",
        f"RSOURCE vs {spice_node(_in_net(board))} {num(c.source_impedance_ohm)}",
        "* supplies (AC grounds)",
        f"VCC vcc 0 DC {num(c.supply.v_pos)}",
    ]
    if c.supply.kind == "dual":
        lines.append(f"VEE vee 0 DC {num(c.supply.v_neg)}")
    lines.append("* board parts (references as in the BOM and the KiCad netlists)")
    for part in board.parts:
        if part.prefix in ("R", "C"):
            a, b = (spice_node(pin.net) for pin in part.pins)
            lines.append(f"* {part.ref}: {part.role}")
            lines.append(f"{part.ref} {a} {b} {num(part.value_si)}")
    for unit in board.units:
        lines.append(f"* {unit.ref} unit {unit.unit}: {unit.role}")
        lines.append(f"X{unit.ref}{unit.unit} {spice_node(unit.inp)} {spice_node(unit.inn)} "
                     f"{spice_node(unit.out)} {SUBCKT}")
    probe = "out" if out_ret == "0" else f"out,{out_ret}"
    lines += [
        "* load: Vout is the voltage across RLOAD",
        f"RLOAD out {out_ret} {num(c.load_ohm)}",
        f".ac dec {int(points_per_decade)} {num(f_start)} {num(f_stop)}",
        f".print ac vdb({probe}) vp({probe})",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def _in_net(board: Board) -> str:
    """The net on the input connector's signal pin (J1 pin 1)."""
    return dict((pin.number, pin.net) for pin in board.part("J1").pins)["1"]
