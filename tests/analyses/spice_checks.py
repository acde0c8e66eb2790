"""Independent cross-checks of a design's build checks (issue 8): the circuit's JSON form as
an element list, SPICE decks for ngspice (.op, .ac, .tran) and a small numpy nodal solver.

Everything here reads the circuit JSON of a response (README "The circuit model") and
nothing from the engine, so the checks it feeds stay independent of the engine's code.

Element list (one per part of the circuit model, node names as in the README: ``vs``,
``x1``, ``p<k>``, ``n<k>``, ``o<k>``, ``g<k>``, ``m<k>``, ``vcc``, ``vdiv``, ``vmid``,
``out``; ground ``0``):

- ``("R", name, a, b, ohm)``, ``("C", name, a, b, farad)``;
- ``("V", name, a, b, dc_v, role)``: independent source, V(a) - V(b) = dc_v; ``role`` is
  ``"signal"`` (Vs), ``"supply"`` (VCC) or ``"dc"`` (an offset source, no AC);
- ``("I", name, a, b, dc_a)``: DC current source, current from a through it to b (SPICE
  convention, ngspice user manual "Independent Sources");
- op-amp units in ``Net.units``: ``V(out) = A(s) (V(+) - V(-))`` with
  ``A(s) = A0 / (1 + s A0 / (2 pi GBW))`` (README circuit model; single-pole model, common
  practice), no input current, zero output impedance.

Offsets (issue 8, DC errors): with ``offsets=True`` every op-amp unit (the stages and the
VMID follower) gets a DC voltage source ``vos<u>`` in series with its + input and two DC
current sources ``ibp<u>``/``ibn<u>`` from ground into its + and - inputs, all zero until a
deck or the solver sets them.

SPICE: op-amps as a subcircuit of an E (voltage-controlled voltage) source, an RC pole and a
unity E buffer; the clamped variant limits the output with a B (behavioural) source
``v = min(max(v(n2), lo), hi)``, the slew-limited one charges the pole capacitor from a B
current source bounded to +-slew x C (ngspice user manual, "Voltage-controlled voltage
sources (VCVS)" and "Non-linear dependent sources (B source)").
"""

from __future__ import annotations

import math
import os
import re
import subprocess
import tempfile
from dataclasses import dataclass, field

import numpy as np
from ngspice_support import NGSPICE, require_ngspice  # noqa: F401 (re-exported)

TWO_PI = 2.0 * math.pi


@dataclass
class Unit:
    """One op-amp unit: ``role`` is ``stage``, ``follower`` or ``spare``; ``plus`` is the
    node the op-amp senses as its + input (behind the offset source when there is one)."""

    name: str
    role: str
    stage: int | None
    plus: str
    minus: str
    out: str
    a0: float
    gbw_hz: float


@dataclass
class Net:
    elements: list = field(default_factory=list)
    units: list = field(default_factory=list)
    ref: str = "0"
    out: tuple = ("out", "0")
    stages: list = field(default_factory=list)  # (X_k, O_k) per stage
    plus_nodes: list = field(default_factory=list)  # the + input node of each stage
    v_pos: float = 0.0
    v_neg: float = 0.0

    def nodes(self) -> list:
        seen = []
        for el in self.elements:
            for node in el[2:4]:
                if node != "0" and node not in seen:
                    seen.append(node)
        for u in self.units:
            for node in (u.plus, u.minus, u.out):
                if node != "0" and node not in seen:
                    seen.append(node)
        return seen

    def value(self, name: str):
        for el in self.elements:
            if el[1] == name:
                return el
        raise KeyError(name)

    def set_dc(self, name: str, value: float) -> None:
        for i, el in enumerate(self.elements):
            if el[1] == name:
                self.elements[i] = (*el[:4], float(value), *el[5:])
                return
        raise KeyError(name)


def a0_of(opamp: dict) -> float:
    return 10.0 ** (opamp.get("a0_db", 100.0) / 20.0)


