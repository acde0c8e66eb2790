"""A board drawn as a schematic sheet: ``schematic(board, fmt="svg"|"png") -> bytes``.

Pure: a :class:`~exporters.board.Board` in, image bytes out. The drawing is made with the
``schemdraw`` package (its SVG backend for SVG, matplotlib for PNG) in a look of our own
(ink colours, label colours, title block). Every part of the board appears with its
reference (the BOM's and the netlists' references: they all come from
:func:`exporters.board.build_board`) and its value as the exporters write it
(:func:`exporters.values.eda_value`).

Layout (common practice for a hand sketch: signal left to right, supplies and references
as symbols):

* the signal row: the off-board source, J1, each stage, the output coupling, J2 and the
  off-board load; long cascades wrap onto further rows, joined by net labels;
* each op-amp unit is placed from its nets alone (:func:`plan`): the parts on the path from
  the stage input to the unit's signal input are drawn in series; parts between the unit's
  output and its inverting input are drawn in parallel as the feedback network; chains of
  parts from an input to a fixed net (GND, VCC, VEE, the reference) hang off that input;
* under the signal row: the bias network (divider, bypass and the VMID follower when
  buffered), the spare units, the supply row (J3, bulk and decoupling capacitors and each
  package's supply pins between the rails) and, generically, any part the rules above did
  not place (drawn between labels of its two nets), so a part added to the board always
  appears;
* a title block with the design's name, its id, the op-amp and the supply.

Determinism: no timestamps, no random ids; text is written as SVG ``<text>`` elements
(searchable) and PNG metadata carries no software or date stamp.
"""

from __future__ import annotations

import io
import itertools
import math
import re
from dataclasses import dataclass, field

from exporters.board import Board, Part
from service.engine.model.circuit import INVERTING, SINGLE

#: Image size limits (pixels) of both formats; the natural size is NATURAL_PX_PER_UNIT
#: pixels per drawing unit, scaled down to fit MAX_PX.
MIN_PX, MAX_PX = 200, 4000
NATURAL_PX_PER_UNIT = 40.0
#: Stages per row before the cascade wraps onto the next row.
STAGES_PER_ROW = 4
FORMATS = ("svg", "png")

# ---- look ------------------------------------------------------------------------------
INK = "#1d3557"  # wires and symbols
REF_COLOUR = "#b5451b"  # references
VALUE_COLOUR = "#2a6f5b"  # values
NET_COLOUR = "#6a4c93"  # net labels
OFF_BOARD = "#8d99ae"  # the source and the load (not on the board)
PAPER = "#fbfaf6"
FRAME = "#1d3557"
SVG_FONT = "DejaVu Sans, Verdana, Arial, sans-serif"
MPL_FONT = "DejaVu Sans"
FONT_PT = 10.5
SMALL_PT = 9.0
TITLE_PT = 13.0
LINE_W = 1.4
#: Points per drawing unit (schemdraw's 0.5 inch per unit, 72 pt per inch).
PT_PER_UNIT = 36.0
#: Baseline below the anchor, in font sizes, for each vertical alignment: a capital's
#: height is about 0.72 of the size and descenders about 0.22 (DejaVu Sans, from memory).
_BASELINE_DROP = {"top": 0.75, "center": 0.36, "bottom": -0.22}

# ---- grid (drawing units; a unit is 0.5 inch at the natural size) ----------------------
L_SERIES = 2.2  # horizontal part length
L_SHUNT = 1.8  # vertical part length
PIN_DY = 0.625  # op-amp input pins sit this far above/below the output (schemdraw's Opamp)
AMP_LEN = 2.5 * math.sqrt(3) / 2  # op-amp body length (schemdraw's Opamp)
ROW_GAP = 1.7  # distance from a pin to the first feedback row
ROW_STEP = 1.7  # between feedback rows
CHAIN_STEP = 2.6  # between parallel chains (room for the labels on their right)


@dataclass
class UnitPlan:
    """Where one op-amp unit's parts go (see :func:`plan`)."""

    unit: object  # exporters.board.OpAmpUnit
    kind: str  # "stage" | "follower" | "spare"
    input_net: str | None = None  # net the unit's signal comes from (stages, follower)
    series: list = field(default_factory=list)  # [(part, net on its input side)]
    n_top: bool = False  # inverting input on top (signal into -in)
    feedback: list = field(default_factory=list)  # parts between out and -in
    p_chains: list = field(default_factory=list)  # [[(part, near net)], ...] off +in
    n_chains: list = field(default_factory=list)  # off -in


@dataclass
class Plan:
    stages: list
    follower: UnitPlan | None
    spares: list
    output_series: list  # [(part, near net)] from the last output to J2
    bias_top: list  # parts rail -> bias node
    bias_bottom: list  # parts bias node -> GND
    bias_net: str | None
    supply: list  # parts between a rail and GND
    connectors: dict  # role -> part
    packages: list  # op-amp package parts
    others: list  # parts no rule placed


def _fixed_nets(board: Board) -> set[str]:
    return {"GND", "VCC", "VEE", board.ref_net}


