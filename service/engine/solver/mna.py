"""General modified nodal analysis (MNA) of the circuit model, vectorised over frequency.

Where :mod:`service.engine.solver.chain` exploits the chain structure, this module stamps every
element of the model into one matrix and solves it, so it also handles what the chain does
not: a source at VCC (supply ripple), current injections at any node (noise) and sources in
series with op-amp inputs (voltage noise, PSRR). The two are independent constructions of
the same model and the tests compare them.

Unknowns: the voltages of every node except GND, then one branch current per voltage
source (the signal source Vs, the supply VCC on a single supply, and every op-amp output).
Equations (frequency ``s = j 2 pi f``):

* KCL at node ``n``: ``sum over branches of Y (V_n - V_m) - I_src(n) = J_n`` where
  ``I_src`` is the current a voltage source drives into the node and ``J_n`` an injected
  current (noise);
* an independent source: ``V_p = value``;
* an op-amp unit, ``Vo = A(s) (V+ + e - V-)`` with ``A(s) = A0 / (1 + s A0 / (2 pi GBW))``,
  written divided by ``A(s)``: ``Vo (1/A0 + s / (2 pi GBW)) - V+ + V- = e``. ``e`` is any
  voltage in series with the + input (op-amp voltage noise, PSRR term). Dividing by A keeps
  the whole matrix *affine in s*: ``M(s) = G + s C``.

The system is therefore stored as two real matrices ``G`` and ``C``; solving at F
frequencies is one batched ``numpy.linalg.solve`` of shape ``(F, N, N)``.

Transfers from many sources to one output use the adjoint (transpose) system [1]_: with
``Vout = c^T x`` and ``M x = b``, ``Vout = y^T b`` where ``M^T y = c``. One solve gives
the transfer from every possible right-hand-side entry to the output.

References
----------
.. [1] J. Vlach and K. Singhal, *Computer Methods for Circuit Analysis and Design*,
   2nd ed., Van Nostrand Reinhold, 1994, ch. 7 (adjoint network and sensitivities) and
   ch. 2 (modified nodal analysis). Cited from memory.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from service.engine.model.circuit import INVERTING, Circuit

TWO_PI = 2.0 * np.pi
GND = "GND"


@dataclass(frozen=True)
class Resistor:
    """A resistor between two nodes; ``group`` says what it belongs to (for noise shares)."""

    name: str
    a: str
    b: str
    r_ohm: float
    group: str


@dataclass(frozen=True)
class OpAmpUnit:
    """One op-amp unit: + input, - input, output, and the group it belongs to."""

    name: str
    plus: str
    minus: str
    out: str
    group: str


@dataclass
class MnaSystem:
    """Stamped system ``(G + s C) x = b`` with index maps for nodes and source rows.

    :ivar nodes: node name -> unknown index (GND excluded).
    :ivar rows: source name (``"VS"``, ``"VCC"``, op-amp unit names) -> row index of its
        defining equation (also the index of its branch-current unknown).
    :ivar resistors: every resistor (for thermal noise).
    :ivar units: every op-amp unit (for voltage/current noise and PSRR).
    :ivar out_pos, out_neg: the nodes the output voltage is measured between.
    """

    g: np.ndarray
    c: np.ndarray
    nodes: dict
    rows: dict
    resistors: list
    units: list
    out_pos: str
    out_neg: str
    en_v_per_rthz: float = 0.0
    in_a_per_rthz: float = 0.0
    psrr_db: float | None = None
    groups: list = field(default_factory=list)

    @property
    def size(self) -> int:
        return self.g.shape[0]

    def matrix(self, f_hz, *, transposed: bool = False) -> np.ndarray:
        """``M(s) = G + s C`` (``M^T`` when ``transposed``) for each frequency: shape
        ``(F, N, N)``. With ``s = j w`` and G, C real, the real part is G and the imaginary
        part ``w C``, filled in place."""
        w = TWO_PI * np.atleast_1d(np.asarray(f_hz, dtype=float))
        g, c = (self.g.T, self.c.T) if transposed else (self.g, self.c)
        m = np.empty((w.size,) + g.shape, dtype=complex)
        m.real[...] = g
        np.multiply(w[:, None, None], c[None, :, :], out=m.imag)
        return m

    def output_selector(self) -> np.ndarray:
        """``c`` with ``Vout = c^T x``: +1 at the output node, -1 at its reference."""
        sel = np.zeros(self.size)
        if self.out_pos != GND:
            sel[self.nodes[self.out_pos]] += 1.0
        if self.out_neg != GND:
            sel[self.nodes[self.out_neg]] -= 1.0
        return sel

    def node_index(self, name: str) -> int | None:
        """Unknown index of a node, ``None`` for GND."""
        return None if name == GND else self.nodes[name]

    def signal_rhs(self) -> np.ndarray:
        """Right-hand side of the signal case: ``Vs = 1``, ``VCC = 0`` (AC ground)."""
        b = np.zeros(self.size, dtype=complex)
        b[self.rows["VS"]] = 1.0
        return b

    def supply_rhs(self) -> np.ndarray:
        """Right-hand side of the supply-ripple case: ``Vcc = 1``, ``Vs = 0``.

        Each op-amp unit sees ``Vcc * 10**(-psrr_db/20)`` in series with its + input
        (nothing when ``psrr_db`` is None, i.e. ideal).
        """
        if "VCC" not in self.rows:
            raise ValueError("the circuit has no single-supply VCC node (dual supply)")
        b = np.zeros(self.size, dtype=complex)
        b[self.rows["VCC"]] = 1.0
        if self.psrr_db is not None:
            k = 10.0 ** (-self.psrr_db / 20.0)
            for unit in self.units:
                b[self.rows[unit.name]] += k
        return b

    def solve(self, f_hz, rhs) -> np.ndarray:
        """Forward solve: the unknown vector ``x`` for each frequency, shape ``(F, N)``."""
        m = self.matrix(f_hz)
        b = np.broadcast_to(np.asarray(rhs, dtype=complex), (m.shape[0], self.size))
        return np.linalg.solve(m, b[:, :, None])[:, :, 0]

    def adjoint(self, f_hz) -> np.ndarray:
        """``y`` with ``M^T y = c``: ``y[:, i]`` is the transfer from RHS entry i to Vout.

        Shape ``(F, N)``. For a current ``J`` injected into node n, Vout gains
        ``y[:, n] * J``; for a voltage ``e`` in series with a unit's + input, ``y[:, row] * e``.
        """
        m = self.matrix(f_hz, transposed=True)
        sel = np.broadcast_to(self.output_selector().astype(complex), (m.shape[0], self.size))
        return np.linalg.solve(m, sel[:, :, None])[:, :, 0]

    def voltage(self, x: np.ndarray, node: str) -> np.ndarray:
        """Node voltage from a forward solution (GND is 0)."""
        idx = self.node_index(node)
        return np.zeros(x.shape[0], dtype=complex) if idx is None else x[:, idx]

    def vout(self, x: np.ndarray) -> np.ndarray:
        return self.voltage(x, self.out_pos) - self.voltage(x, self.out_neg)


class _Builder:
    """Collects elements with named nodes, then stamps them into G and C."""

    def __init__(self):
        self.node_names: list[str] = []
        self.resistors: list[Resistor] = []
        self.capacitors: list[tuple[str, str, float]] = []
        self.sources: list[tuple[str, str]] = []  # (name, node)
        self.units: list[tuple[OpAmpUnit, float, float]] = []  # (unit, a0, gbw)

    def node(self, name: str) -> str:
        if name != GND and name not in self.node_names:
            self.node_names.append(name)
        return name

    def resistor(self, name, a, b, r_ohm, group):
        self.resistors.append(Resistor(name, self.node(a), self.node(b), float(r_ohm), group))

    def capacitor(self, a, b, c_f):
        self.capacitors.append((self.node(a), self.node(b), float(c_f)))

    def source(self, name, node):
        self.sources.append((name, self.node(node)))

    def opamp(self, name, plus, minus, out, a0, gbw_hz, group):
        unit = OpAmpUnit(name, self.node(plus), self.node(minus), self.node(out), group)
        self.units.append((unit, float(a0), float(gbw_hz)))

    def stamp(self):
        nodes = {name: i for i, name in enumerate(self.node_names)}
        n_nodes = len(nodes)
        rows = {}
        for i, (name, _) in enumerate(self.sources):
            rows[name] = n_nodes + i
        for j, (unit, _, _) in enumerate(self.units):
            rows[unit.name] = n_nodes + len(self.sources) + j
        size = n_nodes + len(self.sources) + len(self.units)
        g = np.zeros((size, size))
        c = np.zeros((size, size))

        def two_terminal(mat, a, b, y):
            ia = nodes.get(a)
            ib = nodes.get(b)
            if ia is not None:
                mat[ia, ia] += y
            if ib is not None:
                mat[ib, ib] += y
            if ia is not None and ib is not None:
                mat[ia, ib] -= y
                mat[ib, ia] -= y

        for r in self.resistors:
            two_terminal(g, r.a, r.b, 1.0 / r.r_ohm)
        for a, b, c_f in self.capacitors:
            two_terminal(c, a, b, c_f)
        for name, node in self.sources:
            row = rows[name]
            g[nodes[node], row] -= 1.0  # the source drives its branch current into the node
            g[row, nodes[node]] = 1.0  # V_node = value
        for unit, a0, gbw in self.units:
            row = rows[unit.name]
            out = nodes[unit.out]
            g[out, row] -= 1.0
            # Vo (1/A0 + s/(2 pi GBW)) - V+ + V- = e
            g[row, out] += 1.0 / a0
            c[row, out] += 1.0 / (TWO_PI * gbw)
            if unit.plus != GND:
                g[row, nodes[unit.plus]] -= 1.0
            if unit.minus != GND:
                g[row, nodes[unit.minus]] += 1.0
        return g, c, nodes, rows


def build(circuit: Circuit) -> MnaSystem:
    """Stamp the complete circuit model (README "The circuit model") into an MNA system.

    Node names: ``VS`` (ideal source), ``X1``, per stage ``P{k}``, ``N{k}``, ``G{k}``,
    ``M{k}``, ``O{k}``; ``OUT``; ``VCC``, ``VDIV``, ``VMID`` (single supply). Parts that
    are null join their two nodes, as the model says. Groups: ``"source"``, ``"stage{k}"``
    (1-based), ``"load"``, ``"bias"``.
    """
    bld = _Builder()
    amp = circuit.opamp
    a0, gbw = amp.a0, amp.gbw_hz
    bias = circuit.bias
    if bias is None:
        ref = GND
    else:
        bld.source("VCC", "VCC")
        bld.resistor("R_top", "VCC", "VDIV", bias.r_top_ohm, "bias")
        bld.resistor("R_bottom", "VDIV", GND, bias.r_bottom_ohm, "bias")
        bld.capacitor("VDIV", GND, bias.c_bypass_f)
        if bias.buffered:
            ref = "VMID"
            bld.opamp("U_bias", "VDIV", "VMID", "VMID", a0, gbw, "bias")
        else:
            ref = "VDIV"
    bld.source("VS", "VS")
    if circuit.source_impedance_ohm > 0:
        bld.resistor("R_source", "VS", "X1", circuit.source_impedance_ohm, "source")
        x = "X1"
    else:  # an ideal source: X1 is the source node itself (and adds no thermal noise)
        x = "VS"
    for k, st in enumerate(circuit.stages, start=1):
        grp = f"stage{k}"
        out = f"O{k}"
        neg = f"N{k}"
        if circuit.topology == INVERTING:
            m = x if st.c_couple_f is None else f"M{k}"
            if st.c_couple_f is not None:
                bld.capacitor(x, m, st.c_couple_f)
            bld.resistor(f"R_in{k}", m, neg, st.r_in_ohm, grp)
            bld.resistor(f"R_feedback{k}", out, neg, st.r_feedback_ohm, grp)
            if st.c_feedback_f is not None:
                bld.capacitor(out, neg, st.c_feedback_f)
            bld.opamp(f"U{k}", ref, neg, out, a0, gbw, grp)
        else:
            pos = x if st.c_couple_f is None else f"P{k}"
            if st.c_couple_f is not None:
                bld.capacitor(x, pos, st.c_couple_f)
            if st.r_bias_ohm is not None:
                bld.resistor(f"R_bias{k}", pos, ref, st.r_bias_ohm, grp)
            bld.resistor(f"R_feedback{k}", out, neg, st.r_feedback_ohm, grp)
            if st.c_feedback_f is not None:
                bld.capacitor(out, neg, st.c_feedback_f)
            if st.c_gain_f is None:
                bld.resistor(f"R_gain{k}", neg, ref, st.r_gain_ohm, grp)
            else:
                bld.resistor(f"R_gain{k}", neg, f"G{k}", st.r_gain_ohm, grp)
                bld.capacitor(f"G{k}", GND, st.c_gain_f)
            bld.opamp(f"U{k}", pos, neg, out, a0, gbw, grp)
        x = out
    if circuit.c_out_f is None:
        bld.resistor("R_load", x, ref, circuit.load_ohm, "load")
        out_pos, out_neg = x, ref
    else:
        bld.capacitor(x, "OUT", circuit.c_out_f)
        bld.resistor("R_load", "OUT", GND, circuit.load_ohm, "load")
        out_pos, out_neg = "OUT", GND
    g, c, nodes, rows = bld.stamp()
    groups = ["source"] + [f"stage{k}" for k in range(1, circuit.n_stages + 1)] + ["load"]
    if bias is not None:
        groups.append("bias")
    return MnaSystem(
        g=g, c=c, nodes=nodes, rows=rows, resistors=bld.resistors,
        units=[u for u, _, _ in bld.units], out_pos=out_pos, out_neg=out_neg,
        en_v_per_rthz=amp.en_v_per_rthz, in_a_per_rthz=amp.in_a_per_rthz,
        psrr_db=amp.psrr_db, groups=groups,
    )


def signal_gain(circuit: Circuit, f_hz) -> np.ndarray:
    """``Vout / Vs`` by a forward MNA solve (complex, one value per frequency)."""
    system = build(circuit)
    x = system.solve(f_hz, system.signal_rhs())
    return system.vout(x)


def node_voltages(circuit: Circuit, f_hz, nodes) -> dict:
    """Selected node voltages per unit Vs (forward solve), e.g. ``["O1", "VMID"]``."""
    system = build(circuit)
    x = system.solve(f_hz, system.signal_rhs())
    return {n: system.voltage(x, n) for n in nodes}


@dataclass(frozen=True)
class StageNodes:
    """MNA node names of one stage: its input X_k, the op-amp's + and - inputs and output."""

    inp: str
    plus: str
    minus: str
    out: str