def build(circuit: dict, *, offsets: bool = False, psrr: bool = False) -> Net:
    """The element list of a circuit JSON (README circuit model, element by element)."""
    amp = circuit["opamp"]
    a0, gbw = a0_of(amp), float(amp["gbw_hz"])
    supply = circuit["supply"]
    net = Net(v_pos=float(supply["v_pos"]), v_neg=float(supply.get("v_neg") or 0.0))
    el = net.elements
    k_psrr = None
    if psrr and amp.get("psrr_db") is not None:
        k_psrr = 10.0 ** (-amp["psrr_db"] / 20.0)

    def unit(role, stage, plus, minus, out):
        u = len(net.units) + 1
        if offsets:
            el.append(("V", f"vos{u}", f"ip{u}", plus, 0.0, "dc"))
            el.append(("I", f"ibp{u}", "0", plus, 0.0))
            el.append(("I", f"ibn{u}", "0", minus, 0.0))
            plus = f"ip{u}"
        if k_psrr is not None:
            # PSRR as a supply-controlled source in series with the + input (README).
            el.append(("E", f"epsrr{u}", f"is{u}", plus, "vcc", "0", k_psrr))
            plus = f"is{u}"
        net.units.append(Unit(f"u{u}", role, stage, plus, minus, out, a0, gbw))

    bias = circuit.get("bias")
    if bias is None:
        ref = "0"
    else:
        el.append(("V", "vcc", "vcc", "0", net.v_pos, "supply"))
        el.append(("R", "rtop", "vcc", "vdiv", bias["r_top_ohm"]))
        el.append(("R", "rbot", "vdiv", "0", bias["r_bottom_ohm"]))
        el.append(("C", "cbyp", "vdiv", "0", bias["c_bypass_f"]))
        ref = "vdiv"
    net.ref = ref
    el.append(("V", "vs", "vs", "0", 0.0, "signal"))
    if circuit["source_impedance_ohm"] > 0:
        el.append(("R", "rsrc", "vs", "x1", circuit["source_impedance_ohm"]))
        x = "x1"
    else:
        x = "vs"
    inverting = circuit["topology"] == "inverting"
    stage_units = []
    for k, st in enumerate(circuit["stages"], start=1):
        o, n = f"o{k}", f"n{k}"
        if inverting:
            m = x
            if st.get("c_couple_f") is not None:
                m = f"m{k}"
                el.append(("C", f"cc{k}", x, m, st["c_couple_f"]))
            el.append(("R", f"rin{k}", m, n, st["r_in_ohm"]))
            el.append(("R", f"rf{k}", o, n, st["r_feedback_ohm"]))
            stage_units.append(("stage", k, "REF", n, o))
            net.plus_nodes.append("REF")
        else:
            p = x
            if st.get("c_couple_f") is not None:
                p = f"p{k}"
                el.append(("C", f"cc{k}", x, p, st["c_couple_f"]))
            if st.get("r_bias_ohm") is not None:
                el.append(("R", f"rb{k}", p, "REF", st["r_bias_ohm"]))
            el.append(("R", f"rf{k}", o, n, st["r_feedback_ohm"]))
            if st.get("c_gain_f") is None:
                el.append(("R", f"rg{k}", n, "REF", st["r_gain_ohm"]))
            else:
                el.append(("R", f"rg{k}", n, f"g{k}", st["r_gain_ohm"]))
                el.append(("C", f"cg{k}", f"g{k}", "0", st["c_gain_f"]))
            stage_units.append(("stage", k, p, n, o))
            net.plus_nodes.append(p)
        net.stages.append((x, o))
        x = o
    if circuit.get("c_out_f") is None:
        el.append(("R", "rload", x, "REF", circuit["load_ohm"]))
        net.out = (x, "REF")
    else:
        el.append(("C", "cout", x, "out", circuit["c_out_f"]))
        el.append(("R", "rload", "out", "0", circuit["load_ohm"]))
        net.out = ("out", "0")
    # Units in the order of the stability check: stages, then the VMID follower.
    for role, k, p, n, o in stage_units:
        unit(role, k, p, n, o)
    if bias is not None and bias["buffered"]:
        unit("follower", None, "vdiv", "vmid", "vmid")
        net.ref = "vmid"
    _rename(net, "REF", net.ref)
    return net


