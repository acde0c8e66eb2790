"""Tolerance Monte Carlo of the as-built figures, vectorised over trials and frequencies.

Distribution: every resistor and capacitor of the circuit (source and load impedances
excepted) takes ``nominal * (1 + t u)`` with ``u`` independent and uniform on [-1, 1] and
``t`` its tolerance (``resistor_tolerance_pct``, ``capacitor_tolerance_pct``); each op-amp
unit's gain-bandwidth product likewise within ``gbw_tolerance_pct``. Draws come from
``numpy.random.Generator`` (PCG64) seeded by the request, in a fixed order, so the same
seed gives the same figures.

Models (the block names the one that ran): every part is an array of trials and ``|Vout/Vs|``
is evaluated exactly, on a log grid of ``frequency_points``
frequencies from two decades below the nominal low corner to two decades above the nominal
high corner; the maximum and the -3 dB crossings are then refined per trial exactly as for
the as-built figures (:func:`service.engine.solver.corners.find_band`). With a stiff REF (dual
supply or buffered VMID) the cascade is a product of per-stage transfer functions
("stage-product", :func:`stage_product_mag`, real arithmetic); with a shared divider the
chain's nodal recursion runs in fraction-free form ("chain-fraction-free",
:func:`shared_ref_mag`); "chain-nodal" (:func:`service.engine.solver.chain.solve_params` itself)
serves as their reference in the tests. When VMID is buffered the
follower holds VMID at the divider's AC voltage, which the signal never reaches, so the
divider, its bypass and the follower's gain-bandwidth do not affect ``Vout/Vs`` and are not
varied; a shared (unbuffered) divider and bypass are.

Worst case (first order): the sensitivity of each figure to each part is the sign of a
one-sided finite difference at nominal (relative step ``SENSITIVITY_STEP``); the low-end
(high-end) worst case puts every part at the end of its range that lowers (raises) the
figure, and evaluates the full model there.

The work is split into chunks of trials (cache-sized arrays); ``workers > 1`` spreads them
over a thread pool (numpy releases the GIL in its array loops). The default is one worker:
gunicorn already runs one process per core, and on two cores the pool measured no faster.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace

import numpy as np

from service.engine.model import parts as parts_mod
from service.engine.model.circuit import Circuit, Target
from service.engine.solver.chain import TWO_PI, ChainParams, params_from_circuit, solve_params
from service.engine.solver.corners import F_MAX_HZ, find_band

MAX_TRIALS = 100_000
DEFAULT_FREQUENCY_POINTS = 200
#: Decades of grid beyond each nominal corner: a +-20 % part moves a corner by far less.
GRID_MARGIN_DECADES = 2.0
#: For a DC-coupled cascade (no low corner) the grid starts this many decades below f_high.
DC_GRID_DECADES = 5.0
#: Relative step of the finite differences that give each sensitivity's sign.
SENSITIVITY_STEP = 1e-4
#: Trials per chunk: (2000 x 200) float64 buffers of 3.2 MB, reused in place per chunk;
#: measured fastest among 50..5000 on a 2-core machine.
CHUNK_TRIALS = 2000
DEFAULT_WORKERS = 1
PERCENTILES = (1, 5, 50, 95, 99)
FIGURES = ("gain_db", "f_low_hz", "f_high_hz")
CHAIN_NODAL = "chain-nodal"
STAGE_PRODUCT = "stage-product"
SHARED_REF = "chain-fraction-free"

MODEL_DESCRIPTIONS = {
    CHAIN_NODAL: ("exact nodal solution of the chain (shared bias node included) for every "
                  "trial on a log grid of frequency_points frequencies two decades beyond the "
                  "nominal corners; maximum and -3 dB crossings refined per trial"),
    SHARED_REF: ("the chain's exact nodal recursion (shared bias node included) in "
                 "fraction-free form, algebraically identical to the nodal solution, on a log "
                 "grid of frequency_points frequencies two decades beyond the nominal corners; "
                 "maximum and -3 dB crossings refined per trial; nominal_max_rel_deviation "
                 "compares its nominal figures with the as-built ones"),
    STAGE_PRODUCT: ("product of exact per-stage transfer functions (valid because REF is stiff: "
                    "dual supply or buffered VMID), algebraically identical to the nodal "
                    "solution, on a log grid of frequency_points frequencies two decades beyond "
                    "the nominal corners; maximum and -3 dB crossings refined per trial; "
                    "nominal_max_rel_deviation compares its nominal figures with the as-built "
                    "ones"),
}

_PER_STAGE = {
    "c_couple_f": "capacitor", "r_bias_ohm": "resistor", "r_feedback_ohm": "resistor",
    "r_gain_ohm": "resistor", "c_gain_f": "capacitor", "r_in_ohm": "resistor",
    "gbw_hz": "gbw", "c_feedback_f": "capacitor",
}
_SCALAR = {"c_out_f": "capacitor", "r_top_ohm": "resistor", "r_bottom_ohm": "resistor",
           "c_bypass_f": "capacitor"}


@dataclass(frozen=True)
class Tolerances:
    """Half-widths of the uniform distributions, in percent, per part kind.

    ``capacitor_pct`` is the class-2 ceramic (X7R/X5R) tolerance; ``c0g_pct`` and
    ``electrolytic_pct`` default to it when not given (then every capacitor shares one
    tolerance). Which class a capacitor is comes from
    :func:`service.engine.model.parts.capacitor_class`, the exporters' own rule.
    """

    resistor_pct: float
    capacitor_pct: float
    gbw_pct: float = 0.0
    c0g_pct: float | None = None
    electrolytic_pct: float | None = None

    @classmethod
    def from_block(cls, t: parts_mod.Tolerances) -> Tolerances:
        """From the normalised ``tolerances`` block of a design or analysis."""
        return cls(t.resistor_tolerance_pct, t.capacitor_tolerance_pct, t.gbw_tolerance_pct,
                   t.c0g_tolerance_pct, t.electrolytic_tolerance_pct)

    def of(self, kind: str) -> float:
        pct = {"resistor": self.resistor_pct, "capacitor": self.capacitor_pct,
               parts_mod.CLASS2: self.capacitor_pct, "gbw": self.gbw_pct,
               parts_mod.C0G: self.c0g_pct, parts_mod.ELECTROLYTIC: self.electrolytic_pct}[kind]
        return (self.capacitor_pct if pct is None else pct) / 100.0


@dataclass(frozen=True)
class Part:
    """One varied quantity of :class:`ChainParams`: field, stage index (None: scalar)."""

    field: str
    index: int | None
    kind: str
    nominal: float


@dataclass(frozen=True)
class MonteCarloResult:
    """Per-trial figures (arrays of length ``trials``; nan where a corner does not exist)."""

    gain_db: np.ndarray
    f_low_hz: np.ndarray
    f_high_hz: np.ndarray
    grid_hz: np.ndarray
    parts: tuple
    model: str


def varied_parts(params: ChainParams, tol: Tolerances,
                 kinds: dict | None = None) -> tuple[Part, ...]:
    """Every part of ``params`` that exists and has a non-zero tolerance, in a fixed order.

    ``kinds`` (``{(field, stage index | None): kind}``, from
    :func:`service.engine.model.parts.capacitor_kinds`) gives each capacitor its class;
    without it every capacitor is of kind ``"capacitor"``.
    """
    kinds = kinds or {}
    parts = []
    for k in range(len(params.r_feedback_ohm)):
        for name, kind in _PER_STAGE.items():
            values = getattr(params, name)
            value = None if values is None else values[k]
            kind = kinds.get((name, k), kind)
            if value is not None and tol.of(kind) > 0:
                parts.append(Part(name, k, kind, float(value)))
    for name, kind in _SCALAR.items():
        value = getattr(params, name)
        kind = kinds.get((name, None), kind)
        if value is not None and tol.of(kind) > 0:
            parts.append(Part(name, None, kind, float(value)))
    return tuple(parts)


def with_values(params: ChainParams, parts, values: np.ndarray) -> ChainParams:
    """``params`` with part i set to ``values[:, i]`` (as a column of trials)."""
    changes: dict = {}
    for i, part in enumerate(parts):
        col = values[:, i:i + 1]
        if part.index is None:
            changes[part.field] = col
        else:
            lst = changes.setdefault(part.field, list(getattr(params, part.field)))
            lst[part.index] = col
    return replace(params, **changes)


def analysis_grid(f_low_hz: float, f_high_hz: float,
                  points: int = DEFAULT_FREQUENCY_POINTS) -> np.ndarray:
    """Log grid two decades beyond the nominal corners (``f_low`` nan: DC coupled)."""
    hi = f_high_hz * 10 ** GRID_MARGIN_DECADES
    if math.isfinite(f_low_hz):
        lo = f_low_hz / 10 ** GRID_MARGIN_DECADES
    else:
        lo = f_high_hz / 10 ** DC_GRID_DECADES
    return np.logspace(math.log10(lo), math.log10(hi), points)



def stiff_reference(circuit: Circuit) -> bool:
    """True when REF carries no signal (dual supply, or VMID buffered by the follower)."""
    return circuit.bias is None or circuit.bias.buffered


def _quad_mag2_poly(p0, p1, p2):
    """``|p0 + p1 s + p2 s^2|^2`` at ``s = j w`` as a polynomial in ``x = w^2``:
    ``(p0 - p2 x)^2 + p1^2 x = p0^2 + (p1^2 - 2 p0 p2) x + p2^2 x^2`` (coefficients low first)."""
    return [p0 * p0, p1 * p1 - 2.0 * p0 * p2, p2 * p2]


def _polymul(p, q):
    """Product of two coefficient lists (low first) whose entries are trial arrays."""
    out = [0.0] * (len(p) + len(q) - 1)
    for i, a in enumerate(p):
        for j, b in enumerate(q):
            out[i + j] = out[i + j] + a * b
    return out


def _polyadd(p, q):
    """Sum of two coefficient lists (low first)."""
    n = max(len(p), len(q))
    return [(p[i] if i < len(p) else 0.0) + (q[i] if i < len(q) else 0.0) for i in range(n)]


def _mag2_poly(c):
    """``|c0 + c1 s + c2 s^2 + ...|^2`` at ``s = j w`` as a polynomial in ``x = w^2``.

    With ``s^k = j^k w^k``: real part ``c0 - c2 x + c4 x^2 - ...``, imaginary part
    ``w (c1 - c3 x + ...)``, so ``|P|^2 = Re(x)^2 + x Im'(x)^2`` (coefficients low first).
    """
    re = [c[i] * (-1.0) ** (i // 2) for i in range(0, len(c), 2)]
    im = [c[i] * (-1.0) ** (i // 2) for i in range(1, len(c), 2)]
    out = _polymul(re, re)
    if im:
        out = _polyadd(out, [0.0] + _polymul(im, im))
    return out


def feedback_stage_polys(p: ChainParams, k: int, cf):
    """Stage k with a feedback capacitor: polynomials in ``s`` (coefficients low first).

    ``Zf = Rf / df``, ``df = 1 + s Rf Cf``; ``tau = A0 / (2 pi GBW)``. Multiplying the stage
    equations of :mod:`service.engine.solver.chain` through by ``df (1 + s tau)`` and by
    ``s C`` of the stage's series capacitor (``Cg`` non-inverting, ``Cc`` inverting):

    * non-inverting, ``Zg = Rg + 1/(s Cg)``: with ``L = Rf s Cg + (1 + s Rg Cg) df``,
      ``O/P = A0 L / ((1 + s tau) L + A0 (1 + s Rg Cg) df)``; without ``Cg``
      (``Rg`` to REF): ``L = Rf + Rg df``, ``O = (A0 L P - A0 Rf v_ref) / ((1 + s tau) L
      + A0 Rg df)``;
    * inverting, ``Zi = R'in + 1/(s Cc)``: ``L = Rf s Cc + (1 + s Cc R'in) df``,
      ``O = (-A0 Rf s Cc X + A0 L v_ref) / ((1 + s tau) L + A0 (1 + s Cc R'in) df)``;
      without ``Cc``: ``L = Rf + R'in df``, ``alpha = -A0 Rf``, the rest alike.

    Returns ``(alpha, beta, den)``: the output is ``(alpha X + beta v_ref) / den`` for the
    inverting stage and ``(alpha P - beta v_ref) / den`` for the non-inverting one
    (``beta`` 0 when ``Cg`` exists).
    """
    a0 = p.a0
    tau = a0 / (TWO_PI * p.gbw_hz[k])
    rf = p.r_feedback_ohm[k]
    df = [1.0, rf * cf]
    lag = [1.0, tau]
    if p.inverting:
        rin = p.r_in_ohm[k] + (p.source_impedance_ohm if k == 0 else 0.0)
        cc = p.c_couple_f[k]
        if cc is None:
            leg = [rin]
            alpha = [-a0 * rf]
            ell = _polyadd([rf], _polymul([rin], df))
        else:
            leg = [1.0, cc * rin]
            alpha = [0.0, -a0 * rf * cc]
            ell = _polyadd([0.0, rf * cc], _polymul(leg, df))
        beta = [a0 * c for c in ell]
    else:
        rg = p.r_gain_ohm[k]
        cg = p.c_gain_f[k]
        if cg is None:
            leg = [rg]
            ell = _polyadd([rf], _polymul([rg], df))
            beta = [a0 * rf]
        else:
            leg = [1.0, rg * cg]
            ell = _polyadd([0.0, rf * cg], _polymul(leg, df))
            beta = [0.0]
        alpha = [a0 * c for c in ell]
    den = _polyadd(_polymul(lag, ell), [a0 * c for c in _polymul(leg, df)])
    return alpha, beta, den


def _horner_into(coeffs, x, out):
    """Evaluate the polynomial ``coeffs`` (low first) at ``x`` into ``out``, in place.

    In-place steps avoid a fresh (trials x frequencies) temporary per operation, which on
    large arrays costs more in page faults than the arithmetic itself.
    """
    if len(coeffs) == 1:
        out[...] = coeffs[0]
        return out
    np.multiply(coeffs[-1], x, out=out)
    out += coeffs[-2]
    for c in reversed(coeffs[:-2]):
        out *= x
        out += c
    return out


def stage_factors(p: ChainParams) -> list:
    """``[(N_k, D_k)]``: ``|H_k(j w)|^2 = N_k(w^2) / D_k(w^2)`` per stage, then the output.

    Coefficient lists (low first) in ``x = w^2``; entries are floats or trial arrays. See
    :func:`stage_product_mag` for the transfer functions they come from.
    """
    rs = p.source_impedance_ohm
    a0 = p.a0
    factors = []
    for k in range(len(p.r_feedback_ohm)):
        tau = a0 / (TWO_PI * p.gbw_hz[k])
        rf = p.r_feedback_ohm[k]
        cc = p.c_couple_f[k]
        series = rs if k == 0 else 0.0
        cf = None if p.c_feedback_f is None else p.c_feedback_f[k]
        if cf is not None:
            alpha, _, den_s = feedback_stage_polys(p, k, cf)
            num, den = _mag2_poly(alpha), _mag2_poly(den_s)
            if not p.inverting:
                rb = p.r_bias_ohm[k]
                if cc is not None:
                    num = _polymul([0.0, (cc * rb) ** 2], num)
                    den = _polymul([1.0, (cc * (rb + series)) ** 2], den)
                elif rb is not None and k == 0:
                    num = _polymul([(rb / (rb + rs)) ** 2], num)
            factors.append((num, den))
            continue
        if p.inverting:
            rin = p.r_in_ohm[k] + series
            if cc is None:
                num = [(a0 * rf) ** 2]
                den = _quad_mag2_poly(rf + rin + a0 * rin, tau * (rf + rin), 0.0)[:2]
            else:
                num = [0.0, (a0 * rf * cc) ** 2]
                den = _quad_mag2_poly(1.0 + a0, tau + cc * (rf + rin) + a0 * cc * rin,
                                      tau * cc * (rf + rin))
            factors.append((num, den))
            continue
        rb = p.r_bias_ohm[k]
        if cc is not None:
            c_num, c_den = [0.0, (cc * rb) ** 2], [1.0, (cc * (rb + series)) ** 2]
        elif rb is not None and k == 0:
            c_num, c_den = [(rb / (rb + rs)) ** 2], [1.0]
        else:
            c_num, c_den = [1.0], [1.0]
        rg = p.r_gain_ohm[k]
        cg = p.c_gain_f[k]
        if cg is None:
            g_num = [(a0 * (rf + rg)) ** 2]
            g_den = _quad_mag2_poly(rf + rg + a0 * rg, tau * (rf + rg), 0.0)[:2]
        else:
            t_fg = cg * (rf + rg)
            g_num = [a0 * a0, (a0 * t_fg) ** 2]
            g_den = _quad_mag2_poly(1.0 + a0, tau + t_fg + a0 * rg * cg, tau * t_fg)
        factors.append((_polymul(c_num, g_num), _polymul(c_den, g_den)))
    if p.c_out_f is not None:
        t_o2 = (p.c_out_f * p.load_ohm) ** 2
        factors.append(([0.0, t_o2], [1.0, t_o2]))
    return factors


def stage_product_mag(p: ChainParams, f_hz, factors: list | None = None) -> np.ndarray:
    """``|Vout/Vs|`` as a product of per-stage factors, valid when REF is stiff.

    With REF an AC ground and zero-impedance op-amp outputs, each stage is driven by an ideal
    source (the previous output; for stage 1, Vs with ``Rs`` in series with the stage's
    input branch), so ``Vout/Vs = prod_k H_k * H_out`` exactly. Per stage (``tau = A0/(2 pi
    GBW)``, ``R'`` = input resistor plus ``Rs`` for stage 1):

    * non-inverting, coupling: ``s Cc Rb / (1 + s Cc R'b)``;
      gain with ground-leg capacitor: ``A0 (1 + s Cg (Rf+Rg)) / ((1 + A0) +
      s (tau + Cg (Rf+Rg) + A0 Rg Cg) + s^2 tau Cg (Rf+Rg))``; without it
      ``A0 (Rf+Rg) / ((Rf+Rg+A0 Rg) + s tau (Rf+Rg))``;
    * inverting: ``-A0 Rf s Cc / ((1 + A0) + s (tau + Cc (Rf+R'in) + A0 Cc R'in)
      + s^2 tau Cc (Rf+R'in))``; without Cc ``-A0 Rf / ((Rf+R'in+A0 R'in) + s tau (Rf+R'in))``;
    * output: ``s Co RL / (1 + s Co RL)``.

    These follow from the stage equations of :mod:`service.engine.solver.chain` by multiplying
    through by ``s C (1 + s tau)``. Each ``|H_k|^2`` is a ratio of real polynomials in
    ``w^2`` whose coefficients are computed once per trial; the grid then costs a few real
    Horner steps per stage, which is what makes this model fast.
    """
    x = np.square(TWO_PI * np.asarray(f_hz, dtype=float))
    factors = factors if factors is not None else stage_factors(p)
    shape = np.broadcast_shapes(x.shape, *(np.shape(c) for nd in factors for c in nd[0] + nd[1]))
    x = np.broadcast_to(x, shape)
    mag2 = np.ones(shape)
    num = np.empty(shape)
    den = np.empty(shape)
    for n_coeffs, d_coeffs in factors:
        mag2 *= _horner_into(n_coeffs, x, num)
        mag2 /= _horner_into(d_coeffs, x, den)
    return np.sqrt(mag2, out=mag2)


def _poly_s(coeffs, s):
    """``c0 + c1 s + c2 s^2`` at complex ``s`` (coefficients low first; floats or trials)."""
    out = s * coeffs[-1]
    for c in reversed(coeffs[1:-1]):
        out += c
        out *= s
    out += coeffs[0]
    return out


def _poly_any(coeffs, s):
    """``sum c_i s^i`` at complex ``s`` for any number of coefficients (low first)."""
    if len(coeffs) == 1:
        return coeffs[0] + 0.0 * s
    return _poly_s(coeffs, s)


#: The fraction-free recursion rescales its numerators every this many stages, so their
#: growth (up to ~1e20 per stage at 10 GHz) never overflows a double.
RESCALE_EVERY = 3


def shared_ref_mag(p: ChainParams, f_hz) -> np.ndarray:
    """``|Vout/Vs|`` of the chain with a shared (floating) REF, in fraction-free form.

    The same affine recursion as :func:`service.engine.solver.chain.solve_params` (every node
    ``a + b v_ref``, REF closed by KCL at VDIV: ``v_ref = inj_a / (y_div - inj_b)``), but
    every quantity is kept as a numerator over one common denominator ``Q`` that collects
    the stages' denominators, so no complex division is done per frequency (numpy's complex
    division costs about eight complex multiplications); ``|Vout| = |N| / (|Q| |E|)`` at
    the end. Stage factors (multiplied through by ``s C (1 + s tau)`` as in
    :func:`stage_product_mag`):

    * coupling branch ``X -> (Rs_k) -> Cc -> Rb -> REF``: admittance ``y = s Cc / d``,
      ``d = 1 + s Cc (Rb + Rs_k)`` (``Rs_k`` = source impedance for stage 1, else 0);
      ``P = X Rb y + v_ref (d - s Cc Rb) / d``; injected current ``(X - v_ref) y``;
    * gain: ``O = (N_g P - R_g v_ref) / D_g`` with ``N_g, D_g`` from
      :func:`stage_product_mag` and ``R_g = A0 Rf`` when ``Rg`` returns to REF (then the
      leg injects ``(O - v_ref) / (Rf + Rg)``), else 0;
    * inverting: ``O = (alpha_n X + beta_n v_ref) / D`` with ``alpha_n = -A0 Rf s Cc``,
      ``beta_n = A0 (1 + s Cc (Rf + R'in))``;
    * output: load to REF (injects ``(O - v_ref)/RL``) or ``s Co RL / (1 + s Co RL)`` to GND.
    """
    w = TWO_PI * np.asarray(f_hz, dtype=float)
    values = [p.load_ohm, p.r_top_ohm, p.r_bottom_ohm, p.c_bypass_f, p.c_out_f,
              *p.gbw_hz, *p.c_couple_f, *p.r_bias_ohm, *p.r_feedback_ohm, *p.r_gain_ohm,
              *p.c_gain_f, *p.r_in_ohm, *(p.c_feedback_f or [])]
    shape = np.broadcast_shapes(w.shape, *(np.shape(v) for v in values if v is not None))
    s = np.zeros(shape, dtype=complex)
    s.imag = w
    a_n = np.ones(shape, dtype=complex)
    b_n = np.zeros(shape, dtype=complex)
    ia = np.zeros(shape, dtype=complex)
    ib = np.zeros(shape, dtype=complex)
    q = np.ones(shape, dtype=complex)
    a0 = p.a0
    rs = p.source_impedance_ohm
    n = len(p.r_feedback_ohm)
    for k in range(n):
        tau = a0 / (TWO_PI * p.gbw_hz[k])
        rf = p.r_feedback_ohm[k]
        cc = p.c_couple_f[k]
        rs_k = rs if k == 0 else 0.0
        cf = None if p.c_feedback_f is None else p.c_feedback_f[k]
        if p.inverting and cf is not None:
            alpha_c, beta_c, den_c = feedback_stage_polys(p, k, cf)
            den = _poly_any(den_c, s)
            alpha_s = _poly_any(alpha_c, s)
            new_b = b_n * alpha_s
            new_b += q * _poly_any(beta_c, s)
            a_n *= alpha_s
            b_n = new_b
            for arr in (q, ia, ib):
                arr *= den
        elif p.inverting:
            rin = p.r_in_ohm[k] + rs_k
            if cc is None:
                den = _poly_s([rf + rin + a0 * rin, tau * (rf + rin)], s)
                alpha = -a0 * rf
                beta = a0 * (rf + rin)
                new_b = b_n * alpha
                new_b += q * beta
                a_n *= alpha
            else:
                den = _poly_s([1.0 + a0, tau + cc * (rf + rin) + a0 * cc * rin,
                               tau * cc * (rf + rin)], s)
                alpha = s * (-a0 * rf * cc)
                beta = _poly_s([a0, a0 * cc * (rf + rin)], s)
                new_b = b_n * alpha
                new_b += q * beta
                a_n *= alpha
            b_n = new_b
            for arr in (q, ia, ib):
                arr *= den
        else:
            rb = p.r_bias_ohm[k]
            if rb is not None:
                if cc is None:
                    n_y, d_y, m_y = 1.0, rb + rs_k, rs_k  # real: y = 1/(Rb + Rs_k)
                else:
                    n_y = s * cc
                    d_y = _poly_s([1.0, cc * (rb + rs_k)], s)
                    m_y = 1.0 if k > 0 else _poly_s([1.0, cc * rs_k], s)
                # injection (X - v_ref) y, then P = X Rb y + v_ref m_y / d_y
                ia *= d_y
                ia += a_n * n_y
                ib *= d_y
                ib += (b_n - q) * n_y
                b_n *= n_y * rb
                if isinstance(m_y, float):
                    if m_y != 0.0:
                        b_n += q * m_y
                else:
                    b_n += q * m_y
                a_n *= n_y * rb
                q *= d_y
            rg = p.r_gain_ohm[k]
            cg = p.c_gain_f[k]
            if cf is not None:
                alpha_c, _, den_c = feedback_stage_polys(p, k, cf)
                den = _poly_any(den_c, s)
                num = _poly_any(alpha_c, s)
                a_n *= num
                b_n *= num
                if cg is None:
                    b_n -= q * (a0 * rf)
                for arr in (q, ia, ib):
                    arr *= den
                if cg is None:
                    # the leg O -> Zf -> Rg -> REF injects (O - v_ref) df / (Rf + Rg df):
                    # every quantity goes over the common denominator q (Rf + Rg df)
                    d_f = _poly_any([1.0, rf * cf], s)
                    d_l = _poly_any([rf + rg, rg * rf * cf], s)
                    inj_a = a_n * d_f
                    inj_b = (b_n - q) * d_f
                    for arr in (a_n, b_n, q, ia, ib):
                        arr *= d_l
                    ia += inj_a
                    ib += inj_b
            else:
                if cg is None:
                    den = _poly_s([rf + rg + a0 * rg, tau * (rf + rg)], s)
                    num = a0 * (rf + rg)
                    a_n *= num
                    b_n *= num
                    b_n -= q * (a0 * rf)
                else:
                    t_fg = cg * (rf + rg)
                    den = _poly_s([1.0 + a0, tau + t_fg + a0 * rg * cg, tau * t_fg], s)
                    num = _poly_s([a0, a0 * t_fg], s)
                    a_n *= num
                    b_n *= num
                for arr in (q, ia, ib):
                    arr *= den
                if cg is None:
                    leg = 1.0 / (rf + rg)
                    ia += a_n * leg
                    ib += (b_n - q) * leg
        if (k + 1) % RESCALE_EVERY == 0:
            scale = 1.0 / np.abs(q)
            for arr in (a_n, b_n, ia, ib, q):
                arr *= scale
    if p.c_out_f is None:
        leg = 1.0 / p.load_ohm
        ia += a_n * leg
        ib += (b_n - q) * leg
        b_n -= q  # Vout = O - v_ref
        out_mag = 1.0
    else:
        t_o = p.c_out_f * p.load_ohm * w
        out_mag = t_o / np.sqrt(1.0 + t_o * t_o)
    y_div = _poly_s([1.0 / p.r_top_ohm + 1.0 / p.r_bottom_ohm, p.c_bypass_f], s)
    e = q * y_div
    e -= ib
    num = a_n * e
    num += b_n * ia
    mag = np.abs(num)
    mag /= np.abs(q)
    mag /= np.abs(e)
    return mag * out_mag


def evaluator(params: ChainParams, model: str):
    """``f -> |Vout/Vs|`` for the named model (``"stage-product"`` or ``"chain-nodal"``)."""
    if model == STAGE_PRODUCT:
        factors = stage_factors(params)
        return lambda f: stage_product_mag(params, f, factors)
    if model == SHARED_REF:
        return lambda f: shared_ref_mag(params, f)
    return lambda f: np.abs(solve_params(params, f).vout)


def model_for(circuit: Circuit) -> str:
    """The stage-product model when REF is stiff, else the fraction-free chain recursion.

    ``CHAIN_NODAL`` (the chain solver itself, complex divisions and all) stays available
    for cross-checks.
    """
    return STAGE_PRODUCT if stiff_reference(circuit) else SHARED_REF


def figures(params: ChainParams, grid_hz: np.ndarray, batch: int, model: str = CHAIN_NODAL):
    """(gain_db, f_low_hz, f_high_hz) arrays for a batch of trial parameters.

    Floating-point warnings are silenced here: ``find_band`` extrapolates the refinement of a
    corner that does not exist (DC coupled) before discarding it as nan.
    """
    with np.errstate(all="ignore"):
        band = find_band(evaluator(params, model), batch, grid_hz)
        gain_db = 20.0 * np.log10(band.gain)
    return gain_db, band.f_low_hz, band.f_high_hz


def nominal_figures(circuit: Circuit, grid_hz: np.ndarray, model: str | None = None):
    """The Monte Carlo model's figures at nominal values (scalars)."""
    p = params_from_circuit(circuit)
    g, lo, hi = figures(p, grid_hz, 1, model or model_for(circuit))
    return float(g[0]), float(lo[0]), float(hi[0])


def draw(parts, trials: int, tol: Tolerances, rng: np.random.Generator) -> np.ndarray:
    """``(trials, parts)`` values, each uniform within nominal * (1 +- tolerance)."""
    u = rng.uniform(-1.0, 1.0, size=(trials, len(parts)))
    nominal = np.array([p.nominal for p in parts])
    half = np.array([tol.of(p.kind) for p in parts])
    return nominal * (1.0 + half * u)


def run(circuit: Circuit, *, trials: int, tol: Tolerances, rng: np.random.Generator,
        grid_hz: np.ndarray, workers: int | None = None,
        model: str | None = None, check_deadline=None) -> MonteCarloResult:
    """Run ``trials`` Monte Carlo trials of the circuit (``model`` default: :func:`model_for`).

    ``check_deadline`` (optional, no arguments or one label) is called before every chunk;
    the web layer passes its compute-budget checker, which raises once time is up.
    """
    model = model or model_for(circuit)
    if not 1 <= trials <= MAX_TRIALS:
        raise ValueError(f"trials must be 1..{MAX_TRIALS}, got {trials}")
    params = params_from_circuit(circuit)
    parts = varied_parts(params, tol, parts_mod.capacitor_kinds(circuit))
    values = draw(parts, trials, tol, rng)
    chunks = [(a, min(a + CHUNK_TRIALS, trials)) for a in range(0, trials, CHUNK_TRIALS)]

    def one(chunk):
        a, b = chunk
        if check_deadline is not None:
            check_deadline("tolerance Monte Carlo")
        p = with_values(params, parts, values[a:b])
        return figures(p, grid_hz, b - a, model)

    workers = workers or DEFAULT_WORKERS
    if workers > 1:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            results = list(pool.map(one, chunks))
    else:
        results = [one(c) for c in chunks]
    gain_db, f_low, f_high = (np.concatenate([r[i] for r in results]) for i in range(3))
    return MonteCarloResult(gain_db=gain_db, f_low_hz=f_low, f_high_hz=f_high,
                            grid_hz=grid_hz, parts=parts, model=model)


def worst_cases(circuit: Circuit, *, tol: Tolerances, grid_hz: np.ndarray) -> dict:
    """First-order worst case of each figure: ``{figure: (low, high)}`` (full chain-nodal
    model: only a handful of evaluations)."""
    params = params_from_circuit(circuit)
    parts = varied_parts(params, tol, parts_mod.capacitor_kinds(circuit))
    nominal = np.array([p.nominal for p in parts])
    if not parts:
        g, lo, hi = figures(params, grid_hz, 1)
        nom = {"gain_db": g[0], "f_low_hz": lo[0], "f_high_hz": hi[0]}
        return {k: (float(v), float(v)) for k, v in nom.items()}
    steps = np.vstack([nominal, nominal * (1.0 + SENSITIVITY_STEP * np.eye(len(parts)))])
    rows = dict(zip(FIGURES, figures(with_values(params, parts, steps), grid_hz, len(steps)),
                    strict=True))
    half = np.array([tol.of(p.kind) for p in parts])
    cases = []
    for name in FIGURES:
        with np.errstate(invalid="ignore"):
            sens = np.sign(np.nan_to_num(rows[name][1:] - rows[name][0]))
        cases.append(nominal * (1.0 - half * sens))  # lowers the figure
        cases.append(nominal * (1.0 + half * sens))  # raises it
    evaluated = figures(with_values(params, parts, np.vstack(cases)), grid_hz, len(cases))
    out = {}
    for i, name in enumerate(FIGURES):
        col = evaluated[i]
        out[name] = (float(col[2 * i]), float(col[2 * i + 1]))
    return out


def _float_or_nan(value) -> float:
    return math.nan if value is None else float(value)


def summary(values: np.ndarray) -> dict:
    """min, p1, p5, p50, p95, p99, max over the finite values (None when there are none)."""
    finite = values[np.isfinite(values)]
    keys = ("min", "p1", "p5", "p50", "p95", "p99", "max")
    if finite.size == 0:
        return dict.fromkeys(keys)
    q = np.percentile(finite, PERCENTILES)
    return {"min": float(finite.min()), **{f"p{p}": float(v) for p, v in zip(PERCENTILES, q,
                                                                            strict=True)},
            "max": float(finite.max())}


def meets(result: MonteCarloResult, target: Target) -> np.ndarray:
    """Per trial: f_low <= target, f_high >= target, |gain_db - target| <= tolerance, and
    the band inside ``f_low_min_hz`` / ``f_high_max_hz`` when the target gives them.

    A trial without a low corner on the grid (DC coupled, or far below the target) meets the
    low-corner condition; a trial without a high corner inside the grid meets the high one.
    """
    gain_ok = np.abs(result.gain_db - target.gain_db) <= target.gain_tolerance_db
    with np.errstate(invalid="ignore"):
        low_ok = ~(result.f_low_hz > target.f_low_hz)
        high_ok = ~(result.f_high_hz < target.f_high_hz)
        if target.f_high_max_hz is not None:
            high_ok &= ~(result.f_high_hz > target.f_high_max_hz) & np.isfinite(result.f_high_hz)
        if target.f_low_min_hz is not None:
            low_ok &= result.f_low_hz >= target.f_low_min_hz
    return gain_ok & low_ok & high_ok


def tolerance_block(circuit: Circuit, *, target: Target | None, as_built: dict, trials: int,
                    seed: int, resistor_tolerance_pct: float, capacitor_tolerance_pct: float,
                    gbw_tolerance_pct: float = 0.0,
                    c0g_tolerance_pct: float | None = None,
                    electrolytic_tolerance_pct: float | None = None,
                    frequency_points: int = DEFAULT_FREQUENCY_POINTS,
                    check_deadline=None) -> dict:
    """The response's ``tolerance`` block (JSON-ready).

    Each capacitor takes its class's tolerance (``c0g_tolerance_pct``,
    ``capacitor_tolerance_pct`` for X7R/X5R, ``electrolytic_tolerance_pct``; the first and
    last default to ``capacitor_tolerance_pct`` when not given).
    """
    tol = Tolerances(resistor_tolerance_pct, capacitor_tolerance_pct, gbw_tolerance_pct,
                     c0g_tolerance_pct, electrolytic_tolerance_pct)
    f_low = _float_or_nan(as_built.get("f_low_hz"))
    f_high = _float_or_nan(as_built.get("f_high_hz"))
    if not math.isfinite(f_high):  # no high corner below 10 GHz: grid up to the range top
        f_high = F_MAX_HZ / 10 ** GRID_MARGIN_DECADES
    grid = analysis_grid(f_low, f_high, frequency_points)
    rng = np.random.default_rng(seed)
    result = run(circuit, trials=trials, tol=tol, rng=rng, grid_hz=grid,
                 check_deadline=check_deadline)
    nominal = dict(zip(FIGURES, nominal_figures(circuit, grid, result.model), strict=True))
    worst = worst_cases(circuit, tol=tol, grid_hz=grid)
    reference = {"gain_db": as_built.get("gain_db"), "f_low_hz": as_built.get("f_low_hz"),
                 "f_high_hz": as_built.get("f_high_hz")}
    deviation = 0.0
    for name in FIGURES:
        ref = reference[name]
        if ref is not None and math.isfinite(ref) and math.isfinite(nominal[name]):
            scale = abs(ref) if name != "gain_db" else abs(10 ** (ref / 20))
            diff = (abs(nominal[name] - ref) if name != "gain_db"
                    else abs(10 ** (nominal[name] / 20) - 10 ** (ref / 20)))
            deviation = max(deviation, diff / scale)
    block = {
        "trials": trials,
        "seed": seed,
        "resistor_tolerance_pct": resistor_tolerance_pct,
        "capacitor_tolerance_pct": capacitor_tolerance_pct,
        "c0g_tolerance_pct": tol.of(parts_mod.C0G) * 100.0,
        "electrolytic_tolerance_pct": tol.of(parts_mod.ELECTROLYTIC) * 100.0,
        "gbw_tolerance_pct": gbw_tolerance_pct,
        "distribution": ("independent uniform: every resistor and capacitor (source and load "
                         "impedances excepted) at nominal*(1+t*u), u uniform on [-1, 1], t its "
                         "tolerance (a capacitor's by the class its BOM line states: C0G/NP0, "
                         "X7R/X5R or aluminium electrolytic); each op-amp unit's "
                         "gain-bandwidth likewise within gbw_tolerance_pct"),
        "model": {
            "name": result.model,
            "description": MODEL_DESCRIPTIONS[result.model],
            "frequency_points": int(grid.size),
            "grid_hz": [float(grid[0]), float(grid[-1])],
            "varied_parts": len(result.parts),
            "nominal_max_rel_deviation": deviation,
        },
        "yield": None if target is None else float(np.mean(meets(result, target))),
    }
    for name in FIGURES:
        values = getattr(result, name)
        block[name] = {
            **summary(values),
            "nominal": nominal[name],
            "worst_case_low": worst[name][0],
            "worst_case_high": worst[name][1],
            "missing": int(np.count_nonzero(~np.isfinite(values))),
        }
    return block