def reference_node(circuit: Circuit) -> str:
    """The MNA name of REF: GND (dual supply), VMID (buffered) or VDIV (unbuffered)."""
    if circuit.bias is None:
        return GND
    return "VMID" if circuit.bias.buffered else "VDIV"


def stage_nodes(circuit: Circuit) -> list[StageNodes]:
    """Node names of every stage, as :func:`build` names them (null parts join nodes)."""
    ref = reference_node(circuit)
    x = "X1" if circuit.source_impedance_ohm > 0 else "VS"
    out = []
    for k, st in enumerate(circuit.stages, start=1):
        if circuit.topology == INVERTING:
            plus = ref
        else:
            plus = x if st.c_couple_f is None else f"P{k}"
        out.append(StageNodes(inp=x, plus=plus, minus=f"N{k}", out=f"O{k}"))
        x = f"O{k}"
    return out


def natural_frequencies(system: MnaSystem) -> np.ndarray:
    """Natural frequencies ``s`` (rad/s) of the circuit with every source zeroed: the finite
    generalised eigenvalues of ``(G + s C) x = 0`` (scipy.linalg.eigvals of the pencil
    ``(-G, C)``). The op-amp pole sits in ``C`` (module docstring), so a loop closed
    through the shared bias node shows up here; a natural frequency with a positive real
    part means the linear circuit's response grows: it oscillates or latches (common
    practice)."""
    from scipy.linalg import eigvals

    s = eigvals(-system.g, system.c)
    return s[np.isfinite(s)]