def _rename(net: Net, old: str, new: str) -> None:
    def r(node):
        return new if node == old else node

    net.elements = [(e[0], e[1], r(e[2]), r(e[3]), *e[4:]) if e[0] != "E" else
                    (e[0], e[1], r(e[2]), r(e[3]), r(e[4]), r(e[5]), e[6])
                    for e in net.elements]
    for u in net.units:
        u.plus, u.minus, u.out = r(u.plus), r(u.minus), r(u.out)
    net.plus_nodes = [r(p) for p in net.plus_nodes]
    net.out = tuple(r(n) for n in net.out)


def vdiv_v(circuit: dict) -> float:
    """VMID = v_pos Rb / (Rt + Rb) (voltage divider, common practice)."""
    b = circuit["bias"]
    return circuit["supply"]["v_pos"] * b["r_bottom_ohm"] / (b["r_top_ohm"] + b["r_bottom_ohm"])


# ---------------------------------------------------------------------------------------
# numpy modified nodal analysis (Ho, Ruehli, Brennan 1975 formulation, common practice)


def opamp_gain(unit: Unit, f_hz) -> np.ndarray:
    s = 1j * TWO_PI * np.asarray(f_hz, dtype=float)
    return unit.a0 / (1.0 + s * unit.a0 / (TWO_PI * unit.gbw_hz))


def solve(net: Net, f_hz, *, drive: str, replace_unit: str | None = None) -> dict:
    """Node voltages at each frequency (complex arrays), and ``"i:<name>"`` branch currents
    of voltage sources and unit outputs (current from the + node through the element).

    ``drive``: ``"signal"`` (Vs = 1, every other source 0), ``"supply"`` (VCC = 1), ``"dc"``
    (f must be 0: every source at its DC value, capacitors open). ``replace_unit`` swaps
    that unit for a 1 V independent source at its output (loop-gain measurement) with every
    other source at 0.
    """
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    nodes = net.nodes()
    idx = {n: i for i, n in enumerate(nodes)}
    vsrc = [e for e in net.elements if e[0] == "V"]
    esrc = [e for e in net.elements if e[0] == "E"]
    units = list(net.units)
    nn = len(nodes)
    branches = [e[1] for e in vsrc] + [e[1] for e in esrc] + [u.name for u in units]
    size = nn + len(branches)
    s = 1j * TWO_PI * f
    mat = np.zeros((f.size, size, size), dtype=complex)
    rhs = np.zeros((f.size, size), dtype=complex)

    def g(a, b, y):
        ia, ib = idx.get(a), idx.get(b)
        if ia is not None:
            mat[:, ia, ia] += y
        if ib is not None:
            mat[:, ib, ib] += y
        if ia is not None and ib is not None:
            mat[:, ia, ib] -= y
            mat[:, ib, ia] -= y

    for e in net.elements:
        if e[0] == "R":
            g(e[2], e[3], 1.0 / e[4])
        elif e[0] == "C":
            g(e[2], e[3], s * e[4])
        elif e[0] == "I" and drive == "dc" and replace_unit is None:
            if e[2] in idx:
                rhs[:, idx[e[2]]] -= e[4]
            if e[3] in idx:
                rhs[:, idx[e[3]]] += e[4]

    def branch(row, a, b):
        if a in idx:
            mat[:, idx[a], row] += 1.0
            mat[:, row, idx[a]] += 1.0
        if b in idx:
            mat[:, idx[b], row] -= 1.0
            mat[:, row, idx[b]] -= 1.0

    row = nn
    for e in vsrc:
        branch(row, e[2], e[3])
        if replace_unit is None:
            if drive == "dc":
                rhs[:, row] = e[4]
            elif drive == e[5]:
                rhs[:, row] = 1.0
        row += 1
    for e in esrc:
        branch(row, e[2], e[3])
        for node, sign in ((e[4], -1.0), (e[5], 1.0)):
            if node in idx:
                mat[:, row, idx[node]] += sign * e[6]
        row += 1
    for u in units:
        if u.out in idx:
            mat[:, idx[u.out], row] += 1.0
            mat[:, row, idx[u.out]] += 1.0
        if u.name == replace_unit:
            rhs[:, row] = 1.0
        else:
            a = opamp_gain(u, f) if drive != "dc" else np.full(f.size, u.a0)
            for node, sign in ((u.plus, -1.0), (u.minus, 1.0)):
                if node in idx:
                    mat[:, row, idx[node]] += sign * a
        row += 1
    x = np.linalg.solve(mat, rhs[..., None])[..., 0]
    out = {n: x[:, i] for n, i in idx.items()}
    out["0"] = np.zeros(f.size, dtype=complex)
    for i, name in enumerate(branches):
        out["i:" + name] = x[:, nn + i]
    return out


