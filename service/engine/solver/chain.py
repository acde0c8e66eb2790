"""Nodal solution of the cascade, vectorised over frequency (and over Monte Carlo trials).

The circuit is a chain of stages whose op-amp outputs are ideal voltage sources, so each
stage is solved in place by Kirchhoff's current law, with one unknown left over: the AC
voltage of the shared reference node REF. Every node voltage is kept as an affine form
``a + b * v_ref`` (source ``Vs = 1``); the current that the stages, the load and the bias
divider push into REF then closes the system with one complex division per frequency.
This is exact nodal analysis of the stated model, not an approximation; tests compare it
with a general modified-nodal-analysis solve (``service.engine.solver.mna``) and with per-stage
transfer functions multiplied in scipy.signal.

Open-loop gain (single pole): ``A(s) = A0 / (1 + s A0 / (2 pi GBW))``; no input current,
zero output impedance.

Stage equations (Z of a capacitor is ``1/(sC)``):

* non-inverting: ``P = (X Rb + v_ref Zc) / (Zc + Rb)``; feedback leg ``Zg = Rg + 1/(s Cg)``
  to GND (or ``Rg`` to REF when ``c_gain_f`` is null);
  ``O = A (P (Rf + Zg) - v_ret Rf) / (Rf + Zg + A Zg)``.
* inverting: ``Zi = Zc + Rin``; ``O = A (v_ref (Rf + Zi) - X Rf) / (Rf + Zi + A Zi)``;
  the stage draws ``(X - O) / (Rf + Zi)`` from its input.
* a feedback capacitor ``c_feedback_f`` replaces ``Rf`` by ``Zf = Rf / (1 + s Rf Cf)`` in
  every formula above.

Every parameter may be a float or an array broadcastable against ``f_hz``, so one call
evaluates many trials (shape ``(trials, 1)`` against ``(1, frequencies)``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from service.engine.model.circuit import INVERTING, Circuit

TWO_PI = 2.0 * np.pi


class Affine(NamedTuple):
    """A node voltage ``a + b * v_ref`` (per unit of source voltage); a named tuple, which
    is cheaper to build than a dataclass on the scalar path."""

    a: np.ndarray
    b: np.ndarray

    def at(self, v_ref) -> np.ndarray:
        return self.a + self.b * v_ref


@dataclass(frozen=True)
class ChainSolution:
    """Node voltages per unit of source voltage Vs, at the frequencies asked for.

    :ivar vout: voltage across the load, ``Vout / Vs`` (complex).
    :ivar stage_in: ``V(X_k) / Vs`` for each stage (absolute node voltages).
    :ivar stage_out_abs: ``V(O_k) / Vs`` for each stage (absolute node voltages).
    :ivar stage_out: ``(V(O_k) - V(REF)) / Vs`` for each stage, measured against REF.
    :ivar vref: ``V(REF) / Vs``.
    """

    vout: np.ndarray
    stage_in: list
    stage_out_abs: list
    stage_out: list
    vref: np.ndarray


@dataclass(frozen=True)
class ChainParams:
    """Circuit values as floats or arrays (one entry per stage), ready to broadcast.

    Built from a :class:`Circuit` by :func:`params_from_circuit`; the Monte Carlo replaces
    entries with arrays of trials. ``None`` marks an absent part.
    """

    inverting: bool
    source_impedance_ohm: object
    load_ohm: object
    a0: object
    gbw_hz: list  # per stage
    c_couple_f: list
    r_bias_ohm: list
    r_feedback_ohm: list
    r_gain_ohm: list
    c_gain_f: list
    r_in_ohm: list
    c_out_f: object
    # bias network: None on a dual supply (REF = GND) and when VMID is buffered
    # (the follower holds VMID at the divider's AC voltage, which the signal does not reach)
    r_top_ohm: object = None
    r_bottom_ohm: object = None
    c_bypass_f: object = None
    # per stage: capacitor across r_feedback_ohm (None: none; the list may be None: no stage
    # has one)
    c_feedback_f: list | None = None


def params_from_circuit(circuit: Circuit) -> ChainParams:
    stages = circuit.stages
    bias = circuit.bias
    floating_ref = bias is not None and not bias.buffered
    return ChainParams(
        inverting=circuit.topology == INVERTING,
        source_impedance_ohm=circuit.source_impedance_ohm,
        load_ohm=circuit.load_ohm,
        a0=circuit.opamp.a0,
        gbw_hz=[circuit.opamp.gbw_hz] * len(stages),
        c_couple_f=[s.c_couple_f for s in stages],
        r_bias_ohm=[s.r_bias_ohm for s in stages],
        r_feedback_ohm=[s.r_feedback_ohm for s in stages],
        r_gain_ohm=[s.r_gain_ohm for s in stages],
        c_gain_f=[s.c_gain_f for s in stages],
        r_in_ohm=[s.r_in_ohm for s in stages],
        c_out_f=circuit.c_out_f,
        r_top_ohm=bias.r_top_ohm if floating_ref else None,
        r_bottom_ohm=bias.r_bottom_ohm if floating_ref else None,
        c_bypass_f=bias.c_bypass_f if floating_ref else None,
        c_feedback_f=[s.c_feedback_f for s in stages],
    )


def feedback_impedance(s, rf, cf):
    """``Zf = Rf || 1/(s Cf) = Rf / (1 + s Rf Cf)``; ``Rf`` itself when ``cf`` is None."""
    return rf if cf is None else rf / (1.0 + s * rf * cf)


def c_feedback_of(p: ChainParams, k: int):
    """Stage k's feedback capacitor in ``p`` (None when absent)."""
    return None if p.c_feedback_f is None else p.c_feedback_f[k]


