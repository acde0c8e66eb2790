"""As-built figures of a complete circuit: corners, headroom, bias report, warnings, status.

Everything here starts from the exact nodal solution (``chain.solve``) of the circuit as
built, bias network and output coupling included; the corners are found on it by
``corners.find_band``.

Headroom formulas (common practice):

* output swing window: ``[v_neg + swing_to_neg_v, v_pos - swing_to_pos_v]``;
* available peak at a stage output: the smaller distance from its DC level (REF, moved by
  the worst-case accumulated input offset) to either edge of the window;
* swing headroom: ``20 log10(available / output peak)``;
* required slew rate for a sine of peak ``Vp`` at ``f``: ``2 pi f Vp``; full-power bandwidth
  at the full available swing: ``SR / (2 pi V_available)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from scipy.optimize import brentq

from service.engine.judge.checks import passive_parts
from service.engine.model.circuit import NON_INVERTING, Circuit, Target
from service.engine.solver import chain, corners

#: Aluminium electrolytics are flagged above this value (the warning "large_electrolytic").
LARGE_CAPACITOR_F = 100e-6
#: Below this swing headroom a stage gets the "low_headroom" warning.
LOW_HEADROOM_DB = 3.0


@dataclass(frozen=True)
class AsBuilt:
    gain: float
    gain_db: float
    f_low_hz: float  # nan when there is no low corner (DC coupled)
    f_high_hz: float
    peak_hz: float
    inverting: bool
    outside_max_db: float
    stages: list  # [{gain, f_low_hz, f_high_hz}]
    stage_peak_v_per_v: list  # |V(O_k) - V(REF)| / Vs at the overall peak frequency
    stage_pos_in_v_per_v: list  # |V(P_k) - V(REF)| / Vs (non-inverting) at the peak

    @property
    def bandwidth_hz(self) -> float:
        low = 0.0 if math.isnan(self.f_low_hz) else self.f_low_hz
        return self.f_high_hz - low

    def to_dict(self) -> dict:
        return {
            "gain": self.gain,
            "gain_db": self.gain_db,
            "f_low_hz": _none_if_nan(self.f_low_hz),
            "f_high_hz": _none_if_nan(self.f_high_hz),
            "bandwidth_hz": self.bandwidth_hz,
            "peak_hz": self.peak_hz,
            "inverting": self.inverting,
            "stages": [dict(s) for s in self.stages],
        }


def _none_if_nan(x: float):
    return None if x is None or not math.isfinite(x) else float(x)


def as_built(circuit: Circuit, *, per_stage: bool = True) -> AsBuilt:
    """Cached :func:`compute_as_built` (circuits are frozen, so equal circuits give equal
    figures; the synthesis loop asks for the same circuit more than once)."""
    return _as_built_cached(circuit, per_stage)


@lru_cache(maxsize=256)
def _as_built_cached(circuit: Circuit, per_stage: bool) -> AsBuilt:
    return compute_as_built(circuit, per_stage=per_stage)


def compute_as_built(circuit: Circuit, *, per_stage: bool = True) -> AsBuilt:
    """Midband gain, corners and per-stage figures of the circuit (see module docstring).

    Per-stage figures are measured in place at the cascade's peak frequency: the gain is
    ``|V(O_k)/V(X_k)|`` there and the corners are the frequencies nearest it where that
    ratio is 3 dB below its value at the peak (:func:`stage_band`). ``per_stage=False``
    skips them (their entries are then empty), for the synthesis loop that only needs the
    overall figures.
    """
    band = corners.find_band_one(chain.magnitude(circuit))
    peak_hz = float(band.peak_hz[0])
    sol = chain.solve(circuit, np.array([peak_hz]))
    inverted = bool(np.real(sol.vout[0]) < 0)
    stages = [stage_band(circuit, k, peak_hz) for k in range(circuit.n_stages)] \
        if per_stage else []
    stage_peak = [float(np.abs(sol.stage_out[k][0])) for k in range(circuit.n_stages)]
    if circuit.topology == NON_INVERTING:
        pos = []
        for k in range(circuit.n_stages):
            st = circuit.stages[k]
            x = sol.stage_in[k][0]
            if st.c_couple_f is None or st.r_bias_ohm is None:
                p = x
            else:
                zc = 1.0 / (2j * math.pi * peak_hz * st.c_couple_f)
                p = (x * st.r_bias_ohm + sol.vref[0] * zc) / (zc + st.r_bias_ohm)
            pos.append(float(np.abs(p - sol.vref[0])))
    else:
        pos = [0.0] * circuit.n_stages
    gain = float(band.gain[0])
    return AsBuilt(
        gain=gain, gain_db=20.0 * math.log10(gain),
        f_low_hz=float(band.f_low_hz[0]), f_high_hz=float(band.f_high_hz[0]),
        peak_hz=peak_hz, inverting=inverted, outside_max_db=float(band.outside_max_db[0]),
        stages=stages, stage_peak_v_per_v=stage_peak, stage_pos_in_v_per_v=pos,
    )


#: Floor of a magnitude before taking its logarithm (a response that underflows to 0).
TINY = 1e-300


def stage_band(circuit: Circuit, k: int, peak_hz: float) -> dict:
    """Stage k's in-place figures at the cascade's peak frequency.

    ``gain = |V(O_k)/V(X_k)|`` at ``peak_hz``; ``f_low_hz``/``f_high_hz`` = the frequencies
    nearest ``peak_hz`` below and above it where the ratio is 3 dB below its value at
    ``peak_hz`` (None when it stays above within 1 mHz..10 GHz). The crossings are
    bracketed on the corner grid and refined by Brent's method on the log ratio.
    """
    params = chain.params_from_circuit(circuit)

    def ratio(f):
        sol = chain.solve_params(params, np.atleast_1d(f))
        with np.errstate(divide="ignore", invalid="ignore"):  # an input that underflows
            r = np.abs(sol.stage_out_abs[k] / sol.stage_in[k])
        return np.where(np.isfinite(r), r, 0.0)

    def ratio_at(f: float) -> float:
        """``ratio`` at one frequency, solved on Python complex numbers."""
        sol = chain.solve_params(params, float(f))
        x = sol.stage_in[k]
        r = abs(sol.stage_out_abs[k] / x) if x != 0 else 0.0
        return r if math.isfinite(r) else 0.0

    level = ratio_at(peak_hz) * corners.HALF_POWER
    grid = corners.GRID_HZ
    if not (math.isfinite(level) and level > 0.0):
        return {"gain": level / corners.HALF_POWER, "f_low_hz": None, "f_high_hz": None}

    def crossing(side):
        f = grid[grid < peak_hz][::-1] if side < 0 else grid[grid > peak_hz]
        if f.size == 0:
            return None
        r = ratio(f)
        below = np.nonzero(r < level)[0]
        if below.size == 0:
            return None
        j = below[0]
        near = peak_hz if j == 0 else f[j - 1]

        def g(lf):
            return math.log(max(ratio_at(math.exp(lf)), TINY) / level)

        a, b = math.log(near), math.log(f[j])
        if g(a) * g(b) > 0.0:  # no sign change to refine (a degenerate response): the grid
            return float(f[j])
        return float(np.exp(brentq(g, a, b, xtol=1e-12)))

    return {"gain": level / corners.HALF_POWER, "f_low_hz": crossing(-1),
            "f_high_hz": crossing(+1)}


def flat_outside_band(ab: AsBuilt, target: Target | None = None,
                      circuit: Circuit | None = None) -> bool:
    """The design rule of the circuit model.

    |H| stays at least 3 dB below midband outside the as-built band and, given a target
    (and the circuit to evaluate), its maximum lies inside the target band. Both carry
    ``corners.FLATNESS_SLACK_DB`` of numerical slack: a flat pass band wider than the
    target has its numerical maximum anywhere in it, so "inside" means the largest gain
    within the target band is within that slack of the overall maximum.
    """
    flat = ab.outside_max_db <= -3.0 + corners.FLATNESS_SLACK_DB
    if target is None or circuit is None or not flat:
        return flat
    return peak_deficit_db(circuit, ab, target) <= corners.FLATNESS_SLACK_DB


#: Points of the log grid on which the largest in-band gain is sought.
IN_BAND_POINTS = 64


def peak_deficit_db(circuit: Circuit, ab: AsBuilt, target: Target) -> float:
    """How far (dB) the largest gain inside the target band falls below the overall
    maximum; 0 when the maximum itself lies inside the band."""
    low = max(target.f_low_hz, corners.F_MIN_HZ)
    if low <= ab.peak_hz <= target.f_high_hz:
        return 0.0
    f = np.geomspace(low, target.f_high_hz, IN_BAND_POINTS)
    f = np.append(f, np.clip(ab.peak_hz, low, target.f_high_hz))
    inside = np.abs(chain.solve(circuit, f).vout).max()
    return float(20.0 * np.log10(ab.gain / inside))


def vmid_v(circuit: Circuit) -> float:
    """DC voltage of REF: the divider's ``v_pos * Rb / (Rt + Rb)`` on a single supply, else 0."""
    if circuit.bias is None:
        return 0.0
    b = circuit.bias
    return circuit.supply.v_pos * b.r_bottom_ohm / (b.r_top_ohm + b.r_bottom_ohm)