def natural_frequencies(net: Net) -> np.ndarray:
    """Natural frequencies s (rad/s) of the circuit with every independent source zeroed:
    the finite generalised eigenvalues of G x = -s C x (state-space form of the nodal
    equations, common practice), each op-amp unit written with its pole as a state
    y: (1 + s A0 / (2 pi GBW)) y = A0 (V+ - V-), V(out) = y. A circuit whose linear model
    has a natural frequency with a positive real part oscillates or latches."""
    import scipy.linalg

    nodes = net.nodes()
    idx = {n: i for i, n in enumerate(nodes)}
    vsrc = [e for e in net.elements if e[0] == "V"]
    esrc = [e for e in net.elements if e[0] == "E"]
    nn = len(nodes)
    size = nn + len(vsrc) + len(esrc) + 2 * len(net.units)
    gm, cm = np.zeros((size, size)), np.zeros((size, size))

    def stamp(mat, a, b, y):
        ia, ib = idx.get(a), idx.get(b)
        if ia is not None:
            mat[ia, ia] += y
        if ib is not None:
            mat[ib, ib] += y
        if ia is not None and ib is not None:
            mat[ia, ib] -= y
            mat[ib, ia] -= y

    def branch(row, a, b):
        for node, sign in ((a, 1.0), (b, -1.0)):
            if node in idx:
                gm[idx[node], row] += sign
                gm[row, idx[node]] += sign

    for e in net.elements:
        if e[0] == "R":
            stamp(gm, e[2], e[3], 1.0 / e[4])
        elif e[0] == "C":
            stamp(cm, e[2], e[3], e[4])
    row = nn
    for e in vsrc:
        branch(row, e[2], e[3])
        row += 1
    for e in esrc:
        branch(row, e[2], e[3])
        for node, sign in ((e[4], -1.0), (e[5], 1.0)):
            if node in idx:
                gm[row, idx[node]] += sign * e[6]
        row += 1
    for u in net.units:
        y = row + 1
        # output branch: V(out) - y = 0, its current enters the KCL of out
        if u.out in idx:
            gm[idx[u.out], row] += 1.0
            gm[row, idx[u.out]] += 1.0
        gm[row, y] -= 1.0
        # pole state: y + tau dy/dt - A0 (V+ - V-) = 0
        gm[y, y] = 1.0
        cm[y, y] = u.a0 / (TWO_PI * u.gbw_hz)
        for node, sign in ((u.plus, -1.0), (u.minus, 1.0)):
            if node in idx:
                gm[y, idx[node]] += sign * u.a0
        row += 2
    vals = scipy.linalg.eigvals(gm, -cm)
    # The pencil is singular (algebraic rows): its infinite eigenvalues come out of the QZ
    # step as inf or as round-off giants. No natural frequency of the model lies beyond the
    # fastest op-amp's GBW by many decades, so anything past 1e6 x 2 pi GBW is one of them.
    fastest = max((u.gbw_hz for u in net.units), default=1e9)
    vals = vals[np.isfinite(vals)]
    return vals[np.abs(vals) < 1e6 * TWO_PI * fastest]


def vdiff(sol: dict, a: str, b: str) -> np.ndarray:
    return sol[a] - sol[b]


def loop_noise_gain(net: Net, unit: Unit) -> float:
    """Noise gain 1/|beta| at the frequency where the loop gain |A beta| crosses 1 (common
    practice: the loop is broken at the unit's output, driven with 1 V, every other source
    zero; beta = V(-) - V(+)). Log grid from 1 Hz to 100 x GBW, crossing interpolated."""
    f = np.logspace(0, math.log10(unit.gbw_hz * 100), 1200)
    sol = solve(net, f, drive="signal", replace_unit=unit.name)
    beta = sol[unit.minus] - sol[unit.plus]
    loop = np.abs(opamp_gain(unit, f) * beta)
    below = np.nonzero(loop < 1.0)[0]
    assert below.size, f"{unit.name}: loop gain never falls below 1"
    i = below[0]
    if i == 0:
        return float(1.0 / abs(beta[0]))
    t = (math.log(loop[i - 1])) / (math.log(loop[i - 1]) - math.log(loop[i]))
    b = abs(beta[i - 1]) ** (1 - t) * abs(beta[i]) ** t
    return float(1.0 / b)


