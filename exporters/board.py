"""A circuit turned into a complete board: every part, reference, footprint and net.

All exporters draw from :func:`build_board`, so every format lists the same parts with the
same references and the same connectivity. Pure: a :class:`~service.engine.model.circuit.Circuit`
(plus options) in, a frozen :class:`Board` out.

What the board adds to the circuit model (``service/engine/model/circuit.py``; the model's nodes in
brackets):

* references in signal order, per prefix: stage 1's parts first, then stage 2 ..., the output
  capacitor, the bias network, then the decoupling and bulk capacitors; op-amp units packed
  in signal order into packages of ``channels_per_package`` (U1 unit A, B, ..., the buffered
  bias follower takes the next unit after the last stage);
* unused units tied to REF (common practice: it keeps spare amplifiers from oscillating or
  railing): followers (+in on REF, -in tied to the output) for a unity-gain-stable part,
  non-inverting amplifiers of REF with two resistors for a part stable only at a higher
  noise gain (values from :mod:`service.engine.model.spares`);
* one 100 nF decoupling capacitor per supply pin per package (common practice), and one bulk
  capacitor per rail (``BULK_C_F``, common practice: 10-100 uF at the supply entry);
* connectors: J1 input (1 IN, 2 GND), J2 output (1 OUT, 2 the load's return: GND, or VMID
  when the load returns to REF), J3 power (1 VCC, 2 GND[, 3 VEE]);
* capacitor technology, voltage rating and orientation from the DC node voltages (below).

DC node voltages (capacitors open, op-amp inputs drawing no current, ideal feedback): GND 0,
VCC ``v_pos``, VEE ``v_neg``, VDIV = VMID = ``v_pos r_bottom / (r_top + r_bottom)`` on a
single supply (divider formula); every stage node (P, N, G, M, O) sits at REF; IN and OUT
(the source and load sides) sit at 0 V. A polarised capacitor's pin 1 (+) goes to the net
with the higher DC voltage. Nets whose DC voltages differ by less than
``BIPOLAR_BELOW_V`` (interstage coupling capacitors, both sides at REF) get a bipolar
(non-polarised) electrolytic when electrolytic at all: their DC polarity is set only by
offsets, so a polarised part could see reverse voltage.
"""

from __future__ import annotations

import hashlib
import json
import re
import uuid
from dataclasses import dataclass, field, replace

from exporters.values import eda_value, natural_key
from service.engine.model import parts as parts_mod
from service.engine.model.circuit import INVERTING, SINGLE, Circuit
from service.engine.model.identity import design_id
from service.engine.model.parts import Tolerances
from service.engine.model.spares import spare_units

SIZES = ("0603", "0805", "1206")
DEFAULT_SIZE = "0603"

_R_FOOTPRINT = {"0603": "Resistor_SMD:R_0603_1608Metric",
                "0805": "Resistor_SMD:R_0805_2012Metric",
                "1206": "Resistor_SMD:R_1206_3216Metric"}
_C_FOOTPRINT = {"0603": "Capacitor_SMD:C_0603_1608Metric",
                "0805": "Capacitor_SMD:C_0805_2012Metric",
                "1206": "Capacitor_SMD:C_1206_3216Metric"}
#: SMD aluminium electrolytic cases by rated C x V (uF x V), smallest first. Typical
#: catalogue ranges, from memory (common practice); footprint names from KiCad's
#: standard footprint libraries (KiCad Library Conventions).
_CP_CASES = ((100.0, "Capacitor_SMD:CP_Elec_4x5.4"), (250.0, "Capacitor_SMD:CP_Elec_5x5.4"),
             (500.0, "Capacitor_SMD:CP_Elec_6.3x5.4"), (1000.0, "Capacitor_SMD:CP_Elec_6.3x7.7"),
             (2500.0, "Capacitor_SMD:CP_Elec_8x10"), (float("inf"), "Capacitor_SMD:CP_Elec_10x10"))
_SOIC = {8: "Package_SO:SOIC-8_3.9x4.9mm_P1.27mm", 14: "Package_SO:SOIC-14_3.9x8.7mm_P1.27mm"}
#: Pin headers and generic connector symbols of KiCad's standard libraries (from memory).
_HEADER = {2: "Connector_PinHeader_2.54mm:PinHeader_1x02_P2.54mm_Vertical",
           3: "Connector_PinHeader_2.54mm:PinHeader_1x03_P2.54mm_Vertical"}