def swing_window_v(circuit: Circuit) -> tuple[float, float]:
    op = circuit.opamp
    return (circuit.supply.v_neg + op.swing_to_neg_v, circuit.supply.v_pos - op.swing_to_pos_v)


def cm_window_v(circuit: Circuit) -> tuple[float, float]:
    op = circuit.opamp
    return (circuit.supply.v_neg + op.cm_to_neg_v, circuit.supply.v_pos - op.cm_to_pos_v)


@dataclass
class Headroom:
    stages: list
    overall: dict
    warnings: list = field(default_factory=list)


def headroom(circuit: Circuit, checks: list, input_peak_v: float) -> Headroom:
    """Per-stage swing, slew and common-mode figures, read off the build checks
    (:mod:`service.engine.judge.checks`) so the two never disagree.

    * available peak = the room to the nearer swing limit less the worst-case DC error;
    * swing headroom ``20 log10(available / AC peak)``; the largest input before clipping
      scales the stated input by ``available / AC peak``;
    * full-power bandwidth at the available swing: ``SR / (2 pi V_available)`` (common
      practice).
    """
    op = circuit.opamp
    by = {}
    for c in checks:
        if c.stage is not None:
            by[(c.check, c.stage)] = c
    lo, hi = swing_window_v(circuit)
    cm_lo, cm_hi = cm_window_v(circuit)
    slew_v_per_s = op.slew_v_per_us * 1e6
    rows, warnings = [], []
    for k in range(1, circuit.n_stages + 1):
        swing, cm, slew = by[("output_swing", k)], by[("input_common_mode", k)], \
            by[("slew_rate", k)]
        dc_v, dc_error = swing.extra["dc_v"], swing.extra["dc_error_v"]
        peak = swing.value - dc_error
        available = max(0.0, swing.limit - dc_error)
        headroom_db = 20.0 * math.log10(available / peak) if available > 0 and peak > 0 \
            else (math.inf if peak <= 0 else -math.inf)
        plus_dc, cm_peak = cm.extra["dc_v"], cm.value
        row = {
            "stage": k,
            "output_dc_v": dc_v,
            "dc_error_v": dc_error,
            "offset_worst_v": dc_error,
            "swing_window_v": [lo, hi],
            "output_peak_v": peak,
            "available_peak_v": available,
            "swing_headroom_db": headroom_db,
            "max_input_peak_v": input_peak_v * available / peak if peak > 0 else math.inf,
            "required_slew_v_per_us": slew.value,
            "opamp_slew_v_per_us": op.slew_v_per_us,
            "slew_ok": bool(slew.passed),
            "full_power_bandwidth_hz": (slew_v_per_s / (2.0 * math.pi * available)
                                        if available > 0 else math.inf),
            "input_cm_v": [plus_dc - cm_peak, plus_dc + cm_peak],
            "cm_window_v": [cm_lo, cm_hi],
            "cm_ok": bool(cm.passed),
        }
        rows.append(row)
        if swing.passed and 0 <= headroom_db < LOW_HEADROOM_DB:
            warnings.append(("low_headroom",
                             f"Stage {k} has {headroom_db:.2f} dB of swing headroom "
                             f"(under {LOW_HEADROOM_DB:g} dB)."))
        if dc_error > 0.1 * max(hi - lo, 1e-12):
            warnings.append(("dc_offset",
                             f"Stage {k} output may sit up to {dc_error:.3g} V off its DC "
                             "level from input offset voltage and bias currents."))
    limiting = min(rows, key=lambda r: r["swing_headroom_db"])
    overall = {
        "min_swing_headroom_db": limiting["swing_headroom_db"],
        "limiting_stage": limiting["stage"],
        "max_input_peak_v": min(r["max_input_peak_v"] for r in rows),
        "output_peak_v": rows[-1]["output_peak_v"],
        "slew_ok": all(r["slew_ok"] for r in rows),
        "cm_ok": all(r["cm_ok"] for r in rows),
    }
    return Headroom(stages=rows, overall=overall, warnings=warnings)