# ---------------------------------------------------------------------------------------
# SPICE decks


def _n(x: float) -> str:
    return f"{x:.12e}"


def _node(n: str) -> str:
    return n


def subckt(kind: str = "linear", *, lo: float = 0.0, hi: float = 0.0,
           slew_v_per_us: float = 0.0) -> list:
    """The op-amp subcircuit: ``linear`` (README model), ``clamp`` (output held inside
    [lo, hi] by a B source), ``slew`` (pole capacitor charged by a B current source bounded
    to +-slew x C, so |dV/dt| <= slew; linear below the limit)."""
    head = ".subckt oa inp inn out params: a0=1e5 gbw=1e6"
    cp = "{a0/(6.283185307179586*gbw*1e3)}"
    if kind == "slew":
        imax = f"{slew_v_per_us * 1e6:.12e}*a0/(6.283185307179586*gbw*1e3)"
        return [head,
                f"bi 0 n2 i = max(min((a0*v(inp,inn) - v(n2))/1e3, {{{imax}}}), "
                f"-{{{imax}}})",
                f"cp n2 0 {cp}", "e2 out 0 n2 0 1", ".ends oa"]
    lines = [head, "e1 n1 0 inp inn {a0}", "rp n1 n2 1e3 noisy=0", f"cp n2 0 {cp}"]
    if kind == "clamp":
        lines.append(f"bo out 0 v = max(min(v(n2), {_n(hi)}), {_n(lo)})")
    else:
        lines.append("e2 out 0 n2 0 1")
    return lines + [".ends oa"]


def spice_lines(net: Net, *, signal_ac: float = 0.0, supply_ac: float = 0.0,
                signal_tran: str | None = None, supply_tran: str | None = None) -> list:
    """Element lines of the net (op-amp subcircuit not included)."""
    lines = []
    for e in net.elements:
        kind, name, a, b = e[:4]
        if kind == "R":
            lines.append(f"r{name} {a} {b} {_n(e[4])}")
        elif kind == "C":
            lines.append(f"c{name} {a} {b} {_n(e[4])}")
        elif kind == "I":
            lines.append(f"i{name} {a} {b} dc {_n(e[4])}")
        elif kind == "E":
            lines.append(f"e{name} {a} {b} {e[4]} {e[5]} {_n(e[6])}")
        elif kind == "V":
            ac, tran = 0.0, ""
            if e[5] == "signal":
                ac, tran = signal_ac, signal_tran or ""
            elif e[5] == "supply":
                ac, tran = supply_ac, supply_tran or ""
            # DC value for .op, the time function for .tran (ngspice user manual,
            # "Independent Sources"): both may be given.
            lines.append(f"v{name} {a} {b} dc {_n(e[4])} ac {_n(ac)} {tran}".rstrip())
    for u in net.units:
        lines.append(f"x{u.name} {u.plus} {u.minus} {u.out} oa params: a0={_n(u.a0)} "
                     f"gbw={_n(u.gbw_hz)}")
    return lines


def deck(title: str, net: Net, control: list, *, opamp: str | list = "linear", **kw) -> str:
    sub = subckt(opamp) if isinstance(opamp, str) else opamp
    return "\n".join([title, *sub, *spice_lines(net, **kw), ".control",
                      "set wr_singlescale", "set wr_vecnames", "set numdgt=12", *control,
                      "quit", ".endc", ".end", ""])