def open_loop_gain(s, a0, gbw_hz):
    """``A(s) = A0 / (1 + s A0 / (2 pi GBW))``: the single-pole op-amp of the model."""
    return a0 / (1.0 + s * a0 / (TWO_PI * gbw_hz))


def solve(circuit: Circuit, f_hz) -> ChainSolution:
    """Solve the circuit at the frequencies ``f_hz`` (Hz, any shape)."""
    return solve_params(params_from_circuit(circuit), f_hz)


def magnitude(circuit: Circuit):
    """``f_hz -> |Vout / Vs|`` of the circuit, for any shape of ``f_hz`` or one float.

    The same nodal solution as :func:`solve`; a handful of frequencies (the refinement
    steps of a corner or a peak) are solved one at a time on Python complex numbers, which
    skips the per-call cost of small arrays (measured about 6x faster per point).
    """
    p = params_from_circuit(circuit)

    def mag(f_hz):
        if isinstance(f_hz, float):
            return abs(solve_params(p, f_hz).vout)
        f = np.asarray(f_hz, dtype=float)
        if f.size > SCALAR_POINTS_MAX:
            return np.abs(solve_params(p, f).vout)
        out = np.empty(f.shape)
        for i, fi in np.ndenumerate(f):
            out[i] = abs(solve_params(p, float(fi)).vout)
        return out

    return mag


#: Up to this many frequencies, :func:`magnitude` solves point by point on scalars.
SCALAR_POINTS_MAX = 4