DECOUPLING_C_F = 100e-9  # per supply pin per package (common practice)
BULK_C_F = 47e-6  # per rail at the power connector (common practice)
#: Capacitor classes, ratings and tolerances come from the engine's one source of truth
#: (:mod:`service.engine.model.parts`), which the Monte Carlo uses too; re-exported here.
C0G_MAX_F = parts_mod.C0G_MAX_F
X7R_MAX_F = parts_mod.X7R_MAX_F
X5R_MAX_F = parts_mod.X5R_MAX_F
X5R_MAX_RATING_V = parts_mod.X5R_MAX_RATING_V
DERATING = parts_mod.DERATING
CERAMIC_RATINGS_V = parts_mod.CERAMIC_RATINGS_V
ELECTROLYTIC_RATINGS_V = parts_mod.ELECTROLYTIC_RATINGS_V
BIPOLAR_BELOW_V = parts_mod.BIPOLAR_BELOW_V
#: Board-level parts outside the circuit model (not in the signal path).
_OFF_SIGNAL_PATH = ("decoupling", "bulk")

#: Package pinouts (de facto industry standard, common practice): unit -> (+in, -in, out).
PINOUTS = {
    1: {"units": {"A": ("3", "2", "6")}, "vpos": "7", "vneg": "4", "pins": 8},
    2: {"units": {"A": ("3", "2", "1"), "B": ("5", "6", "7")}, "vpos": "8", "vneg": "4",
        "pins": 8},
    4: {"units": {"A": ("3", "2", "1"), "B": ("5", "6", "7"), "C": ("10", "9", "8"),
                  "D": ("12", "13", "14")}, "vpos": "4", "vneg": "11", "pins": 14},
}
#: Symbols (KiCad's standard symbol libraries, from memory): the generic dual and quad
#: sit in ``Device`` in KiCad 5.1
#: and 6.0; there is no generic 8-pin single, so its symbol comes from the organisation's
#: own library (configurable through ``opamp_symbols``).
DEFAULT_OPAMP_SYMBOLS = {1: ("gainchain", "Opamp_Single_8pin"), 2: ("Device", "Opamp_Dual"),
                         4: ("Device", "Opamp_Quad")}
#: Symbol units per package (the dual's power unit is C, the quad's E).
_SYMBOL_UNITS = {1: ("A",), 2: ("A", "B", "C"), 4: ("A", "B", "C", "D", "E")}


@dataclass(frozen=True)
class Pin:
    number: str
    net: str
    function: str = ""  # "+", "-", "OUT", "V+", "V-" for op-amps; "" for passives
    type: str = "passive"  # passive | input | output | power_in


@dataclass(frozen=True)
class Part:
    """One placed part (one reference). ``value_si`` is the value in ohm or farad (R, C)."""

    ref: str
    value: str
    footprint: str
    lib: str
    symbol: str
    description: str
    pins: tuple[Pin, ...]
    fields: tuple[tuple[str, str], ...] = ()
    value_si: float | None = None
    role: str = ""
    polarised: bool = False
    electrolytic: bool = False
    tstamps: tuple[str, ...] = ()

    @property
    def prefix(self) -> str:
        return self.ref.rstrip("0123456789")

    def field(self, name: str) -> str:
        return dict(self.fields).get(name, "")


@dataclass(frozen=True)
class OpAmpUnit:
    """One op-amp channel: package ref, unit letter and the nets on its three pins."""

    ref: str
    unit: str
    inp: str
    inn: str
    out: str
    role: str


@dataclass(frozen=True)
class Board:
    name: str
    circuit: Circuit
    parts: tuple[Part, ...]
    units: tuple[OpAmpUnit, ...]
    nets: dict = field(hash=False)  # net name -> tuple of (ref, pin) in first-seen order
    dc_v: dict = field(hash=False)  # net name -> DC voltage (V)
    ref_net: str = "GND"
    load_return_net: str = "GND"
    design_id: str = ""  # service.engine.model.identity.design_id of the circuit

    def part(self, ref: str) -> Part:
        return next(p for p in self.parts if p.ref == ref)

    def pin_net(self) -> dict:
        """``{(ref, pin): net}`` for every connected pin."""
        return {(p.ref, pin.number): pin.net for p in self.parts for pin in p.pins}


