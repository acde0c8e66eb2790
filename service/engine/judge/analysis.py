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

from service.engine.solver import chain
from service.engine.solver import corners
from service.engine.model.circuit import INVERTING, NON_INVERTING, Circuit, Target

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

    ``per_stage=False`` skips the per-stage corners (their entries are then empty), for
    the synthesis loop that only needs the overall figures.
    """
    n = circuit.n_stages if per_stage else 0

    def evaluate(f):
        sol = chain.solve(circuit, f)
        rows = [np.abs(sol.vout[0])]
        for k in range(n):
            rows.append(np.abs(sol.stage_out_abs[k][k + 1] / sol.stage_in[k][k + 1]))
        return np.stack(rows)

    band = corners.find_band(evaluate, n + 1)
    peak_hz = float(band.peak_hz[0])
    sol = chain.solve(circuit, np.array([peak_hz]))
    inverted = bool(np.real(sol.vout[0]) < 0)
    stages = [
        {"gain": float(band.gain[k + 1]),
         "f_low_hz": _none_if_nan(float(band.f_low_hz[k + 1])),
         "f_high_hz": _none_if_nan(float(band.f_high_hz[k + 1]))}
        for k in range(n)
    ]
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


def _dc_noise_gain(circuit: Circuit, k: int) -> float:
    """DC gain from an input offset of stage k to its output (common practice).

    AC-coupled stages: 1 (the ground-leg or input capacitor blocks DC). DC-coupled:
    ``1 + Rf/Rg`` (non-inverting) or ``1 + Rf/Rin`` (inverting).
    """
    st = circuit.stages[k]
    if circuit.topology == NON_INVERTING:
        return 1.0 if st.c_gain_f is not None else 1.0 + st.r_feedback_ohm / st.r_gain_ohm
    return 1.0 if st.c_couple_f is not None else 1.0 + st.r_feedback_ohm / st.r_in_ohm


def _dc_signal_gain(circuit: Circuit, k: int) -> float:
    """DC gain of stage k for a DC error arriving at its input (0 when AC coupled)."""
    st = circuit.stages[k]
    if st.c_couple_f is not None:
        return 0.0
    if circuit.topology == NON_INVERTING:
        return _dc_noise_gain(circuit, k)
    return st.r_feedback_ohm / st.r_in_ohm


@dataclass
class Headroom:
    stages: list
    overall: dict
    warnings: list = field(default_factory=list)


def headroom(circuit: Circuit, ab: AsBuilt, input_peak_v: float,
             f_high_target_hz: float | None) -> Headroom:
    """Per-stage and overall swing, slew and common-mode checks (module docstring)."""
    op = circuit.opamp
    ref = vmid_v(circuit)
    lo, hi = swing_window_v(circuit)
    cm_lo, cm_hi = cm_window_v(circuit)
    f_slew = f_high_target_hz if f_high_target_hz else ab.f_high_hz
    slew_v_per_s = op.slew_v_per_us * 1e6
    offset = 0.0
    rows = []
    warnings = []
    for k in range(circuit.n_stages):
        offset = offset * _dc_signal_gain(circuit, k) + abs(op.vos_v) * _dc_noise_gain(circuit, k)
        available = max(0.0, min(hi - ref, ref - lo) - offset)
        peak = input_peak_v * ab.stage_peak_v_per_v[k]
        headroom_db = 20.0 * math.log10(available / peak) if available > 0 else -math.inf
        required_slew = 2.0 * math.pi * f_slew * peak / 1e6
        fpbw = slew_v_per_s / (2.0 * math.pi * available) if available > 0 else math.inf
        max_in = input_peak_v * available / peak if peak > 0 else math.inf
        if circuit.topology == NON_INVERTING:
            cm_swing = input_peak_v * ab.stage_pos_in_v_per_v[k]
        else:
            cm_swing = 0.0
        cm_min, cm_max = ref - cm_swing, ref + cm_swing
        cm_ok = cm_lo <= cm_min and cm_max <= cm_hi
        row = {
            "stage": k + 1,
            "output_dc_v": ref,
            "offset_worst_v": offset,
            "swing_window_v": [lo, hi],
            "output_peak_v": peak,
            "available_peak_v": available,
            "swing_headroom_db": headroom_db,
            "max_input_peak_v": max_in,
            "required_slew_v_per_us": required_slew,
            "opamp_slew_v_per_us": op.slew_v_per_us,
            "slew_ok": required_slew <= op.slew_v_per_us,
            "full_power_bandwidth_hz": fpbw,
            "input_cm_v": [cm_min, cm_max],
            "cm_window_v": [cm_lo, cm_hi],
            "cm_ok": cm_ok,
        }
        rows.append(row)
        if not row["slew_ok"]:
            warnings.append(("slew_limited",
                             f"Stage {k + 1} needs {required_slew:.3g} V/us at "
                             f"{f_slew:.4g} Hz for a {peak:.3g} V peak; the op-amp gives "
                             f"{op.slew_v_per_us:.3g} V/us."))
        if headroom_db < 0:
            warnings.append(("clipping",
                             f"Stage {k + 1} would need a {peak:.3g} V peak but only "
                             f"{available:.3g} V is available: it clips above "
                             f"{max_in:.3g} V peak at the input."))
        elif headroom_db < LOW_HEADROOM_DB:
            warnings.append(("low_headroom",
                             f"Stage {k + 1} has {headroom_db:.2f} dB of swing headroom "
                             f"(under {LOW_HEADROOM_DB:g} dB)."))
        if not cm_ok:
            warnings.append(("common_mode_violation",
                             f"Stage {k + 1} input common mode spans {cm_min:.3g}..{cm_max:.3g} V"
                             f" but the op-amp accepts {cm_lo:.3g}..{cm_hi:.3g} V."))
        if offset > 0.1 * max(hi - lo, 1e-12):
            warnings.append(("dc_offset",
                             f"Stage {k + 1} output may sit up to {offset:.3g} V off its DC "
                             f"level from accumulated input offset."))
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


def status_of(ab: AsBuilt, target: Target, circuit: Circuit | None = None) -> tuple[str, list]:
    """``meets_target`` when f_low <= target, f_high >= target and the gain is in
    tolerance, the band stays inside ``f_low_min_hz`` / ``f_high_max_hz`` when given, and
    (given the circuit) every op-amp unit runs at a noise gain it is stable
    at: a circuit that may oscillate does not meet any target (shortfall ``noise_gain``)."""
    shortfalls = []
    f_low = 0.0 if math.isnan(ab.f_low_hz) else ab.f_low_hz
    if f_low > target.f_low_hz:
        shortfalls.append({"quantity": "f_low_hz", "target": target.f_low_hz, "achieved": f_low})
    if not ab.f_high_hz >= target.f_high_hz:
        shortfalls.append({"quantity": "f_high_hz", "target": target.f_high_hz,
                           "achieved": ab.f_high_hz})
    if abs(ab.gain_db - target.gain_db) > target.gain_tolerance_db:
        shortfalls.append({"quantity": "gain_db", "target": target.gain_db,
                           "achieved": ab.gain_db})
    if target.f_high_max_hz is not None and not ab.f_high_hz <= target.f_high_max_hz:
        shortfalls.append({"quantity": "f_high_max_hz", "target": target.f_high_max_hz,
                           "achieved": ab.f_high_hz})
    if target.f_low_min_hz is not None and not f_low >= target.f_low_min_hz:
        shortfalls.append({"quantity": "f_low_min_hz", "target": target.f_low_min_hz,
                           "achieved": f_low})
    if circuit is not None:
        lowest = min(unit_noise_gains(circuit))
        if lowest < circuit.opamp.min_stable_gain:
            shortfalls.append({"quantity": "noise_gain", "target": circuit.opamp.min_stable_gain,
                               "achieved": lowest})
    return ("meets_target" if not shortfalls else "target_not_met"), shortfalls


def unit_noise_gains(circuit: Circuit) -> list[float]:
    """Midband noise gain ``1/beta`` of every op-amp unit: ``1 + Rf/Rg`` (non-inverting),
    ``1 + Rf/(Rin + Rs)`` (inverting; the source impedance counts in front of stage 1
    only), 1 for the VMID follower."""
    gains = []
    for k, st in enumerate(circuit.stages):
        if circuit.topology == INVERTING:
            front = circuit.source_impedance_ohm if k == 0 else 0.0
            gains.append(1.0 + st.r_feedback_ohm / (st.r_in_ohm + front))
        else:
            gains.append(1.0 + st.r_feedback_ohm / st.r_gain_ohm)
    if circuit.bias is not None and circuit.bias.buffered:
        gains.append(1.0)
    return gains


def circuit_warnings(circuit: Circuit) -> list:
    """Warnings that follow from the parts alone (stability, electrolytic sizes)."""
    out = []
    op = circuit.opamp
    for k, ng in enumerate(unit_noise_gains(circuit)[:circuit.n_stages]):
        if ng < op.min_stable_gain:
            out.append(("below_min_stable_gain",
                        f"Stage {k + 1} runs at a noise gain of {ng:.3g}, below the op-amp's "
                        f"minimum stable gain of {op.min_stable_gain:g}: it may oscillate."))
    if circuit.bias is not None and circuit.bias.buffered and op.min_stable_gain > 1.0:
        out.append(("below_min_stable_gain",
                    "The VMID follower runs at unity gain, below the op-amp's minimum stable "
                    f"gain of {op.min_stable_gain:g}: it may oscillate."))
    big = [c for c in _capacitors(circuit) if c >= LARGE_CAPACITOR_F]
    if big:
        out.append(("large_electrolytic",
                    f"{len(big)} capacitor(s) of {max(big) * 1e6:.3g} uF or more: aluminium "
                    "electrolytics with polarity, voltage rating, leakage and size to check."))
    if op.en_v_per_rthz == 0.0 and op.in_a_per_rthz == 0.0:
        out.append(("opamp_noise_unspecified",
                    "The op-amp has no noise densities: noise figures count resistors only."))
    return out


def _capacitors(circuit: Circuit) -> list:
    caps = []
    for st in circuit.stages:
        caps += [c for c in (st.c_couple_f, st.c_gain_f) if c is not None]
    if circuit.c_out_f is not None:
        caps.append(circuit.c_out_f)
    if circuit.bias is not None:
        caps.append(circuit.bias.c_bypass_f)
    return caps