def run(text: str, *, files: tuple = (), timeout_s: float = 300.0) -> tuple[str, dict]:
    """``ngspice -b`` on the deck in a fresh folder (argument list, no shell); stdout and the
    contents of the named output files."""
    require_ngspice()
    with tempfile.TemporaryDirectory() as tmp:
        with open(os.path.join(tmp, "deck.cir"), "w", encoding="utf-8") as fh:
            fh.write(text)
        proc = subprocess.run([NGSPICE or "ngspice", "-b", "deck.cir"], cwd=tmp,
                              capture_output=True, text=True, timeout=timeout_s, check=False)
        out = proc.stdout + proc.stderr
        if proc.returncode != 0 or re.search(r"\berror\b", out, re.IGNORECASE):
            raise AssertionError(f"ngspice failed (rc={proc.returncode}):\n{out[-3000:]}")
        got = {}
        for name in files:
            path = os.path.join(tmp, name)
            assert os.path.exists(path), f"ngspice wrote no {name}:\n{out[-3000:]}"
            with open(path, encoding="utf-8") as fh:
                got[name] = fh.read()
    return proc.stdout, got


def read_wrdata(text: str) -> dict:
    """Columns of a ``wrdata`` file (``wr_singlescale`` and ``wr_vecnames`` set)."""
    lines = [ln.split() for ln in text.splitlines() if ln.strip()]
    head, rows = lines[0], np.array([[float(v) for v in ln] for ln in lines[1:]])
    return {name: rows[:, i] for i, name in enumerate(head)}


def _probe(a: str, b: str = "0") -> str:
    return f"v({a})" if b == "0" else f"v({a},{b})"


def ac(net: Net, freqs, probes: dict, *, drive: str, sweep: tuple | None = None) -> dict:
    """Complex phasors of ``probes`` ({label: (node_a, node_b) | "i(vsrc)"}) from ngspice
    ``.ac`` with AC 1 on Vs (``drive="signal"``) or on VCC (``"supply"``), at the given
    frequencies (one ``ac lin 1 f f`` each) or over ``sweep`` = (points per decade, f1, f2).
    Returns {"frequency": array, label: complex array}."""
    exprs, labels = [], []
    for label, p in probes.items():
        e = p if isinstance(p, str) else _probe(*p)
        exprs += [f"real({e})", f"imag({e})"]
        labels.append(label)
    control = []
    if sweep is not None:
        control += [f"ac dec {sweep[0]} {_n(sweep[1])} {_n(sweep[2])}",
                    "wrdata ac0.txt " + " ".join(exprs)]
        names = ["ac0.txt"]
    else:
        names = []
        for i, f in enumerate(freqs):
            control += [f"ac lin 1 {_n(f)} {_n(f)}", f"wrdata ac{i}.txt " + " ".join(exprs)]
            names.append(f"ac{i}.txt")
    kw = {"signal_ac": 1.0} if drive == "signal" else {"supply_ac": 1.0}
    _, files = run(deck("gainchain build-check ac", net, control, **kw), files=tuple(names))
    cols = [read_wrdata(files[n]) for n in names]
    res = {"frequency": np.concatenate([c["frequency"] for c in cols])}
    for j, label in enumerate(labels):
        re_, im_ = exprs[2 * j], exprs[2 * j + 1]
        res[label] = np.concatenate([c[re_] + 1j * c[im_] for c in cols])
    return res


def op_sensitivities(net: Net, sources: dict, nodes: list) -> tuple[dict, dict]:
    """ngspice ``.op``: node voltages with every offset source at 0 (the nominal operating
    point), then the change of each node per unit of each named source (others at 0; the
    circuit is linear, so a source of magnitude m moves a node by m x sensitivity).
    ``sources`` maps an element name to its SPICE name (``vvos1``, ``iibp1``...)."""
    prn = "print " + " ".join(f"v({n})" for n in nodes)
    control = ["op", "echo @@nominal", prn]
    for name, spice_name in sources.items():
        control += [f"alter {spice_name} dc = 1", "op", f"echo @@{name}", prn,
                    f"alter {spice_name} dc = 0"]
    stdout, _ = run(deck("gainchain build-check op", net, control))
    blocks, cur = {}, None
    for line in stdout.splitlines():
        m = re.match(r"@@(\S+)", line.strip())
        if m:
            cur = m.group(1)
            blocks[cur] = {}
            continue
        m = re.match(r"v\((\S+)\)\s*=\s*([-+0-9.eE]+)", line.strip())
        if m and cur is not None:
            blocks[cur][m.group(1)] = float(m.group(2))
    nominal = blocks.pop("nominal")
    assert set(nominal) == set(nodes), stdout[-2000:]
    sens = {name: {n: blocks[name][n] - nominal[n] for n in nodes} for name in sources}
    return nominal, sens