def plan(board: Board) -> Plan:
    """Assign every part of ``board`` to a place on the sheet, from its nets alone.

    Parts no rule claims land in ``others`` (drawn generically); each part is placed once.
    """
    fixed = _fixed_nets(board)
    passives = [p for p in board.parts if len(p.pins) == 2 and p.prefix in ("R", "C", "L")]
    free = {p.ref: p for p in passives}
    connectors: dict[str, Part] = {}
    unplaced: list[Part] = []  # parts of a kind the rules below do not draw
    for part in board.parts:
        if part.prefix == "J" and part.role in ("input", "output", "power") \
                and part.role not in connectors:
            connectors[part.role] = part
        elif part.prefix not in ("R", "C", "L", "U") or (part.prefix != "U" and
                                                         part not in passives):
            unplaced.append(part)
    supply_pins = ("V+", "V-")
    packages = [p for p in board.parts if p.prefix == "U"
                and all(any(pin.function == f for pin in p.pins) for f in supply_pins)]
    unplaced += [p for p in board.parts if p.prefix == "U" and p not in packages]
    unit_nets = {n for u in board.units for n in (u.inp, u.inn, u.out)}
    conn_nets = {pin.net for p in connectors.values() for pin in p.pins}

    def nets(part: Part) -> tuple[str, str]:
        return part.pins[0].net, part.pins[1].net

    def other(part: Part, net: str) -> str:
        a, b = nets(part)
        return b if a == net else a

    def touching(net: str) -> list[Part]:
        return [p for p in free.values() if net in nets(p)]

    def take(part: Part) -> Part:
        return free.pop(part.ref)

    def private(net: str) -> bool:
        return net not in fixed and net not in unit_nets and net not in conn_nets

    def chains_off(node: str) -> list[list[tuple[Part, str]]]:
        """Chains node -> (private nets) -> a fixed net, up to three parts long."""
        found = []
        for first in touching(node):
            if first.ref not in free:  # taken by an earlier chain
                continue
            chain, here, part = [], node, first
            while part is not None and len(chain) < 3:
                chain.append((part, here))
                here = other(part, here)
                if here in fixed:
                    break
                nxt = [p for p in touching(here) if p.ref not in {c.ref for c, _ in chain}]
                part = nxt[0] if private(here) and len(nxt) == 1 else None
            if here in fixed:
                for part, _ in chain:
                    take(part)
                found.append(chain)
        return found

    def path(start: str, goal: str) -> list[tuple[Part, str]] | None:
        """Shortest series path start -> goal through non-fixed nets (breadth first)."""
        if start == goal:
            return []
        frontier = [(start, [])]
        seen = {start}
        while frontier:
            nxt = []
            for net, steps in frontier:
                for part in sorted(touching(net), key=lambda p: _ref_key(p.ref)):
                    far = other(part, net)
                    if far == goal:
                        return steps + [(part, net)]
                    if far in seen or far in fixed or far in unit_nets:
                        continue
                    seen.add(far)
                    nxt.append((far, steps + [(part, net)]))
            frontier = nxt
        return None

    stages, spares, follower = [], [], None
    signal_in = next((pin.net for pin in connectors["input"].pins if pin.number == "1"), "IN") \
        if "input" in connectors else "IN"
    here = signal_in
    for unit in board.units:
        if unit.role.startswith("stage"):
            up = UnitPlan(unit, "stage", input_net=here)
            target = unit.inp if unit.inp not in fixed else unit.inn
            found = path(here, target)
            if found is None and target == unit.inp:
                target, found = unit.inn, path(here, unit.inn)
            for part, _ in found or []:
                take(part)
            up.series = found or []
            up.n_top = target == unit.inn
            here = unit.out
            stages.append(up)
        elif unit.inp not in fixed and unit.inn == unit.out == board.ref_net:
            follower = UnitPlan(unit, "follower", input_net=unit.inp)
        else:
            spares.append(UnitPlan(unit, "spare"))
    for up in stages + spares + ([follower] if follower else []):
        unit = up.unit
        if unit.inn != unit.out:
            up.feedback = [take(p) for p in list(free.values())
                           if set(nets(p)) == {unit.inn, unit.out}]
        if unit.inp not in fixed and up.kind != "follower":
            up.p_chains = chains_off(unit.inp)
        if unit.inn not in fixed and unit.inn != unit.out:
            up.n_chains = chains_off(unit.inn)

    out_net = next((pin.net for pin in connectors["output"].pins if pin.number == "1"), None) \
        if "output" in connectors else None
    output_series = []
    if out_net is not None and stages:
        found = path(stages[-1].unit.out, out_net)
        for part, _ in found or []:
            take(part)
        output_series = found or []

    bias_net = follower.unit.inp if follower else (
        board.ref_net if board.ref_net not in ("GND",) else None)
    bias_top, bias_bottom = [], []
    if bias_net is not None:
        for part in list(free.values()):
            if set(nets(part)) in ({"VCC", bias_net}, {"VEE", bias_net}):
                bias_top.append(take(part))
        for part in list(free.values()):
            if set(nets(part)) == {bias_net, "GND"}:
                bias_bottom.append(take(part))
    supply = [take(p) for p in list(free.values())
              if set(nets(p)) in ({"VCC", "GND"}, {"VEE", "GND"}, {"VCC", "VEE"})]
    others = sorted([*free.values(), *unplaced], key=lambda p: _ref_key(p.ref))
    return Plan(stages=stages, follower=follower, spares=spares, output_series=output_series,
                bias_top=bias_top, bias_bottom=bias_bottom, bias_net=bias_net, supply=supply,
                connectors=connectors, packages=packages, others=others)


def _chain_end(chain) -> str:
    """The net a chain of ``(part, near net)`` steps ends on."""
    part, near = chain[-1]
    return part.pins[1].net if part.pins[0].net == near else part.pins[0].net


def _ref_key(ref: str):
    return [int(t) if t.isdigit() else t for t in re.split(r"(\d+)", ref)]