def target_shortfalls(ab: AsBuilt, target: Target) -> list:
    """The target figures the as-built circuit misses: f_low above the target, f_high
    below it, the gain outside ``gain_tolerance_db``, the band outside ``f_low_min_hz`` /
    ``f_high_max_hz`` when given."""
    shortfalls = []
    f_low = 0.0 if math.isnan(ab.f_low_hz) else ab.f_low_hz
    if f_low > target.f_low_hz:
        shortfalls.append({"quantity": "f_low_hz", "stage": None, "target": target.f_low_hz,
                           "achieved": f_low})
    if not ab.f_high_hz >= target.f_high_hz:
        shortfalls.append({"quantity": "f_high_hz", "stage": None,
                           "target": target.f_high_hz, "achieved": ab.f_high_hz})
    if abs(ab.gain_db - target.gain_db) > target.gain_tolerance_db:
        shortfalls.append({"quantity": "gain_db", "stage": None, "target": target.gain_db,
                           "achieved": ab.gain_db})
    if target.f_high_max_hz is not None and not ab.f_high_hz <= target.f_high_max_hz:
        shortfalls.append({"quantity": "f_high_max_hz", "stage": None,
                           "target": target.f_high_max_hz, "achieved": ab.f_high_hz})
    if target.f_low_min_hz is not None and not f_low >= target.f_low_min_hz:
        shortfalls.append({"quantity": "f_low_min_hz", "stage": None,
                           "target": target.f_low_min_hz, "achieved": f_low})
    return shortfalls


