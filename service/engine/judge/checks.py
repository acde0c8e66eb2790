"""Build checks: what a circuit must pass, as built, to work at its operating conditions.

Every check is judged on the circuit model (README "The circuit model") by exact nodal
analysis (:mod:`service.engine.solver.mna`): AC figures at the signal frequencies, DC
figures from the operating point and the worst-case offsets
(:mod:`service.engine.judge.dc_errors`). The list is in the contract's order, stages in
signal order within a check:

* ``output_swing`` (per stage): ``|DC error at O_k| + Vin x max |V(O_k) - V(REF)|/|Vs|``
  against the room between O_k's DC operating point and the nearer edge of the swing window
  ``[v_neg + swing_to_neg_v, v_pos - swing_to_pos_v]``;
* ``input_common_mode`` (per stage): the + input's DC error plus its AC peak against the room
  between its DC level and the nearer edge of ``[v_neg + cm_to_neg_v, v_pos - cm_to_pos_v]``;
* ``slew_rate`` (per stage): ``max 2 pi f Vin |V(O_k) - V(REF)|/|Vs|`` (V/us) against
  ``slew_v_per_us`` (the largest sine slope, ``2 pi f Vp``: common practice);
* ``stability`` (per op-amp unit: stages, VMID follower, spares): the noise gain
  ``1/|beta|`` where the loop gain ``|A beta|`` crosses unity, against ``min_stable_gain``;
  then one entry for the whole circuit: the largest growth rate (1/s, the real part of its
  natural frequencies) against 0, since stages sharing a soft bias node close a loop that
  no single unit's figure shows;
* ``supply_ripple``: ``20 log10 |Vout/Vcc|`` at each supply-rejection frequency and its
  maximum over the target band (an analysis without a target: the as-built band), against
  ``-ripple_rejection_db``;
* ``part_values``: largest capacitor, smallest and largest resistor against the limits;
* ``output_current`` (per unit, when the op-amp gives ``output_current_max_a``): the peak
  current out of the op-amp's output at the stated input;
* reported figures: ``startup_time``, ``input_impedance`` and ``supply_current``.

"Max over frequency" is taken over the *signal band*: from the lower of the target's and
the as-built low corner to the higher of their high corners (DC-coupled: from 1 mHz), where
the stated input applies. Beyond the band the single-pole op-amp makes ``2 pi f |H|`` tend
to ``2 pi GBW`` for a first stage, a slope no in-band input reaches.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np
from scipy.optimize import brentq

from service.engine.judge import dc_errors
from service.engine.judge.supply import supply_current_a
from service.engine.judge.supply_rejection import RIPPLE_FREQUENCIES_HZ
from service.engine.model.circuit import INVERTING, Circuit, Limits, Target
from service.engine.model.spares import spare_units
from service.engine.solver import corners
from service.engine.solver.chain import open_loop_gain
from service.engine.solver.mna import (
    MnaSystem,
    build,
    natural_frequencies,
    reference_node,
    stage_nodes,
)
from service.engine.solver.transient import settling_time_s

TWO_PI = 2.0 * math.pi
#: Points per decade of the signal-band grid; each maximum is then refined on a finer grid
#: around the best point (``REFINE_POINTS`` across two grid steps).
BAND_POINTS_PER_DECADE = 24
BAND_MIN_POINTS = 24
REFINE_POINTS = 9
#: Start-up settles when every node is within this fraction of the supply span of its
#: final DC value (the contract's 1 %).
STARTUP_BAND_FRACTION = 0.01
#: Relative slack of pass/fail comparisons against limits (float noise only).
SLACK = 1e-9

#: Names of the checks, in the contract's order.
CHECK_ORDER = ("output_swing", "input_common_mode", "slew_rate", "stability", "supply_ripple",
               "part_values", "output_current", "startup_time", "input_impedance",
               "supply_current")


@dataclass(frozen=True)
class Check:
    """One entry of the ``checks`` list (the contract's field names)."""

    check: str
    stage: int | None
    value: float | None
    limit: float | None
    unit: str
    passed: bool | None
    detail: str
    #: Figures behind the value (not in the contract's entry), e.g. the DC level.
    extra: dict = field(default_factory=dict, compare=False)

    def to_dict(self) -> dict:
        out = asdict(self)
        del out["extra"]
        return out

    def shortfall(self) -> dict:
        """The ``shortfalls`` entry of a failing check."""
        return {"quantity": self.check, "stage": self.stage, "target": self.limit,
                "achieved": self.value}


def _at_most(value: float, limit: float | None) -> bool | None:
    return None if limit is None else bool(value <= limit + SLACK * abs(limit))


def _at_least(value: float, limit: float | None) -> bool | None:
    return None if limit is None else bool(value >= limit - SLACK * abs(limit))


# ------------------------------------------------------------------ the signal band


def signal_band_hz(target: Target | None, f_low_hz: float, f_high_hz: float) -> tuple:
    """``(low, high)`` of the frequencies the stated input may occupy (module docstring)."""
    lows = [f for f in (f_low_hz, target.f_low_hz if target else None)
            if f is not None and math.isfinite(f)]
    highs = [f for f in (f_high_hz, target.f_high_hz if target else None)
             if f is not None and math.isfinite(f)]
    low = min(lows) if lows and min(lows) > 0 else corners.F_MIN_HZ
    high = max(highs) if highs else corners.F_MAX_HZ
    return max(low, corners.F_MIN_HZ), min(max(high, low * 1.001), corners.F_MAX_HZ)


def ripple_band_hz(ctx) -> tuple:
    """The band over which supply ripple is judged: the target band (the contract's), or
    the as-built band of an analysis without a target."""
    if ctx.target is not None:
        return signal_band_hz(ctx.target, ctx.target.f_low_hz, ctx.target.f_high_hz)
    return signal_band_hz(None, ctx.f_low_hz, ctx.f_high_hz)


def band_grid(low_hz: float, high_hz: float) -> np.ndarray:
    decades = math.log10(high_hz / low_hz)
    count = max(BAND_MIN_POINTS, int(math.ceil(decades * BAND_POINTS_PER_DECADE)) + 1)
    return np.geomspace(low_hz, high_hz, count)


def band_maxima(system: MnaSystem, f_hz: np.ndarray, quantities) -> np.ndarray:
    """Maximum over ``f_hz`` of each quantity, refined around its best grid point.

    ``quantities(f, x) -> (Q, F)`` maps frequencies and forward solutions (signal source
    ``Vs = 1``) to Q non-negative curves. The grid maximum of each is refined on
    ``REFINE_POINTS`` points spanning the neighbouring grid steps (one batched solve), and
    the larger of the two is kept.
    """
    x = system.solve(f_hz, system.signal_rhs())
    q = quantities(f_hz, x)
    best = q.max(axis=1)
    idx = np.argmax(q, axis=1)
    lo = f_hz[np.maximum(idx - 1, 0)]
    hi = f_hz[np.minimum(idx + 1, f_hz.size - 1)]
    fine = np.exp(np.linspace(np.log(lo), np.log(hi), REFINE_POINTS)).T  # (Q, R)
    flat = fine.ravel()
    xf = system.solve(flat, system.signal_rhs())
    qf = quantities(flat, xf).reshape(q.shape[0], q.shape[0], REFINE_POINTS)
    own = qf[np.arange(q.shape[0]), np.arange(q.shape[0]), :].max(axis=1)
    return np.maximum(best, own)


# ------------------------------------------------------------------ stability


def _feedback_fraction(circuit: Circuit, k: int, f_hz: np.ndarray) -> np.ndarray:
    """``beta(jf)`` of stage k: the fraction of its output fed back to its - input.

    Non-inverting: ``Zg / (Zf + Zg)``, ``Zg = Rg + 1/(sCg)``; inverting:
    ``Zi / (Zi + Zf)``, ``Zi = Rin + 1/(sCc) + Rdrive`` where the drive is the source
    impedance for stage 1 and an op-amp output (0 ohm) after it. ``Zf = Rf || 1/(sCf)``.
    """
    st = circuit.stages[k]
    s = 1j * TWO_PI * f_hz
    c_fb = getattr(st, "c_feedback_f", None)
    z_f = st.r_feedback_ohm / (1.0 + s * st.r_feedback_ohm * c_fb) if c_fb else \
        st.r_feedback_ohm + 0.0 * s
    if circuit.topology == INVERTING:
        z_i = st.r_in_ohm + (0.0 if st.c_couple_f is None else 1.0 / (s * st.c_couple_f))
        z_i = z_i + (circuit.source_impedance_ohm if k == 0 else 0.0)
        return z_i / (z_i + z_f)
    z_g = st.r_gain_ohm + (0.0 if st.c_gain_f is None else 1.0 / (s * st.c_gain_f))
    return z_g / (z_f + z_g)


def noise_gain_at_crossover(circuit: Circuit, beta) -> float:
    """``1/|beta|`` at the highest frequency where ``|A(jf) beta(jf)| = 1``.

    ``beta`` maps frequencies to the feedback fraction. The crossing is bracketed on the
    corner grid (24 points per decade, 1 mHz .. 10 GHz) and refined by Brent's method on
    ``log |A beta|`` against ``log f``. A loop whose gain never reaches 1 reports the noise
    gain at the grid's lowest frequency.
    """
    op = circuit.opamp
    f = corners.GRID_HZ

    def log_loop(log_f):
        ff = np.exp(np.atleast_1d(log_f))
        return np.log(np.abs(open_loop_gain(1j * TWO_PI * ff, op.a0, op.gbw_hz) * beta(ff)))

    values = log_loop(np.log(f))
    above = np.nonzero(values >= 0.0)[0]
    if above.size == 0:
        return float(1.0 / np.abs(beta(f[:1]))[0])
    i = above[-1]
    if i == f.size - 1:
        return float(1.0 / np.abs(beta(f[-1:]))[0])
    root = brentq(lambda lf: float(log_loop(lf)[0]), math.log(f[i]), math.log(f[i + 1]),
                  xtol=1e-10)
    return float(1.0 / np.abs(beta(np.array([math.exp(root)])))[0])


#: A natural frequency counts as growing when its real part exceeds this fraction of its
#: magnitude (eigenvalue round-off of a well-damped circuit sits many decades below).
GROWTH_TOLERANCE = 1e-9


def growth_rate_per_s(system: MnaSystem) -> float:
    """The largest real part (1/s) of the circuit's natural frequencies, or 0 when every
    one decays (:func:`service.engine.solver.mna.natural_frequencies`)."""
    s = natural_frequencies(system)
    growing = s.real > GROWTH_TOLERANCE * np.maximum(np.abs(s), 1.0)
    return float(s.real[growing].max()) if growing.any() else 0.0


def _stability_checks(circuit: Circuit, system: MnaSystem) -> list[Check]:
    op = circuit.opamp
    need = op.min_stable_gain
    out = []

    def entry(stage, unit_name, ng):
        ok = _at_least(ng, need)
        verdict = "stable" if ok else "may oscillate"
        out.append(Check("stability", stage, ng, need, "", ok,
                         f"{unit_name} runs at a noise gain of {ng:.4g} where its loop gain "
                         f"crosses unity; the op-amp needs at least {need:g} ({verdict})."))

    for k in range(circuit.n_stages):
        ng = noise_gain_at_crossover(circuit, lambda f, k=k: _feedback_fraction(circuit, k, f))
        entry(k + 1, f"Stage {k + 1}", ng)
    if circuit.bias is not None and circuit.bias.buffered:
        entry(None, "The VMID follower", 1.0)
    for spare in spare_units(circuit):
        how = ("a follower of REF" if spare.r_feedback_ohm is None else
               f"an amplifier of REF ({spare.r_feedback_ohm:g}/{spare.r_gain_ohm:g} ohm)")
        entry(None, f"Spare unit {spare.index + 1}, wired as {how},", spare.noise_gain)
    rate = growth_rate_per_s(system)
    out.append(Check(
        "stability", None, rate, 0.0, "", rate <= 0.0,
        "Every natural frequency of the whole circuit decays (no loop through the shared "
        "bias node or the supply rings up)." if rate <= 0.0 else
        f"The whole circuit has a natural frequency growing at {rate:.3g} 1/s: a loop "
        "closed through the shared bias node oscillates or latches."))
    return out


# ------------------------------------------------------------------ supply ripple


def supply_transfer(system: MnaSystem, circuit: Circuit, f_hz) -> np.ndarray | None:
    """Complex ``Vout/Vcc``: through the bias network on a single supply (plus PSRR terms),
    through the op-amps' finite ``psrr_db`` alone on a dual supply (``v_pos`` rail); None on
    a dual supply with ideal rejection."""
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    if "VCC" in system.rows:
        return system.adjoint(f) @ system.supply_rhs()
    if circuit.opamp.psrr_db is None:
        return None
    k = 10.0 ** (-circuit.opamp.psrr_db / 20.0)
    y = system.adjoint(f)
    return k * sum(y[:, system.rows[u.name]] for u in system.units)


def _ripple_checks(system, circuit, limits: Limits, band, frequencies) -> list[Check]:
    """The ``supply_ripple`` entries: one per frequency, then the band maximum (grid
    maximum refined on ``REFINE_POINTS`` around it). Two adjoint solves in all."""
    f = np.asarray(frequencies, dtype=float)
    grid = band_grid(*band)
    h = supply_transfer(system, circuit, np.concatenate([f, grid]))
    if h is None:
        return []
    mag = np.abs(h)
    limit = -limits.ripple_rejection_db
    path = ("the bias network" if circuit.bias is not None else
            "the op-amps' supply rejection (psrr_db)")
    out = []
    with np.errstate(divide="ignore"):
        for fi, hi in zip(f, mag[:f.size], strict=True):
            db = float(20.0 * np.log10(hi))
            out.append(Check("supply_ripple", None, db, limit, "dB", _at_most(db, limit),
                             f"Supply ripple at {fi:g} Hz reaches the output at {db:.3g} dB "
                             f"through {path}; the limit is {limit:g} dB."))
        band_mag = mag[f.size:]
        i = int(np.argmax(band_mag))
        lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
        fine = np.geomspace(lo, hi, REFINE_POINTS)
        fmag = np.abs(supply_transfer(system, circuit, fine))
        j = int(np.argmax(fmag))
        f_max, peak = (fine[j], fmag[j]) if fmag[j] > band_mag[i] else (grid[i], band_mag[i])
        db = float(20.0 * np.log10(peak))
    out.append(Check("supply_ripple", None, db, limit, "dB", _at_most(db, limit),
                     f"Maximum of the supply-to-output gain over the band {band[0]:.4g}.."
                     f"{band[1]:.4g} Hz: {db:.3g} dB at {f_max:.4g} Hz; the limit is "
                     f"{limit:g} dB."))
    return out


# ------------------------------------------------------------------ part values


def passive_parts(circuit: Circuit) -> tuple[list, list]:
    """``(capacitors, resistors)`` as ``(value, stage or None, role)``: every part of the
    board's signal path, bias network and spare units; the source and load are not parts."""
    caps, res = [], []
    for k, st in enumerate(circuit.stages, start=1):
        for role in ("c_couple_f", "c_gain_f", "c_feedback_f"):
            v = getattr(st, role, None)
            if v is not None:
                caps.append((v, k, role))
        for role in ("r_bias_ohm", "r_feedback_ohm", "r_gain_ohm", "r_in_ohm"):
            v = getattr(st, role, None)
            if v is not None:
                res.append((v, k, role))
    if circuit.c_out_f is not None:
        caps.append((circuit.c_out_f, None, "c_out_f"))
    if circuit.bias is not None:
        b = circuit.bias
        caps.append((b.c_bypass_f, None, "bias c_bypass_f"))
        res += [(b.r_top_ohm, None, "bias r_top_ohm"), (b.r_bottom_ohm, None,
                                                         "bias r_bottom_ohm")]
    for spare in spare_units(circuit):
        if spare.r_feedback_ohm is not None:
            res += [(spare.r_feedback_ohm, None, "spare unit r_feedback_ohm"),
                    (spare.r_gain_ohm, None, "spare unit r_gain_ohm")]
    return caps, res


def _where(stage, role) -> str:
    return f"stage {stage} {role}" if stage is not None else role


def _part_checks(circuit: Circuit, limits: Limits) -> list[Check]:
    caps, res = passive_parts(circuit)
    out = []
    if caps:
        v, k, role = max(caps, key=lambda c: c[0])
        ok = _at_most(v, limits.max_capacitor_f)
        out.append(Check("part_values", k, v, limits.max_capacitor_f, "F", ok,
                         f"Largest capacitor {v * 1e6:.4g} uF ({_where(k, role)}); limit "
                         f"{limits.max_capacitor_f * 1e6:.4g} uF."))
    else:  # a DC-coupled chain: nothing to exceed the limit
        out.append(Check("part_values", None, None, limits.max_capacitor_f, "F", True,
                         "No capacitor in the signal path or bias network (DC coupled)."))
    v, k, role = min(res, key=lambda r: r[0])
    out.append(Check("part_values", k, v, limits.min_resistor_ohm, "ohm",
                     _at_least(v, limits.min_resistor_ohm),
                     f"Smallest resistor {v:.4g} ohm ({_where(k, role)}); at least "
                     f"{limits.min_resistor_ohm:.4g} ohm."))
    v, k, role = max(res, key=lambda r: r[0])
    out.append(Check("part_values", k, v, limits.max_resistor_ohm, "ohm",
                     _at_most(v, limits.max_resistor_ohm),
                     f"Largest resistor {v:.4g} ohm ({_where(k, role)}); at most "
                     f"{limits.max_resistor_ohm:.4g} ohm."))
    return out


# ------------------------------------------------------------------ all checks


@dataclass(frozen=True)
class CheckContext:
    """What the checks are judged at: the stated input, the target (optional), the limits,
    the as-built corners and peak frequency, and the supply-rejection frequencies."""

    input_peak_v: float
    target: Target | None
    limits: Limits
    f_low_hz: float
    f_high_hz: float
    peak_hz: float
    ripple_frequencies_hz: tuple = RIPPLE_FREQUENCIES_HZ


def run_checks(circuit: Circuit, ctx: CheckContext, *, startup: bool = True) -> list[Check]:
    """Every check of the module docstring, in the contract's order.

    ``startup=False`` skips the start-up transient (the costliest figure) unless a limit
    asks for it; the synthesis uses this while it compares candidates.
    """
    system = build(circuit)
    nodes = stage_nodes(circuit)
    ref = reference_node(circuit)
    n = circuit.n_stages
    op = circuit.opamp
    sup = circuit.supply
    vin = ctx.input_peak_v
    band = signal_band_hz(ctx.target, ctx.f_low_hz, ctx.f_high_hz)
    grid = band_grid(*band)
    errors = dc_errors.stage_dc_errors(circuit, system)
    unit_rows = [system.rows[f"U{k}"] for k in range(1, n + 1)]
    if circuit.bias is not None and circuit.bias.buffered:
        unit_rows.append(system.rows["U_bias"])

    def v(x, name):
        return system.voltage(x, name)

    def quantities(f, x):
        rows = []
        vref = v(x, ref)
        for nd in nodes:
            rows.append(np.abs(v(x, nd.out) - vref))                     # swing
        for nd in nodes:
            rows.append(np.abs(v(x, nd.plus)))                           # + input
        for nd in nodes:
            rows.append(TWO_PI * f * np.abs(v(x, nd.out) - vref))        # slope
        for r in unit_rows:
            rows.append(np.abs(x[:, r]))                                  # output current
        return np.array(rows)

    maxima = band_maxima(system, grid, quantities) * vin
    swing_ac, plus_ac = maxima[:n], maxima[n:2 * n]
    slope, current = maxima[2 * n:3 * n], maxima[3 * n:]
    lo, hi = sup.v_neg + op.swing_to_neg_v, sup.v_pos - op.swing_to_pos_v
    cm_lo, cm_hi = sup.v_neg + op.cm_to_neg_v, sup.v_pos - op.cm_to_pos_v
    band_txt = f"over {band[0]:.4g}..{band[1]:.4g} Hz"

    checks: list[Check] = []
    for k, e in enumerate(errors):
        need = e.out_error_v + swing_ac[k]
        room = min(hi - e.out_dc_v, e.out_dc_v - lo)
        checks.append(Check(
            "output_swing", k + 1, need, room, "V", _at_most(need, room),
            f"Stage {k + 1} output sits at {e.out_dc_v:.4g} V DC (worst-case offset "
            f"{e.out_error_v:.3g} V) and swings {swing_ac[k]:.4g} V peak {band_txt}; the "
            f"swing window {lo:.4g}..{hi:.4g} V leaves {room:.4g} V.",
            {"dc_v": e.out_dc_v, "dc_error_v": e.out_error_v}))
    for k, e in enumerate(errors):
        need = e.plus_error_v + plus_ac[k]
        room = min(cm_hi - e.plus_dc_v, e.plus_dc_v - cm_lo)
        checks.append(Check(
            "input_common_mode", k + 1, need, room, "V", _at_most(need, room),
            f"Stage {k + 1} + input sits at {e.plus_dc_v:.4g} V (worst-case offset "
            f"{e.plus_error_v:.3g} V) with {plus_ac[k]:.3g} V peak; the input range "
            f"{cm_lo:.4g}..{cm_hi:.4g} V leaves {room:.4g} V.",
            {"dc_v": e.plus_dc_v, "dc_error_v": e.plus_error_v}))
    for k in range(n):
        need = slope[k] / 1e6
        checks.append(Check(
            "slew_rate", k + 1, need, op.slew_v_per_us, "V/us",
            _at_most(need, op.slew_v_per_us),
            f"Stage {k + 1} output needs {need:.3g} V/us (largest 2 pi f Vpeak {band_txt}); "
            f"the op-amp slews {op.slew_v_per_us:g} V/us."))
    checks += _stability_checks(circuit, system)
    checks += _ripple_checks(system, circuit, ctx.limits, ripple_band_hz(ctx),
                             ctx.ripple_frequencies_hz)
    checks += _part_checks(circuit, ctx.limits)
    if op.output_current_max_a is not None:
        names = [f"Stage {k}" for k in range(1, n + 1)] + ["The VMID follower"]
        for i, amps in enumerate(current):
            stage = i + 1 if i < n else None
            checks.append(Check(
                "output_current", stage, float(amps), op.output_current_max_a, "A",
                _at_most(float(amps), op.output_current_max_a),
                f"{names[i]} drives {amps * 1e3:.3g} mA peak into its feedback network, the "
                f"next stage and the load {band_txt}; the op-amp gives "
                f"{op.output_current_max_a * 1e3:.3g} mA."))
    checks.append(_startup_check(circuit, system, ctx.limits, startup))
    checks.append(_input_impedance_check(circuit, system, ctx))
    amps = supply_current_a(circuit)
    checks.append(Check(
        "supply_current", None, amps, ctx.limits.max_current_a, "A",
        _at_most(amps, ctx.limits.max_current_a),
        f"Supply current {amps * 1e3:.4g} mA: op-amp quiescent currents, bias divider and DC "
        "load current" + ("" if ctx.limits.max_current_a is None else
                          f"; the limit is {ctx.limits.max_current_a * 1e3:.4g} mA") + "."))
    return checks


#: Detail of the start-up entry of a candidate whose transient was not computed.
STARTUP_SKIPPED = "Start-up time not computed for this candidate."


def _startup_check(circuit: Circuit, system: MnaSystem, limits: Limits, run: bool) -> Check:
    limit = limits.max_startup_s
    if not run and limit is None:
        return Check("startup_time", None, None, None, "s", None, STARTUP_SKIPPED)
    band_v = STARTUP_BAND_FRACTION * circuit.supply.span_v
    t = settling_time_s(system, circuit.supply.v_pos if circuit.bias is not None else 0.0,
                        band_v)
    value = None if not math.isfinite(t) else t
    passed = None if limit is None else (value is not None and value <= limit)
    what = ("every node settles within 1 % of the supply span of its DC value"
            if value is not None else "the circuit has not settled")
    when = f"{t:.4g} s" if value is not None else "after 10^4 s"
    return Check("startup_time", None, value, limit, "s", passed,
                 f"After the supply steps on, {what} at {when} (linear op-amps, capacitors "
                 "discharged)" + ("" if limit is None else f"; the limit is {limit:g} s") + ".")


def startup_check(circuit: Circuit, limits: Limits) -> Check:
    """The ``startup_time`` entry, transient computed (as ``run_checks`` gives it)."""
    return _startup_check(circuit, build(circuit), limits, True)


def input_impedance_ohm(circuit: Circuit, system: MnaSystem, f_hz: float) -> float:
    """``|V(X1) / I(source)|`` at ``f_hz``: the impedance the source sees (nodal solution,
    the source current being the branch current of the ideal source Vs)."""
    x = system.solve(np.array([f_hz]), system.signal_rhs())
    node = "X1" if circuit.source_impedance_ohm > 0 else "VS"
    current = x[0, system.rows["VS"]]
    if current == 0:
        return math.inf
    return float(abs(system.voltage(x, node)[0] / current))


def _input_impedance_check(circuit: Circuit, system: MnaSystem, ctx: CheckContext) -> Check:
    z = input_impedance_ohm(circuit, system, ctx.peak_hz)
    limit = ctx.limits.min_input_impedance_ohm
    return Check("input_impedance", None, z, limit, "ohm", _at_least(z, limit),
                 f"The source sees {z:.4g} ohm at {ctx.peak_hz:.4g} Hz (the response peak)"
                 + ("" if limit is None else f"; at least {limit:.4g} ohm asked") + ".")


__all__ = ["Check", "CheckContext", "run_checks",
           "CHECK_ORDER", "passive_parts", "noise_gain_at_crossover", "signal_band_hz"]


def ripple_excess_db(circuit: Circuit, ctx: CheckContext,
                     system: MnaSystem | None = None) -> float:
    """How far (dB) the worst ``supply_ripple`` entry sits above its limit (negative: the
    margin by which all pass; ``-inf`` when the circuit has no ripple path). ``system``:
    the circuit's MNA system when the caller has built it already."""
    entries = _ripple_checks(system or build(circuit), circuit, ctx.limits,
                             ripple_band_hz(ctx), ctx.ripple_frequencies_hz)
    return max((c.value - c.limit for c in entries), default=-math.inf)