# ---- text ------------------------------------------------------------------------------
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def _clean(text: str) -> str:
    """User text on the sheet: control characters become spaces (XML 1.0 cannot hold them)."""
    return _CONTROL.sub(" ", text or "")


class _Sheet:
    """A schemdraw drawing with our look and absolute placement helpers."""

    def __init__(self, fmt: str):
        import schemdraw
        import schemdraw.elements as elm

        self.fmt = fmt
        self.elm = elm
        self.late_texts: list = []
        self.d = schemdraw.Drawing(canvas="svg" if fmt == "svg" else "matplotlib", show=False)
        self.d.config(unit=2.0, fontsize=FONT_PT, color=INK, lw=LINE_W, bgcolor=PAPER,
                      font=SVG_FONT if fmt == "svg" else MPL_FONT, margin=0.4)

    def esc(self, text: str) -> str:
        """Escape text for the backend: schemdraw's SVG text parser reads XML markup and
        ``$...$`` math; matplotlib reads ``$...$`` math (escaped as ``\\$``)."""
        text = _clean(text)
        if self.fmt == "svg":
            return text.replace("&", "&amp;").replace("$", "&#36;")
        return text.replace("$", r"\$")

    def add(self, element):
        return self.d.add(element)

    def rect(self, corner1, corner2, *, color=INK):
        self.add(self.elm.Rect(corner1=corner1, corner2=corner2).at((0, 0)).theta(0)
                 .color(color))

    def wire(self, *points, color=INK, ls="-"):
        for a, b in itertools.pairwise(points):
            if a != b:
                self.add(self.elm.Line().endpoints(a, b).color(color).linestyle(ls))

    def dot(self, xy):
        self.add(self.elm.Dot(radius=0.09).at(xy).theta(0).color(INK))

    def text(self, xy, text, *, color=INK, size=FONT_PT, halign="center", valign="center"):
        if not text:
            return
        # Every text sits on its alphabetic baseline: SVG renderers differ on the other
        # dominant-baseline values ("hanging", "central"...), the alphabetic one is universal.
        baseline = xy[1] - _BASELINE_DROP[valign] * size / PT_PER_UNIT
        if self.fmt == "png" and any(ch in text for ch in "&<>$"):
            # schemdraw sizes every label with its SVG text parser, which chokes on markup
            # characters: such text is written straight onto the matplotlib axes instead.
            self.late_texts.append(((xy[0], baseline), self.esc(text), color, size, halign))
            return
        self.add(self.elm.Label().at((xy[0], baseline)).theta(0).label(
            self.esc(text), halign=halign, valign="base", color=color, fontsize=size))

    def part(self, part: Part, a, b, near_net: str | None = None, *, side: str = "auto"):
        """Draw a two-pin ``part`` from point ``a`` (on ``near_net``) to point ``b``."""
        elm = self.elm
        if part.prefix == "R":
            element = elm.ResistorIEC()
        elif part.prefix == "L":
            element = elm.Inductor2()
        else:
            element = elm.Capacitor(polar=part.polarised)
        start, end = a, b
        if part.polarised and near_net is not None and part.pins[0].net != near_net:
            start, end = b, a  # the + (pin 1) is drawn at the start
        self.add(element.endpoints(start, end).color(INK))
        self.part_label(part, a, b, side=side)

    def part_label(self, part: Part, a, b, *, side: str = "auto"):
        mx, my = (a[0] + b[0]) / 2, (a[1] + b[1]) / 2
        value = part.value
        if part.electrolytic:
            value = f"{value} {part.field('Voltage')}".strip()
        if abs(a[1] - b[1]) < 1e-9:  # horizontal: reference above, value below
            self.text((mx, my + 0.42), part.ref, color=REF_COLOUR, valign="bottom")
            self.text((mx, my - 0.42), value, color=VALUE_COLOUR, valign="top")
            return
        right = side != "left"
        x = mx + (0.45 if right else -0.45)
        halign = "left" if right else "right"
        self.text((x, my + 0.08), part.ref, color=REF_COLOUR, halign=halign, valign="bottom")
        self.text((x, my - 0.08), value, color=VALUE_COLOUR, halign=halign, valign="top")

    def terminal(self, xy, net: str, board: Board, direction: str = "down"):
        """A fixed net's symbol at ``xy``: ground, a supply bar or a net label."""
        elm = self.elm
        if net == "GND":
            g = elm.Ground().at(xy).color(INK)
            if direction == "up":
                g = g.theta(180)
            self.add(g)
        elif net in ("VCC", "VEE"):
            x, y = xy
            if direction == "down":
                self.add(elm.Vss().at(xy).theta(0).color(INK))
                self.text((x, y - 0.55), net, color=NET_COLOUR, valign="top")
            else:
                self.add(elm.Vdd().at(xy).theta(0).color(INK))
                self.text((x, y + 0.55), net, color=NET_COLOUR, valign="bottom")
        else:
            self.net_label(xy, net, direction)

    def net_label(self, xy, net: str, direction: str = "right"):
        """A net label at the wire end ``xy``: a flag pointing along the wire (left/right),
        or a short stub with a bar and the name (up/down)."""
        elm = self.elm
        x, y = xy
        if direction in ("left", "right"):
            width = 0.45 + 0.19 * len(net)
            sign = 1 if direction == "right" else -1
            self.add(elm.Tag(width=width, height=0.5).at(xy).theta(0 if sign > 0 else 180)
                     .color(NET_COLOUR))
            self.text((x + sign * (width / 2 + 0.12), y), net, color=NET_COLOUR, size=SMALL_PT)
            return
        sign = 1 if direction == "up" else -1
        bar_y = y + sign * 0.3
        self.add(elm.Line().endpoints(xy, (x, bar_y)).color(NET_COLOUR))
        self.add(elm.Line().endpoints((x - 0.25, bar_y), (x + 0.25, bar_y)).color(NET_COLOUR))
        self.text((x, bar_y + sign * 0.15), net, color=NET_COLOUR, size=SMALL_PT,
                  valign="bottom" if sign > 0 else "top")

    # ---- output ---------------------------------------------------------------------
    def bbox(self):
        return self.d.get_bbox()

    def svg_bytes(self, width_px: int, height_px: int) -> bytes:
        self.d.draw(show=False, canvas="svg")
        data = self.d.get_imagedata("svg")
        return _fix_svg(data, width_px, height_px)

    def png_bytes(self, width_px: int, height_px: int, box) -> bytes:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        w_units = box.xmax - box.xmin
        h_units = box.ymax - box.ymin
        px_per_unit = min(width_px / w_units, height_px / h_units)
        # schemdraw sizes text and lines in points at 0.5 inch per unit (36 pt per unit):
        # a dpi of 2 px/unit keeps their proportions at any pixel size.
        dpi = 2.0 * px_per_unit
        fig = Figure(figsize=(width_px / dpi, height_px / dpi), dpi=dpi, facecolor=PAPER)
        FigureCanvasAgg(fig)
        ax = fig.add_axes((0, 0, 1, 1))
        ax.set_axis_off()
        ax.set_facecolor(PAPER)
        self.d.draw(show=False, canvas=ax)
        for (x, y), text, color, size, halign in self.late_texts:
            ax.text(x, y, text, color=color, fontsize=size, fontfamily=MPL_FONT,
                    horizontalalignment=halign, verticalalignment="baseline", clip_on=False)
        cx, cy = (box.xmin + box.xmax) / 2, (box.ymin + box.ymax) / 2
        half_w, half_h = width_px / px_per_unit / 2, height_px / px_per_unit / 2
        ax.set_xlim(cx - half_w, cx + half_w)
        ax.set_ylim(cy - half_h, cy + half_h)
        ax.set_aspect("auto")
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=dpi, facecolor=PAPER, metadata={"Software": None})
        return buf.getvalue()