def verdict(ab: AsBuilt, target: Target, checks: list) -> tuple[str, list]:
    """``meets_target`` iff the as-built circuit meets the target and every check with a
    limit passes; the shortfalls list the missed target figures, then the failed checks."""
    shortfalls = target_shortfalls(ab, target) + [c.shortfall() for c in checks
                                                   if c.passed is False]
    return ("meets_target" if not shortfalls else "target_not_met"), shortfalls


def circuit_warnings(circuit: Circuit) -> list:
    """Warnings that follow from the parts alone (electrolytic sizes, noise data)."""
    out = []
    op = circuit.opamp
    big = sorted((c for c in _capacitors(circuit) if c >= LARGE_CAPACITOR_F), reverse=True)
    if big:
        values = ", ".join(f"{c * 1e6:.4g} uF" for c in big)
        out.append(("large_electrolytic",
                    f"{len(big)} capacitor(s) of {LARGE_CAPACITOR_F * 1e6:.4g} uF or more "
                    f"({values}): aluminium electrolytics with polarity, voltage rating, "
                    "leakage and size to check."))
    if op.en_v_per_rthz == 0.0 and op.in_a_per_rthz == 0.0:
        out.append(("opamp_noise_unspecified",
                    "The op-amp has no noise densities: noise figures count resistors only."))
    return out


def _capacitors(circuit: Circuit) -> list:
    """Every capacitor value of the board's signal path and bias network."""
    return [value for value, _, _ in passive_parts(circuit)[0]]