class _Nodes:
    """Union-find over the model's nodes; each class becomes one net."""

    def __init__(self):
        self.parent: dict[str, str] = {}

    def find(self, a: str) -> str:
        self.parent.setdefault(a, a)
        while self.parent[a] != a:
            self.parent[a] = self.parent[self.parent[a]]
            a = self.parent[a]
        return a

    def union(self, a: str, b: str) -> None:
        ra, rb = self.find(a), self.find(b)
        if ra != rb:
            self.parent[rb] = ra


def _net_label(node: str) -> tuple[int, str]:
    """(priority, readable name) of a model node; the lowest priority names a merged net."""
    fixed = {"GND": 0, "VCC": 1, "VEE": 2, "VMID": 3, "VDIV": 4, "OUT": 5, "X1": 6}
    if node in fixed:
        return fixed[node], "IN" if node == "X1" else node
    kind, k = node[0], node[1:]
    if node.startswith("SPARE_"):
        return 20, node[len("SPARE_"):] + "_SPARE"
    order = {"O": 7, "P": 8, "M": 9, "N": 10, "G": 11, "X": 12}[kind]
    suffix = {"O": "OUT", "P": "INP", "M": "M", "N": "INN", "G": "G", "X": "IN"}[kind]
    return order, f"S{k}_{suffix}"


def _group_dc(members: set[str], supply, v_ref: float) -> float:
    """DC voltage of a net from its model nodes (see the module docstring)."""
    if "GND" in members:
        return 0.0
    if "VCC" in members:
        return supply.v_pos
    if "VEE" in members:
        return supply.v_neg
    if members & {"VMID", "VDIV"} or any(
            m.startswith("SPARE_") or re.fullmatch(r"[PNGMO]\d+", m) for m in members):
        return v_ref
    return 0.0  # IN and OUT: the source and the load are ground referenced


def tstamp_seed(circuit: Circuit, name: str) -> str:
    """Seed of the placed units' UUIDs: SHA-256 of the canonical JSON of name + circuit
    (the design identity proper is ``Board.design_id``, from the circuit alone)."""
    blob = json.dumps({"name": name, "circuit": circuit.to_dict()}, sort_keys=True,
                      separators=(",", ":"))
    return hashlib.sha256(blob.encode("utf-8")).hexdigest()[:32]


def _uuid(design: str, ref: str, unit: str) -> str:
    """Deterministic UUID per placed unit (uuid5), so re-imports update, not replace."""
    return str(uuid.uuid5(uuid.NAMESPACE_URL, f"gainchain:{design}/{ref}/{unit}"))


def _fmt_v(v: float) -> str:
    return f"{v:g}V"


def _cp_footprint(c_f: float, rating_v: float) -> str:
    cv = c_f * 1e6 * rating_v
    return next(fp for limit, fp in _CP_CASES if cv <= limit)