_SVG_SIZE = re.compile(rb'(<svg[^>]*?) height="[^"]*" width="[^"]*"')


def _fix_svg(data: bytes, width_px: int, height_px: int) -> bytes:
    """Set the asked size on the root element (the viewBox keeps the drawing's units) and
    add the XML declaration; schemdraw writes no date or random id."""
    data, count = _SVG_SIZE.subn(
        lambda m: m.group(1) + f' height="{height_px}" width="{width_px}"'.encode(), data,
        count=1)
    if count != 1:
        raise RuntimeError("unexpected SVG root element from schemdraw")
    return b'<?xml version="1.0" encoding="utf-8"?>\n' + data + b"\n"


# ---- layout ----------------------------------------------------------------------------
class _Layout:
    def __init__(self, sheet: _Sheet, board: Board, the_plan: Plan):
        self.s = sheet
        self.board = board
        self.plan = the_plan
        self.amp_value = next((p.value for p in the_plan.packages), "")
        self.min_y = 0.0
        self.signal_width = 0.0

    # one op-amp unit with its series input, feedback and shunt chains
    def unit_block(self, up: UnitPlan, x0: float, y0: float, *, input_from=None) -> float:
        """Draw ``up`` with its input terminal at ``(x0, y_top)``; returns the output x.

        ``input_from``: the point the input wire comes from (the previous output), or None.
        """
        s, elm = self.s, self.s.elm
        unit = up.unit
        fixed = _fixed_nets(self.board)
        y_top, y_bot = y0 + PIN_DY, y0 - PIN_DY
        top_net = unit.inn if up.n_top else unit.inp
        bot_net = unit.inp if up.n_top else unit.inn
        x = x0
        if input_from is not None:
            s.wire(input_from, (x0 - 0.5, input_from[1]), (x0 - 0.5, y_top), (x0, y_top))
        for part, near in up.series:
            s.part(part, (x, y_top), (x + L_SERIES, y_top), near)
            x += L_SERIES
        node = x + (0.5 if up.series else 1.2)
        s.wire((x, y_top), (node, y_top))
        top_chains = up.n_chains if up.n_top else up.p_chains
        bot_chains = up.p_chains if up.n_top else up.n_chains
        # chains off the top (+in) node: up to a reference or supply, down to GND/VEE
        chain_x = node
        any_down = False
        if not up.n_top:
            for i, chain in enumerate(top_chains):
                cx = node + i * CHAIN_STEP
                s.wire((chain_x, y_top), (cx, y_top))
                s.dot((cx, y_top))
                down = _chain_end(chain) in ("GND", "VEE")
                any_down |= down
                self.chain(chain, (cx, y_top), -1 if down else +1,
                           side="left" if down else "right")
                chain_x = cx
        # the inverting-input side sits right of a chain hanging down from +in
        n_x = chain_x + 1.3 if any_down else node
        ax = max(chain_x + 1.7, n_x + 0.9)
        amp = elm.Opamp(leads=False).at((ax, y0)).theta(0).color(INK)
        if not up.n_top:
            amp = amp.flip()  # +in on top
        s.add(amp)
        s.wire((chain_x, y_top), (ax, y_top))
        ox = ax + AMP_LEN
        s.text((ax + AMP_LEN * 0.42, y0 + (1.05 if up.n_top else -1.05)),
               f"{unit.ref}{unit.unit}" if self._multi() else unit.ref,
               color=REF_COLOUR, size=FONT_PT, valign="bottom" if up.n_top else "top")
        if top_net in fixed:
            s.terminal((x0, y_top), top_net, self.board, "down" if top_net == "GND" else "up")
        # the inverting-input side: feedback rows, then its chains
        fb_dir = +1 if up.n_top else -1
        y_pin = y_top if up.n_top else y_bot
        out_x = ox + 0.6
        s.wire((ox, y0), (out_x, y0))
        if not up.n_top:
            s.wire((ax, y_bot), (n_x, y_bot))
        n_chains = top_chains if up.n_top else bot_chains
        y_row = y_pin
        if unit.inn == unit.out:  # follower: output tied to -in
            y_row = y_pin + fb_dir * 1.0
            s.wire((n_x, y_pin), (n_x, y_row), (out_x, y_row), (out_x, y0))
            s.dot((out_x, y0))
        elif up.feedback:
            for i, part in enumerate(up.feedback):
                y_row = y_pin + fb_dir * (ROW_GAP + i * ROW_STEP)
                s.part(part, (n_x, y_row), (out_x, y_row), unit.inn)
            s.wire((n_x, y_pin), (n_x, y_row))
            s.wire((out_x, y0), (out_x, y_row))
            s.dot((out_x, y0))
            if up.n_top and up.series:
                s.dot((n_x, y_pin))
            for i in range(len(up.feedback) - 1):
                yy = y_pin + fb_dir * (ROW_GAP + i * ROW_STEP)
                s.dot((n_x, yy))
                s.dot((out_x, yy))
            if n_chains:
                s.dot((n_x, y_row))
            self.chains_from(n_chains, (n_x, y_row), fb_dir)
        else:
            self.chains_from(n_chains, (n_x, y_pin), fb_dir)
        self.min_y = min(self.min_y, y0 - 2.0, y_row - 1.0 if fb_dir < 0 else y0 - 2.0)
        if up.n_top:  # +in on the bottom: its chains or its fixed net
            s.wire((ax, y_bot), (ax - 0.5, y_bot))
            if bot_net in fixed:
                s.wire((ax - 0.5, y_bot), (ax - 0.5, y_bot - 0.5))
                s.terminal((ax - 0.5, y_bot - 0.5), bot_net, self.board, "down")
            else:
                self.chains_from(bot_chains, (ax - 0.5, y_bot), -1)
        elif bot_net in fixed and bot_net != unit.out:
            s.terminal((n_x, y_bot), bot_net, self.board, "down")
        return out_x

    def _multi(self) -> bool:
        return self.board.circuit.opamp.channels_per_package > 1

    def chains_from(self, chains, start, direction):
        s = self.s
        x, y = start
        for i, chain in enumerate(chains):
            cx = x - i * CHAIN_STEP
            if i:
                s.wire((x - (i - 1) * CHAIN_STEP, y), (cx, y))
                s.dot((x - (i - 1) * CHAIN_STEP, y))
            self.chain(chain, (cx, y), direction, side="left")

    def chain(self, chain, start, direction, side="right"):
        """Vertical chain from ``start`` going up (+1) or down (-1) to its fixed net."""
        s = self.s
        x, y = start
        for part, near in chain:
            y2 = y + direction * L_SHUNT
            s.part(part, (x, y), (x, y2), near, side=side)
            y = y2
            last_far = part.pins[1].net if part.pins[0].net == near else part.pins[0].net
        s.terminal((x, y), last_far, self.board, "up" if direction > 0 else "down")
        self.min_y = min(self.min_y, y - 1.0)

    # the signal row(s)
    def signal_rows(self) -> float:
        s, plan = self.s, self.plan
        board = self.board
        y0 = 0.0
        x = 0.0
        # off-board source: sine source to ground behind its impedance
        y_sig = y0 + PIN_DY if plan.stages else y0
        src_x = x
        s.add(s.elm.SourceSin().endpoints((src_x, y_sig - 2.4), (src_x, y_sig))
              .color(OFF_BOARD))
        s.add(s.elm.Ground().at((src_x, y_sig - 2.4)).color(OFF_BOARD))
        rs_end = src_x + L_SERIES + 0.4
        s.add(s.elm.ResistorIEC().endpoints((src_x, y_sig), (rs_end, y_sig)).color(OFF_BOARD)
              .linestyle("--"))
        r_src = board.circuit.source_impedance_ohm
        s.text(((src_x + rs_end) / 2, y_sig + 0.42), "source", color=OFF_BOARD,
               valign="bottom", size=SMALL_PT)
        s.text(((src_x + rs_end) / 2, y_sig - 0.42), f"{_ohm(r_src)} (off-board)",
               color=OFF_BOARD, valign="top", size=SMALL_PT)
        s.wire((rs_end, y_sig), (rs_end + 0.9, y_sig), color=OFF_BOARD, ls="--")
        x = rs_end + 0.9
        j1 = plan.connectors.get("input")
        if j1 is not None:
            x = self.connector(j1, x, y_sig)
        start = (x, y_sig)
        prev = None
        for i, up in enumerate(plan.stages):
            if i and i % STAGES_PER_ROW == 0:  # wrap: net label out, net label in
                net = up.input_net
                s.wire(prev, (prev[0] + 0.6, prev[1]))
                s.net_label((prev[0] + 0.6, prev[1]), net, "right")
                self.min_y -= 1.5
                y0 = self.min_y - 3.0
                x = 2.5
                s.net_label((x - 0.2, y0 + PIN_DY), net, "left")
                s.wire((x - 0.2, y0 + PIN_DY), (x, y0 + PIN_DY))
                prev = None
            x_in = x if prev is None else prev[0] + 1.0
            if prev is None and i == 0:
                x_in = start[0] + 1.4
                s.wire(start, (x_in, start[1]))
            out_x = self.unit_block(up, x_in, y0, input_from=prev)
            prev = (out_x, y0)
            x = out_x
            self.signal_width = max(self.signal_width, out_x)
        x, y = prev if prev is not None else start
        for part, near in plan.output_series:
            s.part(part, (x, y), (x + L_SERIES, y), near)
            x += L_SERIES
        s.wire((x, y), (x + 0.8, y))
        x += 0.8
        j2 = plan.connectors.get("output")
        if j2 is not None:
            x = self.connector(j2, x, y)
        # off-board load
        load_x = x + 2.0
        s.wire((x, y), (load_x, y), color=OFF_BOARD, ls="--")
        ret = self.board.load_return_net
        s.add(s.elm.ResistorIEC().endpoints((load_x, y), (load_x, y - L_SHUNT))
              .color(OFF_BOARD).linestyle("--"))
        s.text((load_x + 0.45, y - L_SHUNT / 2 + 0.08), "load", color=OFF_BOARD,
               halign="left", valign="bottom", size=SMALL_PT)
        s.text((load_x + 0.45, y - L_SHUNT / 2 - 0.08),
               f"{_ohm(board.circuit.load_ohm)} (off-board)", color=OFF_BOARD,
               halign="left", valign="top", size=SMALL_PT)
        s.terminal((load_x, y - L_SHUNT), ret, board, "down")
        self.signal_width = max(self.signal_width, load_x + 4.0)
        return self.min_y

    def connector(self, part: Part, x: float, y_pin1: float) -> float:
        """A 1xN header drawn as a box of numbered pins, pin 1 at ``y_pin1`` (the signal
        enters on the left, leaves on the right); the other pins end in their net's symbol
        on the right. Returns the x where the signal leaves it."""
        s = self.s
        pitch = 0.7
        n = len(part.pins)
        w = 0.9
        top = y_pin1 + 0.45
        bottom = y_pin1 - (n - 1) * pitch - 0.45
        s.rect((x, top), (x + w, bottom), color=INK)
        s.text((x + w / 2, top + 0.1), part.ref, color=REF_COLOUR, valign="bottom")
        s.text((x + w / 2, bottom - 0.1), part.value, color=VALUE_COLOUR, valign="top",
               size=SMALL_PT)
        for i, pin in enumerate(part.pins):
            py = y_pin1 - i * pitch
            s.add(s.elm.Dot(radius=0.1, open=True).at((x + w / 2, py)).theta(0).color(INK))
            s.text((x + w / 2 + 0.22, py + 0.05), pin.number, size=SMALL_PT * 0.8,
                   halign="left", valign="bottom")
            if i == 0:  # the signal passes through pin 1
                s.wire((x, py), (x + w / 2 - 0.1, py))
                s.wire((x + w / 2 + 0.1, py), (x + w, py))
                continue
            sx = x + w + 0.7
            s.wire((x + w / 2 + 0.1, py), (sx, py))
            s.terminal((sx, py), pin.net, self.board,
                       "down" if pin.net in ("GND", "VEE") else "right")
            self.min_y = min(self.min_y, py - 1.2)
        return x + w

    # the lower part: bias, spares, supply, others
    def lower(self, y_top: float) -> tuple[float, float]:
        s, plan, board = self.s, self.plan, self.board
        x = 0.0
        y = y_top - 3.2
        section_bottom = y
        if plan.bias_top or plan.bias_bottom or plan.follower:
            s.text((x, y + 1.6), "bias", color=INK, halign="left", size=SMALL_PT)
            node_y = y - L_SHUNT
            xb = x + 0.8
            for i, part in enumerate(plan.bias_top):
                px = xb + i * CHAIN_STEP
                rail = part.pins[0].net if part.pins[0].net != plan.bias_net else \
                    part.pins[1].net
                s.part(part, (px, y), (px, node_y), rail, side="right")
                s.terminal((px, y), rail, board, "up")
                if i:
                    s.wire((px - CHAIN_STEP, node_y), (px, node_y))
            bottoms = plan.bias_bottom
            right = xb
            for i, part in enumerate(bottoms):
                px = xb + i * CHAIN_STEP
                s.part(part, (px, node_y), (px, node_y - L_SHUNT), plan.bias_net, side="right")
                s.terminal((px, node_y - L_SHUNT), "GND", board, "down")
                if i:
                    s.wire((xb + (i - 1) * CHAIN_STEP, node_y), (px, node_y))
                    s.dot((xb + (i - 1) * CHAIN_STEP, node_y))
                right = px
            section_bottom = min(section_bottom, node_y - L_SHUNT - 1.2)
            node_right = right + 1.6
            s.wire((right, node_y), (node_right, node_y))
            if plan.follower is not None:
                up = plan.follower
                out_x = self.unit_block(up, node_right + 0.2, node_y - PIN_DY,
                                        input_from=None)
                s.wire((node_right, node_y), (node_right + 0.2, node_y))
                s.wire((out_x, node_y - PIN_DY), (out_x + 0.6, node_y - PIN_DY))
                s.net_label((out_x + 0.6, node_y - PIN_DY), board.ref_net, "right")
                x = out_x + 3.0
            else:
                s.net_label((node_right, node_y), plan.bias_net or board.ref_net, "right")
                x = node_right + 2.8
            section_bottom = min(section_bottom, self.min_y)
        for up in plan.spares:
            s.text((x, y + 1.6), "spare unit", color=INK, halign="left", size=SMALL_PT)
            out_x = self.unit_block(up, x + 0.3, y - 1.8, input_from=None)
            x = out_x + 2.0
            section_bottom = min(section_bottom, self.min_y)
        width = x
        # supply row
        y_vcc = section_bottom - 1.5
        self.supply_row(0.0, y_vcc, max(36.0, width, self.signal_width))
        return width, self.min_y

    def supply_row(self, x0: float, y_vcc: float, max_width: float):
        """J3, the rail capacitors and each package's supply pins between horizontal rails;
        wraps onto further bands past ``max_width`` (rails are named at each band's end)."""
        s, plan, board = self.s, self.plan, self.board
        single = board.circuit.supply.kind == SINGLE
        used = ["VCC", "GND"] + ([] if single else ["VEE"])
        h = 2.6
        s.text((x0, y_vcc + 1.0), "supply: connector, bulk and decoupling capacitors, "
               "op-amp supply pins", color=INK, halign="left", size=SMALL_PT)
        cols = [("cap", p, 2.6) for p in plan.supply]
        cols += [("pkg", p, 1.6 + 0.2 * len(p.value)) for p in plan.packages]
        j3 = plan.connectors.get("power")
        band_top = y_vcc
        first = True
        while first or cols:
            rails = {"VCC": band_top, "GND": band_top - h, "VEE": band_top - 2 * h}
            x_rail0 = x0 + (1.6 if first else 1.2)
            x = x_rail0 + 1.0
            band = []
            while cols and (not band or x + cols[0][2] - x0 <= max_width):
                kind, part, step = cols.pop(0)
                band.append((kind, part, x))
                x += step
            x_end = max(x - 0.8, x_rail0 + 1.0)
            last_cap = max((px for kind, _, px in band if kind == "cap"), default=x_rail0)
            has_cap = any(kind == "cap" for kind, _, _ in band)
            for net in used:
                if net == "GND" and not single and not has_cap and not first:
                    continue  # a band of dual-supply packages only: nothing on GND
                end = x_end if (single or net != "GND") else last_cap + 0.6
                s.wire((x_rail0, rails[net]), (end, rails[net]))
                s.text((end + 0.2, rails[net]), net, color=NET_COLOUR, halign="left",
                       size=SMALL_PT)
                if not first:
                    s.text((x_rail0 - 0.2, rails[net]), net, color=NET_COLOUR,
                           halign="right", size=SMALL_PT)
            if first and j3 is not None:  # the header's pins straight onto the rails
                jx = x0
                s.rect((jx, band_top + 0.45), (jx + 0.9, rails[used[-1]] - 0.45))
                s.text((jx + 0.45, band_top + 0.55), j3.ref, color=REF_COLOUR,
                       valign="bottom")
                s.text((jx + 0.45, rails[used[-1]] - 0.55), j3.value, color=VALUE_COLOUR,
                       valign="top", size=SMALL_PT)
                for pin in j3.pins:
                    py = rails.get(pin.net, rails["GND"])
                    s.add(s.elm.Dot(radius=0.1, open=True).at((jx + 0.45, py)).theta(0)
                          .color(INK))
                    s.text((jx + 0.67, py + 0.05), pin.number, size=SMALL_PT * 0.8,
                           halign="left", valign="bottom")
                    s.wire((jx + 0.55, py), (x_rail0, py))
            for kind, part, px in band:
                if kind == "cap":
                    a_net, b_net = part.pins[0].net, part.pins[1].net
                    ya, yb = rails.get(a_net, rails["GND"]), rails.get(b_net, rails["GND"])
                    top_net, bot_net = (a_net, b_net) if ya > yb else (b_net, a_net)
                    s.part(part, (px, rails[top_net]), (px, rails[bot_net]), top_net)
                    s.dot((px, rails[top_net]))
                    s.dot((px, rails[bot_net]))
                else:
                    self.power_unit(part, px, rails)
            bottom = rails[used[-1]]
            self.min_y = min(self.min_y, bottom - 1.0)
            band_top = bottom - 2.4
            first = False

    def power_unit(self, part: Part, px: float, rails: dict):
        """A package's supply pins: a box between the rails, pins numbered."""
        s = self.s
        pos = next(p for p in part.pins if p.function == "V+")
        neg = next(p for p in part.pins if p.function == "V-")
        y_top, y_bot = rails[pos.net], rails.get(neg.net, rails["GND"])
        box_top, box_bot = y_top - 0.8, y_bot + 0.8
        s.rect((px - 0.55, box_top), (px + 0.55, box_bot))
        s.text((px, (box_top + box_bot) / 2), part.ref, color=REF_COLOUR)
        s.text((px + 0.7, (box_top + box_bot) / 2), part.value, color=VALUE_COLOUR,
               halign="left", size=SMALL_PT)
        s.wire((px, y_top), (px, box_top))
        s.wire((px, box_bot), (px, y_bot))
        s.dot((px, y_top))
        s.dot((px, y_bot))
        s.text((px + 0.12, box_top + 0.1), pos.number, size=SMALL_PT * 0.8, halign="left",
               valign="bottom")
        s.text((px + 0.12, box_bot - 0.1), neg.number, size=SMALL_PT * 0.8, halign="left",
               valign="top")

    def others(self, y_top: float):
        """Parts no rule placed: each drawn between labels of its nets."""
        s = self.s
        if not self.plan.others:
            return
        y = y_top - 2.0
        s.text((0, y + 1.0), "other parts", color=INK, halign="left", size=SMALL_PT)
        x = 0.0
        for part in self.plan.others:
            nets = [pin.net for pin in part.pins]
            if len(part.pins) == 2 and part.prefix in ("R", "C", "L"):
                s.text((x, y), nets[0], color=NET_COLOUR, halign="right", size=SMALL_PT)
                s.part(part, (x + 0.2, y), (x + 0.2 + L_SERIES, y), nets[0])
                s.text((x + 0.4 + L_SERIES, y), nets[1], color=NET_COLOUR, halign="left",
                       size=SMALL_PT)
                x += L_SERIES + 4.5
            else:
                s.text((x, y + 0.2), part.ref, color=REF_COLOUR, halign="left",
                       valign="bottom")
                s.text((x, y - 0.2), f"{part.value}: " + ", ".join(
                    f"{p.number}={p.net}" for p in part.pins), color=VALUE_COLOUR,
                    halign="left", valign="top", size=SMALL_PT)
                x += 8.0
        self.min_y = min(self.min_y, y - 1.5)

    def title_block(self, right_x: float, bottom_y: float, name: str):
        s, board = self.s, self.board
        c = board.circuit
        w, h = 11.0, 3.2
        x1, y1 = right_x - w, bottom_y
        s.rect((x1, y1 + h), (right_x, y1), color=FRAME)
        s.wire((x1, y1 + h - 1.0), (right_x, y1 + h - 1.0), color=FRAME)
        supply = (f"single {c.supply.v_pos:g} V" if c.supply.kind == SINGLE
                  else f"dual +{c.supply.v_pos:g} / {c.supply.v_neg:g} V")
        topo = "inverting" if c.topology == INVERTING else "non-inverting"
        s.text((x1 + 0.3, y1 + h - 0.5), name or "gainchain design", color=INK,
               size=TITLE_PT, halign="left")
        lines = [
            f"gainchain cascade schematic · {c.n_stages} {topo} stage"
            + ("s" if c.n_stages != 1 else ""),
            f"op-amp {self.amp_value} · supply {supply}",
            f"design id {board.design_id}",
            "A design aid: prototype and measure before relying on it.",
        ]
        for i, line in enumerate(lines):
            s.text((x1 + 0.3, y1 + h - 1.35 - i * 0.5), line, color=INK, size=SMALL_PT,
                   halign="left")