def offset_sources(net: Net, opamp: dict) -> dict:
    """{element name: (spice name, magnitude)} of every offset source of the net: vos_v per
    unit and |ib_a| into each input (issue 8, DC errors)."""
    out = {}
    for e in net.elements:
        if e[0] == "V" and e[1].startswith("vos"):
            out[e[1]] = ("v" + e[1], abs(opamp.get("vos_v", 0.0)))
        elif e[0] == "I" and e[1].startswith("ib"):
            out[e[1]] = ("i" + e[1], abs(opamp.get("ib_a", 0.0)))
    return out


def worst_dc_error(circuit: dict) -> tuple[list, list]:
    """(nominal V(O_k), worst-case |dV(O_k)|) per stage from ngspice ``.op``: the sum over
    the offset sources of |sensitivity| x magnitude (each source at the sign that adds;
    exact for a linear circuit, superposition)."""
    net = build(circuit, offsets=True)
    srcs = offset_sources(net, circuit["opamp"])
    outs = [o for _, o in net.stages]
    nominal, sens = op_sensitivities(net, {k: v[0] for k, v in srcs.items()}, outs)
    worst = [sum(abs(sens[name][o]) * srcs[name][1] for name in srcs) for o in outs]
    return [nominal[o] for o in outs], worst


def startup_time(circuit: dict, t_stop_s: float, *, band_frac: float = 0.01,
                 points: int = 4000) -> tuple[float, float]:
    """ngspice ``.tran ... uic``: VCC stepped from 0 to v_pos at t = 0 (PWL, 1 ns rise),
    every capacitor discharged, linear op-amps. Returns (last time any circuit node is
    outside +-band_frac x supply span of its final DC value (from ``.op``), the largest
    such deviation over the last 5 % of the run, as a fraction of the span)."""
    net = build(circuit)
    nodes = [n for n in net.nodes() if n not in ("vcc", "vs")]
    span = net.v_pos - net.v_neg
    pwl = f"pwl(0 0 1e-9 {_n(net.v_pos)})"
    step = t_stop_s / points
    control = ["op", "wrdata op.txt " + " ".join(f"v({n})" for n in nodes),
               f"tran {_n(step)} {_n(t_stop_s)} uic",
               "wrdata tran.txt " + " ".join(f"v({n})" for n in nodes)]
    # ngspice: .tran step tstop [tstart [tmax]] uic; tmax = step keeps the grid fine.
    control[2] = f"tran {_n(step)} {_n(t_stop_s)} 0 {_n(step)} uic"
    _, files = run(deck("gainchain startup", net, control, supply_tran=pwl),
                   files=("op.txt", "tran.txt"))
    final = read_wrdata(files["op.txt"])
    tran = read_wrdata(files["tran.txt"])
    t = tran["time"]
    dev = np.zeros(t.size)
    for n in nodes:
        dev = np.maximum(dev, np.abs(tran[f"v({n})"] - final[f"v({n})"][0]) / span)
    outside = np.nonzero(dev > band_frac)[0]
    last = 0.0 if outside.size == 0 else float(t[min(outside[-1] + 1, t.size - 1)])
    tail = dev[t >= 0.95 * t[-1]]
    return last, float(tail.max())