def solve_params(p: ChainParams, f_hz) -> ChainSolution:
    """Solve a :class:`ChainParams` (values may be arrays of trials) at ``f_hz``.

    With a positive float ``f_hz`` and scalar values the whole solution is Python complex
    numbers (the same arithmetic, without array overhead)."""
    if isinstance(f_hz, float) and f_hz > 0.0 and isinstance(p.load_ohm, float):
        s = complex(0.0, TWO_PI * f_hz)
        zero = 0j
    else:
        s = 1j * TWO_PI * np.asarray(f_hz, dtype=float)
        zero = np.zeros(np.broadcast(s, p.load_ohm).shape, dtype=complex)
    one = zero + 1.0
    # Currents injected into REF, as affine forms in v_ref (a + b v_ref).
    inj_a = zero
    inj_b = zero
    stage_in: list[Affine] = []
    stage_out: list[Affine] = []
    x: Affine | None = None
    n = len(p.r_feedback_ohm)
    for k in range(n):
        amp = open_loop_gain(s, p.a0, p.gbw_hz[k])
        rf = feedback_impedance(s, p.r_feedback_ohm[k], c_feedback_of(p, k))
        cc = p.c_couple_f[k]
        zc = zero if cc is None else 1.0 / (s * cc)
        if p.inverting:
            zi = zc + p.r_in_ohm[k]
            den = rf + zi + amp * zi
            alpha = -amp * rf / den  # O = alpha X + beta v_ref
            beta = amp * (rf + zi) / den
            if k == 0:
                x = _source_node(p.source_impedance_ohm, one, zero,
                                 y_x=(1.0 - alpha) / (rf + zi), y_ref=beta / (rf + zi))
            out = Affine(alpha * x.a, alpha * x.b + beta)
        else:
            rb = p.r_bias_ohm[k]
            if cc is None and rb is None:
                y_in = zero
            elif cc is None:
                y_in = one / rb
            else:
                y_in = one / (zc + rb)
            if k == 0:
                x = _source_node(p.source_impedance_ohm, one, zero, y_x=y_in, y_ref=y_in)
            # Current X -> (Cc, Rb) -> REF.
            inj_a = inj_a + x.a * y_in
            inj_b = inj_b + (x.b - 1.0) * y_in
            if cc is None or rb is None:
                pos = x
            else:
                w = rb / (zc + rb)
                pos = Affine(x.a * w, x.b * w + (1.0 - w))
            cg = p.c_gain_f[k]
            zg = p.r_gain_ohm[k] + (zero if cg is None else 1.0 / (s * cg))
            den = rf + zg + amp * zg
            g = amp * (rf + zg) / den
            ret = 0.0 if cg is not None else amp * rf / den  # leg returns to REF
            out = Affine(g * pos.a, g * pos.b - ret)
            if cg is None:
                # Current O -> Rf -> Rg -> REF.
                inj_a = inj_a + out.a / (rf + zg)
                inj_b = inj_b + (out.b - 1.0) / (rf + zg)
        stage_in.append(x)
        stage_out.append(out)
        x = out
    last = stage_out[-1]
    if p.c_out_f is None:
        vout = Affine(last.a, last.b - 1.0)  # load from O_n to REF
        inj_a = inj_a + last.a / p.load_ohm
        inj_b = inj_b + (last.b - 1.0) / p.load_ohm
    else:
        w = p.load_ohm / (p.load_ohm + 1.0 / (s * p.c_out_f))
        vout = Affine(last.a * w, last.b * w)
    if p.r_top_ohm is None:
        vref = zero
    else:
        y_div = 1.0 / p.r_top_ohm + 1.0 / p.r_bottom_ohm + s * p.c_bypass_f
        # KCL at VDIV (= VMID): injected current = v_ref * y_div.
        vref = inj_a / (y_div - inj_b)
    return ChainSolution(
        vout=vout.at(vref),
        stage_in=[a.at(vref) for a in stage_in],
        stage_out_abs=[a.at(vref) for a in stage_out],
        stage_out=[a.at(vref) - vref for a in stage_out],
        vref=vref,
    )


def _source_node(r_source, one, zero, *, y_x, y_ref) -> Affine:
    """Node X1 fed by Vs = 1 through ``r_source`` and loaded by ``y_x X - y_ref v_ref``.

    KCL: ``(1 - X) / Rs = y_x X - y_ref v_ref``  =>  ``X = (1 + Rs y_ref v_ref) / (1 + Rs y_x)``.
    """
    den = one + r_source * y_x
    return Affine(one / den, r_source * y_ref / den)