def _ohm(value: float) -> str:
    from exporters.values import eda_value

    return eda_value(value) + " ohm"


def image_size(natural_w: float, natural_h: float, width_px: int | None,
               height_px: int | None) -> tuple[int, int]:
    """The image size in pixels: as asked; one side asked -> the other keeps the drawing's
    aspect ratio; none -> the natural size, scaled down to fit ``MAX_PX``. Within
    ``MIN_PX``..``MAX_PX``."""
    aspect = natural_h / natural_w

    def clamp(v: float) -> int:
        return int(min(MAX_PX, max(MIN_PX, round(v))))

    if width_px is not None and height_px is not None:
        return width_px, height_px
    if width_px is not None:
        return width_px, clamp(width_px * aspect)
    if height_px is not None:
        return clamp(height_px / aspect), height_px
    scale = min(1.0, MAX_PX / natural_w, MAX_PX / natural_h)
    return clamp(natural_w * scale), clamp(natural_h * scale)


def schematic(board: Board, *, fmt: str = "svg", width_px: int | None = None,
              height_px: int | None = None) -> bytes:
    """Draw ``board`` as a schematic sheet; ``fmt`` is "svg" or "png".

    :raise ValueError: unknown ``fmt`` or a size outside ``MIN_PX``..``MAX_PX``.
    """
    if fmt not in FORMATS:
        raise ValueError(f"fmt must be one of {', '.join(FORMATS)}, got {fmt!r}")
    for label, v in (("width_px", width_px), ("height_px", height_px)):
        if v is not None and not MIN_PX <= v <= MAX_PX:
            raise ValueError(f"{label} must be within {MIN_PX}..{MAX_PX}, got {v!r}")
    if fmt == "png":
        import matplotlib

        matplotlib.use("Agg", force=False)
    import schemdraw.backends.svg as sd_svg

    sd_svg.config.text = "text"  # searchable <text> elements, no font outlines
    sheet = _Sheet(fmt)
    layout = _Layout(sheet, board, plan(board))
    y = layout.signal_rows()
    top_box = sheet.bbox()
    width, y = layout.lower(y)
    layout.others(layout.min_y)
    box = sheet.bbox()
    right = max(box.xmax, top_box.xmax, width)
    layout.title_block(right, layout.min_y - 4.0, board.name)
    box = sheet.bbox()
    natural_w = (box.xmax - box.xmin + 0.8) * NATURAL_PX_PER_UNIT
    natural_h = (box.ymax - box.ymin + 0.8) * NATURAL_PX_PER_UNIT
    w_px, h_px = image_size(natural_w, natural_h, width_px, height_px)
    if fmt == "svg":
        return sheet.svg_bytes(w_px, h_px)
    return sheet.png_bytes(w_px, h_px, _pad(box, 0.4))


def _pad(box, margin: float):
    from schemdraw.types import BBox

    return BBox(box.xmin - margin, box.ymin - margin, box.xmax + margin, box.ymax + margin)