def sine_runs(circuit: dict, f_hz: float, amplitude_v: float, *, kind: str,
              periods_ramp: int | None = None, periods_hold: int = 6,
              points_per_period: int = 60, ramp_s: float | None = None) -> dict:
    """Two ngspice ``.tran`` runs of the circuit driven by a sine at f_hz: linear op-amps and
    ``kind`` op-amps (``clamp``: outputs held in the swing window [v_neg + swing_to_neg_v,
    v_pos - swing_to_pos_v]; ``slew``: slew-limited at slew_v_per_us). The sine's amplitude
    ramps up linearly over ``ramp_s`` (default 5 periods, or 3 time constants of the
    lowest pole given by the caller) so the coupling capacitors, which start at the ``.op``
    point, follow without a start-up transient. Returns {"time", "linear": {O_k: wave},
    kind: {O_k: wave}, "op": {O_k: V}}."""
    net = build(circuit)
    amp = circuit["opamp"]
    period = 1.0 / f_hz
    ramp = ramp_s if ramp_s is not None else (periods_ramp or 5) * period
    t_stop = ramp + periods_hold * period
    step = period / points_per_period
    # Ramped sine as a behavioural source in place of Vs (ngspice B source, time variable).
    vs_line = (f"bvs vs 0 v = {_n(amplitude_v)}*min(time/{_n(ramp)}, 1)*"
               f"sin({_n(TWO_PI * f_hz)}*time)")
    outs = [o for _, o in net.stages]
    lo = net.v_neg + amp["swing_to_neg_v"]
    hi = net.v_pos - amp["swing_to_pos_v"]
    waves = {}
    for variant in ("linear", kind):
        if variant == "clamp":
            sub = subckt("clamp", lo=lo, hi=hi)
        elif variant == "slew":
            sub = subckt("slew", slew_v_per_us=amp["slew_v_per_us"])
        else:
            sub = subckt("linear")
        lines = [ln for ln in spice_lines(net) if not ln.startswith("vvs ")]
        control = [f"tran {_n(step)} {_n(t_stop)} 0 {_n(step)}",
                   "wrdata tran.txt " + " ".join(f"v({o})" for o in outs)]
        text = "\n".join(["gainchain sine", *sub, *lines, vs_line, ".control",
                          "set wr_singlescale", "set wr_vecnames", *control, "quit",
                          ".endc", ".end", ""])
        _, files = run(text, files=("tran.txt",))
        data = read_wrdata(files["tran.txt"])
        waves[variant] = data
    t_lin, t_var = waves["linear"]["time"], waves[kind]["time"]
    res = {"time": t_lin, "linear": {}, kind: {}}
    for o in outs:
        res["linear"][o] = waves["linear"][f"v({o})"]
        res[kind][o] = np.interp(t_lin, t_var, waves[kind][f"v({o})"])
    return res


def relative_difference(runs: dict, kind: str, ref_v: dict) -> list:
    """Per stage: max |V_kind - V_linear| over the run / max |V_linear - V_op|."""
    out = []
    for o, lin in runs["linear"].items():
        swing = np.max(np.abs(lin - ref_v[o]))
        out.append(float(np.max(np.abs(runs[kind][o] - lin)) / swing))
    return out


# ---------------------------------------------------------------------------------------
# Exported SPICE deck (exporters' netlist.cir) as a net: every op-amp unit, spares included


def net_from_export(text: str, opamp: dict) -> Net:
    """R, C, V and X lines of an exported deck (subcircuit body skipped); each X line is a
    unit whose role comes from the comment above it (``stage``, ``follower``, ``spare``)."""
    net = Net()
    a0, gbw = a0_of(opamp), float(opamp["gbw_hz"])
    in_sub, comment = False, ""
    for raw in text.splitlines():
        line = raw.strip()
        low = line.lower()
        if low.startswith(".subckt"):
            in_sub = True
            continue
        if low.startswith(".ends"):
            in_sub = False
            continue
        if in_sub or not line:
            continue
        if line.startswith("*"):
            comment = low
            continue
        parts = line.split()
        kind = parts[0][0].upper()
        if kind == "R":
            net.elements.append(("R", parts[0], parts[1], parts[2], float(parts[3])))
        elif kind == "C":
            net.elements.append(("C", parts[0], parts[1], parts[2], float(parts[3])))
        elif kind == "V":
            net.elements.append(("V", parts[0], parts[1], parts[2], 0.0, "signal"
                                 if parts[0].upper() == "VS" else "supply"))
        elif kind == "X":
            role = "spare" if ("unused" in comment or "spare" in comment) else (
                "follower" if "follower" in comment else "stage")
            m = re.search(r"stage (\d+)", comment)
            net.units.append(Unit(parts[0], role, int(m.group(1)) if m and role == "stage"
                                  else None, parts[1], parts[2], parts[3], a0, gbw))
    return net