def build_board(circuit: Circuit, *, name: str = "", size: str = DEFAULT_SIZE,
                resistor_tolerance_pct: float | None = None,
                capacitor_tolerance_pct: float | None = None,
                tolerances: Tolerances | None = None,
                opamp_symbols: dict | None = None) -> Board:
    """Lay out the complete board of ``circuit`` (see the module docstring for the rules).

    :param size: chip size of resistors and ceramic capacitors, one of ``SIZES``.
    :param tolerances: every part kind's tolerance (default: the engine's defaults);
        ``resistor_tolerance_pct`` / ``capacitor_tolerance_pct`` override its two fields.
        Each capacitor's class and tolerance come from
        :func:`service.engine.model.parts.capacitor_class`.
    :raise ValueError: unknown ``size`` or unsupported ``channels_per_package``.
    """
    if size not in SIZES:
        raise ValueError(f"size must be one of {', '.join(SIZES)}, got {size!r}")
    channels = circuit.opamp.channels_per_package
    if channels not in PINOUTS:
        raise ValueError(f"channels_per_package must be 1, 2 or 4, got {channels!r}")
    symbols = {**DEFAULT_OPAMP_SYMBOLS, **(opamp_symbols or {})}
    single = circuit.supply.kind == SINGLE
    inverting = circuit.topology == INVERTING
    n = circuit.n_stages
    bias = circuit.bias
    buffered = bias is not None and bias.buffered

    # ---- connectivity in model nodes ------------------------------------------------
    nodes = _Nodes()
    ref_node = "VMID" if single else "GND"
    if single and not buffered:
        nodes.union("VMID", "VDIV")
    for k in range(2, n + 1):
        nodes.union(f"O{k - 1}", f"X{k}")
    for k, st in enumerate(circuit.stages, start=1):
        if st.c_couple_f is None:
            nodes.union(f"X{k}", f"M{k}" if inverting else f"P{k}")
    if circuit.c_out_f is None:
        nodes.union(f"O{n}", "OUT")

    # raw part list: (prefix, role, kind, value, (node1, node2)) in reference order
    passives: list[tuple[str, str, float, tuple[str, str]]] = []
    for k, st in enumerate(circuit.stages, start=1):
        x = f"X{k}"
        if inverting:
            if st.c_couple_f is not None:
                passives.append(("C", f"stage {k} coupling", st.c_couple_f, (x, f"M{k}")))
            passives.append(("R", f"stage {k} input", st.r_in_ohm, (f"M{k}", f"N{k}")))
            passives.append(("R", f"stage {k} feedback", st.r_feedback_ohm, (f"O{k}", f"N{k}")))
            if st.c_feedback_f is not None:
                passives.append(("C", f"stage {k} feedback (band limit)", st.c_feedback_f,
                                 (f"O{k}", f"N{k}")))
        else:
            if st.c_couple_f is not None:
                passives.append(("C", f"stage {k} coupling", st.c_couple_f, (x, f"P{k}")))
            if st.r_bias_ohm is not None:
                passives.append(("R", f"stage {k} bias", st.r_bias_ohm, (f"P{k}", ref_node)))
            passives.append(("R", f"stage {k} feedback", st.r_feedback_ohm, (f"O{k}", f"N{k}")))
            if st.c_feedback_f is not None:
                passives.append(("C", f"stage {k} feedback (band limit)", st.c_feedback_f,
                                 (f"O{k}", f"N{k}")))
            if st.c_gain_f is None:
                passives.append(("R", f"stage {k} gain", st.r_gain_ohm, (f"N{k}", ref_node)))
            else:
                passives.append(("R", f"stage {k} gain", st.r_gain_ohm, (f"N{k}", f"G{k}")))
                passives.append(("C", f"stage {k} gain leg", st.c_gain_f, (f"G{k}", "GND")))
    if circuit.c_out_f is not None:
        passives.append(("C", "output coupling", circuit.c_out_f, (f"O{n}", "OUT")))
    if bias is not None:
        passives.append(("R", "bias divider top", bias.r_top_ohm, ("VCC", "VDIV")))
        passives.append(("R", "bias divider bottom", bias.r_bottom_ohm, ("VDIV", "GND")))
        passives.append(("C", "bias bypass", bias.c_bypass_f, ("VDIV", "GND")))

    # op-amp units in signal order, then the bias follower, then spares
    roles = [(f"stage {k}", f"P{k}" if not inverting else ref_node, f"N{k}", f"O{k}")
             for k in range(1, n + 1)]
    if buffered:
        roles.append(("bias follower", "VDIV", "VMID", "VMID"))
    packages = -(-len(roles) // channels)
    letters = list(PINOUTS[channels]["units"])
    unit_specs = []
    spares = {s.index: s for s in spare_units(circuit)}
    for i in range(packages * channels):
        ref, letter = f"U{i // channels + 1}", letters[i % channels]
        if i < len(roles):
            role, inp, inn, out = roles[i]
        elif spares[i].r_feedback_ohm is None:
            spare = f"SPARE_{ref}{letter if channels > 1 else ''}"
            role, inp, inn, out = "unused (follower of REF)", ref_node, spare, spare
        else:  # a decompensated part: a non-inverting amplifier of REF (model/spares.py)
            name = f"{ref}{letter if channels > 1 else ''}"
            out, inn = f"SPARE_{name}", f"SPARE_{name}_N"
            role, inp = f"unused (amplifier of REF, gain {spares[i].noise_gain:.3g})", ref_node
            passives.append(("R", f"spare {name} feedback", spares[i].r_feedback_ohm,
                             (out, inn)))
            passives.append(("R", f"spare {name} gain", spares[i].r_gain_ohm, (inn, ref_node)))
        unit_specs.append((ref, letter, role, inp, inn, out))

    rails = [("VCC", "vpos")] + ([] if single else [("VEE", "vneg")])
    for p in range(1, packages + 1):
        for rail, _ in rails:
            passives.append(("C", f"U{p} {rail} decoupling", DECOUPLING_C_F, (rail, "GND")))
    for rail, _ in rails:
        passives.append(("C", f"{rail} bulk", BULK_C_F, (rail, "GND")))

    load_return = "OUT_RETURN"
    nodes.union("GND" if circuit.c_out_f is not None else ref_node, load_return)
    connectors = [("input", (("1", "X1"), ("2", "GND"))),
                  ("output", (("1", "OUT"), ("2", load_return))),
                  ("power", (("1", "VCC"), ("2", "GND")) + ((("3", "VEE"),) if not single
                                                             else ()))]

    # ---- net names and DC voltages --------------------------------------------------
    used = {a for *_, (a, b) in passives} | {b for *_, (a, b) in passives}
    used |= {x for spec in unit_specs for x in spec[3:]} | {"VCC", "GND", "X1", "OUT"}
    used |= set() if single else {"VEE"}
    groups: dict[str, list[str]] = {}
    for node in sorted(used | {load_return}):
        groups.setdefault(nodes.find(node), []).append(node)
    net_of: dict[str, str] = {}
    net_rank: dict[str, tuple[int, str]] = {}
    v_ref = 0.0
    if bias is not None:  # divider formula; the follower (if any) copies it
        v_ref = circuit.supply.v_pos * bias.r_bottom_ohm / (bias.r_top_ohm + bias.r_bottom_ohm)
    dc_v: dict[str, float] = {}
    for members in groups.values():
        rank = min(_net_label(m) for m in members if m != load_return)
        for m in members:
            net_of[m] = rank[1]
        net_rank[rank[1]] = rank
        dc_v[rank[1]] = _group_dc(set(members), circuit.supply, v_ref)

    # ---- parts ----------------------------------------------------------------------
    did = tstamp_seed(circuit, name)
    counters = {"R": 0, "C": 0}
    parts: list[Part] = []
    tol = tolerances or Tolerances()
    if resistor_tolerance_pct is not None:
        tol = replace(tol, resistor_tolerance_pct=resistor_tolerance_pct)
    if capacitor_tolerance_pct is not None:
        tol = replace(tol, capacitor_tolerance_pct=capacitor_tolerance_pct)
    r_tol = f"{tol.resistor_tolerance_pct:g}%"
    for prefix, role, value, (a, b) in passives:
        counters[prefix] += 1
        ref = f"{prefix}{counters[prefix]}"
        na, nb = net_of[a], net_of[b]
        tstamps = (_uuid(did, ref, "A"),)
        if prefix == "R":
            parts.append(Part(ref=ref, value=eda_value(value), value_si=value,
                              footprint=_R_FOOTPRINT[size], lib="Device", symbol="R",
                              description="Resistor, thick film", role=role,
                              pins=(Pin("1", na), Pin("2", nb)),
                              fields=(("Tolerance", r_tol),), tstamps=tstamps))
            continue
        v_across = dc_v[na] - dc_v[nb]
        cls = parts_mod.capacitor_class(
            value, v_across, signal_path=not role.endswith(_OFF_SIGNAL_PATH))
        if cls.rating_v is None:
            raise ValueError(f"no standard voltage rating reaches {DERATING * abs(v_across):g} V")
        fields = (("Tolerance", f"{tol.pct(cls.kind):g}%"), ("Voltage", _fmt_v(cls.rating_v)))
        if cls.kind != parts_mod.ELECTROLYTIC:
            parts.append(Part(ref=ref, value=eda_value(value), value_si=value,
                              footprint=_C_FOOTPRINT[size], lib="Device", symbol="C",
                              description=f"Capacitor, ceramic {cls.dielectric}", role=role,
                              pins=(Pin("1", na), Pin("2", nb)),
                              fields=fields + (("Dielectric", cls.dielectric),),
                              tstamps=tstamps))
            continue
        fp = _cp_footprint(value, cls.rating_v)
        if cls.bipolar:
            parts.append(Part(ref=ref, value=eda_value(value), value_si=value, footprint=fp,
                              lib="Device", symbol="C", electrolytic=True,
                              description="Capacitor, aluminium electrolytic, bipolar",
                              role=role, pins=(Pin("1", na), Pin("2", nb)),
                              fields=fields + (("Dielectric", cls.dielectric),),
                              tstamps=tstamps))
            continue
        plus, minus = (na, nb) if v_across > 0 else (nb, na)
        parts.append(Part(ref=ref, value=eda_value(value), value_si=value, footprint=fp,
                          lib="Device", symbol="C_Polarized", electrolytic=True, polarised=True,
                          description="Capacitor, aluminium electrolytic, polarised",
                          role=role, pins=(Pin("1", plus), Pin("2", minus)),
                          fields=fields + (("Dielectric", cls.dielectric),),
                          tstamps=tstamps))

    opamp = circuit.opamp
    pinout = PINOUTS[channels]
    lib, symbol = symbols[channels]
    kind = {1: "Single", 2: "Dual", 4: "Quad"}[channels]
    amp_value = opamp.mpn or opamp.id or "OPAMP"
    amp_fields = (("Manufacturer", opamp.manufacturer), ("MPN", opamp.mpn))
    units: list[OpAmpUnit] = []
    neg_rail = "VEE" if not single else "GND"
    for p in range(1, packages + 1):
        ref = f"U{p}"
        pins: list[Pin] = []
        for spec in unit_specs:
            if spec[0] != ref:
                continue
            _, letter, role, inp, inn, out = spec
            p_in, p_inn, p_out = pinout["units"][letter]
            pins += [Pin(p_out, net_of[out], "OUT", "output"),
                     Pin(p_inn, net_of[inn], "-", "input"),
                     Pin(p_in, net_of[inp], "+", "input")]
            units.append(OpAmpUnit(ref, letter, net_of[inp], net_of[inn], net_of[out], role))
        pins += [Pin(pinout["vneg"], net_of[neg_rail], "V-", "power_in"),
                 Pin(pinout["vpos"], net_of["VCC"], "V+", "power_in")]
        pins.sort(key=lambda pin: int(pin.number))
        parts.append(Part(ref=ref, value=amp_value, footprint=_SOIC[pinout["pins"]], lib=lib,
                          symbol=symbol,
                          description=opamp.description or f"{kind} operational amplifier",
                          role="op-amp package", pins=tuple(pins), fields=amp_fields,
                          tstamps=tuple(_uuid(did, ref, u) for u in _SYMBOL_UNITS[channels])))

    for j, (role, conn_pins) in enumerate(connectors, start=1):
        ref = f"J{j}"
        count = len(conn_pins)
        parts.append(Part(ref=ref, value=f"Conn_01x{count:02d}", footprint=_HEADER[count],
                          lib="Connector_Generic", symbol=f"Conn_01x{count:02d}",
                          description=f"Pin header 1x{count:02d}, {role}", role=role,
                          pins=tuple(Pin(num, net_of[node]) for num, node in conn_pins),
                          tstamps=(_uuid(did, ref, "A"),)))

    parts.sort(key=lambda p: natural_key(p.ref))
    nets: dict[str, list[tuple[str, str]]] = {}
    for part in parts:
        for pin in part.pins:
            nets.setdefault(pin.net, []).append((part.ref, pin.number))
    order = sorted(nets, key=lambda net: net_rank[net])
    return Board(name=name, circuit=circuit, parts=tuple(parts), units=tuple(units),
                 nets={net: tuple(nets[net]) for net in order},
                 dc_v={net: dc_v[net] for net in order}, ref_net=net_of[ref_node],
                 load_return_net=net_of[load_return], design_id=design_id(circuit))
