"""Fast magnitude kernels ``|Vout/Vs|`` of the chain, vectorised over trials and frequencies.

The same circuit model and the same equations as :mod:`service.engine.solver.chain` (whose
complex nodal solution, "chain-nodal", stays the reference), rearranged so a large batch
costs less:

* "stage-product" (:func:`stage_product_mag`): with a stiff REF (dual supply or buffered
  VMID) the cascade is a product of per-stage transfer functions, each ``|H_k|^2`` a ratio
  of real polynomials in ``w^2``: a few real Horner steps per stage and frequency;
* "chain-fraction-free" (:func:`shared_ref_mag`): with a shared bias divider, the chain's
  affine recursion with every quantity over one common denominator, so no complex division
  is done per frequency.

Both are algebraically identical to the nodal solution (tests/analyses/test_montecarlo.py
compares them with it trial by trial: 1e-9 relative up to four stages, 1e-5 at twelve).
The Monte Carlo, the yield predictor and the synthesis's low-side search evaluate many
candidate circuits through :func:`evaluator`.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from service.engine.solver.chain import TWO_PI, ChainParams, solve_params

CHAIN_NODAL = "chain-nodal"
STAGE_PRODUCT = "stage-product"
SHARED_REF = "chain-fraction-free"


def model_of(p: ChainParams) -> str:
    """The fast model valid for ``p``: stage-product when REF is stiff (no bias divider in
    the parameters), else the fraction-free chain recursion."""
    return STAGE_PRODUCT if p.r_top_ohm is None else SHARED_REF


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


class _JOmega:
    """``s = j w`` on the (trials x frequencies) shape: polynomials with real coefficients
    are evaluated as their even part (real) and odd part (imaginary) by real Horner steps
    in ``x = -w^2``, about half the work of complex arithmetic."""

    def __init__(self, w: np.ndarray, shape: tuple):
        self.w = w
        self.mx = -(w * w)
        self.shape = shape

    def poly(self, coeffs) -> np.ndarray:
        """``sum c_i (j w)^i`` (real coefficients, floats or trial arrays, low first):
        ``sum c_2k (-w^2)^k + j w sum c_(2k+1) (-w^2)^k``."""
        out = np.empty(self.shape, dtype=complex)
        _horner_into(coeffs[0::2], self.mx, out.real)
        odd = coeffs[1::2]
        if odd:
            _horner_into(odd, self.mx, out.imag)
            out.imag *= self.w
        else:
            out.imag[...] = 0.0
        return out


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
    jw = _JOmega(w, shape)
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
            den = jw.poly(den_c)
            alpha_s = jw.poly(alpha_c)
            new_b = b_n * alpha_s
            new_b += q * jw.poly(beta_c)
            a_n *= alpha_s
            b_n = new_b
            for arr in (q, ia, ib):
                arr *= den
        elif p.inverting:
            rin = p.r_in_ohm[k] + rs_k
            if cc is None:
                den = jw.poly([rf + rin + a0 * rin, tau * (rf + rin)])
                alpha = -a0 * rf
                beta = a0 * (rf + rin)
                new_b = b_n * alpha
                new_b += q * beta
                a_n *= alpha
            else:
                den = jw.poly([1.0 + a0, tau + cc * (rf + rin) + a0 * cc * rin,
                               tau * cc * (rf + rin)])
                alpha = jw.poly([0.0, -a0 * rf * cc])
                beta = jw.poly([a0, a0 * cc * (rf + rin)])
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
                    n_y = jw.poly([0.0, cc])
                    d_y = jw.poly([1.0, cc * (rb + rs_k)])
                    m_y = 1.0 if k > 0 else jw.poly([1.0, cc * rs_k])
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
                den = jw.poly(den_c)
                num = jw.poly(alpha_c)
                a_n *= num
                b_n *= num
                if cg is None:
                    b_n -= q * (a0 * rf)
                for arr in (q, ia, ib):
                    arr *= den
                if cg is None:
                    # the leg O -> Zf -> Rg -> REF injects (O - v_ref) df / (Rf + Rg df):
                    # every quantity goes over the common denominator q (Rf + Rg df)
                    d_f = jw.poly([1.0, rf * cf])
                    d_l = jw.poly([rf + rg, rg * rf * cf])
                    inj_a = a_n * d_f
                    inj_b = (b_n - q) * d_f
                    for arr in (a_n, b_n, q, ia, ib):
                        arr *= d_l
                    ia += inj_a
                    ib += inj_b
            else:
                if cg is None:
                    den = jw.poly([rf + rg + a0 * rg, tau * (rf + rg)])
                    num = a0 * (rf + rg)
                    a_n *= num
                    b_n *= num
                    b_n -= q * (a0 * rf)
                else:
                    t_fg = cg * (rf + rg)
                    den = jw.poly([1.0 + a0, tau + t_fg + a0 * rg * cg, tau * t_fg])
                    num = jw.poly([a0, a0 * t_fg])
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
    y_div = jw.poly([1.0 / p.r_top_ohm + 1.0 / p.r_bottom_ohm, p.c_bypass_f])
    e = q * y_div
    e -= ib
    num = a_n * e
    num += b_n * ia
    mag = np.abs(num)
    mag /= np.abs(q)
    mag /= np.abs(e)
    return mag * out_mag


def evaluator(params: ChainParams, model: str):
    """``f -> |Vout/Vs|`` for the named model (``"stage-product"``,
    ``"chain-fraction-free"`` or ``"chain-nodal"``).

    The fraction-free recursion keeps about ten (trials x frequencies) complex arrays alive;
    a large batch is therefore evaluated in blocks of trials of about ``BLOCK_POINTS``
    points, whose arrays stay in the processor's cache (4 stages x 200 frequencies: 55 us
    per trial against 100 us in one 2000-trial block, on the 2-core build machine; the
    real-valued stage-product model gained nothing from blocks)."""
    if model == STAGE_PRODUCT:
        factors = stage_factors(params)
        return lambda f: stage_product_mag(params, f, factors)
    if model == SHARED_REF:
        return lambda f: _in_blocks(shared_ref_mag, params, f)
    return lambda f: np.abs(solve_params(params, f).vout)


#: Points (trials x frequencies) per block of :func:`evaluator`'s fraction-free model.
BLOCK_POINTS = 25_000


def _in_blocks(kernel, params: ChainParams, f_hz) -> np.ndarray:
    """``kernel(params, f_hz)`` computed over blocks of trials (rows) and stacked."""
    f = np.asarray(f_hz, dtype=float)
    rows = _trial_rows(params)
    if f.ndim != 2 or rows * f.shape[1] <= BLOCK_POINTS or f.shape[0] not in (1, rows):
        return kernel(params, f)
    step = max(1, BLOCK_POINTS // f.shape[1])
    out = np.empty((rows, f.shape[1]))
    for a in range(0, rows, step):
        b = min(a + step, rows)
        out[a:b] = kernel(_trial_slice(params, a, b), f if f.shape[0] == 1 else f[a:b])
    return out


def _trial_rows(params: ChainParams) -> int:
    """Number of trials (rows) the parameters carry (1 when every value is a scalar)."""
    rows = 1
    for value in vars(params).values():
        for v in (value if isinstance(value, list) else [value]):
            if isinstance(v, np.ndarray) and v.ndim == 2:
                rows = max(rows, v.shape[0])
    return rows


def _trial_slice(params: ChainParams, a: int, b: int) -> ChainParams:
    """The parameters of trials ``a:b`` (per-trial columns sliced, scalars kept)."""
    def cut(v):
        if isinstance(v, np.ndarray) and v.ndim == 2 and v.shape[0] > 1:
            return v[a:b]
        return v

    changes = {}
    for name, value in vars(params).items():
        if isinstance(value, list):
            changes[name] = [cut(v) for v in value]
        elif isinstance(value, np.ndarray):
            changes[name] = cut(value)
    return replace(params, **changes)
