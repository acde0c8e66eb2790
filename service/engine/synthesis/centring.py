"""Yield centring: aim the corners inside the target by just enough for ``min_yield``.

A design sized exactly onto its target corners meets it in about half of its builds (each
corner's spread straddles the limit). The synthesis therefore sizes the low side for an
*aimed* low corner below ``f_low_hz`` and band-limits toward an aimed high corner inside
``f_high_hz..f_high_max_hz``; the gain already aims at the centre of its tolerance.

How far: the first synthesis (aims on the target) is judged by the yield predictor
(:mod:`service.engine.judge.yield_estimate`), whose modelled samples give each corner's
spread around its nominal value. A corner's spread scales with the corner (it is set by
RC products), so moving the nominal corner shifts every sample by the same factor; for
each candidate aim on a fine log grid the predictor's samples then tell the yield directly.
The aim kept for the low corner is the *highest* one reaching ``min_yield`` (the smallest
capacitors: coupling and ground-leg capacitors grow as 1/f_low); the high corner (only
with ``f_high_max_hz``, where it costs nothing but a feedback capacitor's value) takes the
aim of the highest yield. The circuit is synthesised again for the new aims and judged
again, up to ``PASSES`` times. Capacitors come in E-series steps, so a sized corner lands
anywhere below its aim (and not monotonically in it): once a pass meets ``min_yield``, a
few aims between it and the target's own are tried too, and the pass meeting
``min_yield`` with the smallest total capacitance is kept (else the highest predicted
yield).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from service.engine.judge import yield_estimate
from service.engine.judge.analysis import target_shortfalls
from service.engine.model.circuit import DesignRequest
from service.engine.model.parts import tolerances_of
from service.engine.synthesis import band_limit

#: Re-syntheses after the first (each lands within a few 0.1 % of its aim).
PASSES = 3
#: Candidate aims: ln(target / aim) from 0 to AIM_SPAN_LN in AIM_POINTS steps (0.25 %).
AIM_SPAN_LN = 1.0
AIM_POINTS = 401
#: Nominal shortfalls that centring can cure (any other ends it before it starts).
CENTRABLE = ("f_low_hz",)
#: A pass that raises the predicted yield by less than this ends the centring.
MIN_PROGRESS = 1e-3
#: Aims tried between the first that met min_yield and the target's own (smallest parts).
REFINE_AIMS = 4
#: ... starting this far below the first aim that met (the sizing is not monotone in its aim).
REFINE_BELOW = 0.95
#: Aim for this much more than min_yield, so rounding of the re-sized parts rarely drops
#: the prediction just under it (well above the predictor's own sampling error).
YIELD_MARGIN = 0.01


@dataclass(frozen=True)
class Aim:
    """The corners a synthesis pass sizes for (``f_high_hz`` None: no band limit aim)."""

    f_low_hz: float
    f_high_hz: float | None


def first_aim(req: DesignRequest) -> Aim:
    return Aim(req.target.f_low_hz, band_limit.default_aim_hz(req))


def aimed_request(req: DesignRequest, aim: Aim) -> DesignRequest:
    """The request the sizing steps see: the target's f_low replaced by the aim."""
    if aim.f_low_hz == req.target.f_low_hz:
        return req
    return replace(req, target=replace(req.target, f_low_hz=aim.f_low_hz))


def centre(req: DesignRequest, build):
    """The synthesis (``build(aim) -> Synthesis``) centred for ``req.target.min_yield``;
    the returned synthesis carries its ``yield_estimate``."""
    target = req.target
    tol = tolerances_of(req.components)
    aim = first_aim(req)
    syn = build(aim)
    est = yield_estimate.predict(syn.circuit, target, tol, peaking=False)
    passes = [(aim, syn, est)]
    misses = target_shortfalls(syn.as_built, target)
    if any(m["quantity"] not in CENTRABLE for m in misses):
        # e.g. the op-amp's bandwidth misses the target: no aim of the corners fixes that
        return replace(syn, yield_estimate=yield_estimate.with_peaking(est, syn.circuit, tol))
    for _ in range(PASSES):
        if est.meets:
            break
        new = next_aim(req, aim, syn, est)
        if new is None or new in [p[0] for p in passes]:
            break
        aim = new
        syn = build(aim)
        best_so_far = max(p[2].predicted for p in passes)
        est = yield_estimate.predict(syn.circuit, target, tol, peaking=False)
        passes.append((aim, syn, est))
        if est.predicted <= best_so_far + MIN_PROGRESS:
            break
    meeting = [p for p in passes if p[2].meets]
    if meeting and len(passes) > 1:
        # E-series steps make the sized corner land anywhere below its aim: try a few aims
        # between the first one that met and the target's own, keep the smallest parts.
        met = max(meeting, key=lambda p: p[0].f_low_hz)[0]
        for f in np.geomspace(met.f_low_hz * REFINE_BELOW, target.f_low_hz,
                              REFINE_AIMS + 2)[1:-1]:
            trial = replace(met, f_low_hz=float(f))
            syn = build(trial)
            est = yield_estimate.predict(syn.circuit, target, tol, peaking=False)
            passes.append((trial, syn, est))
        meeting = [p for p in passes if p[2].meets]
    if meeting:
        aim, syn, est = min(meeting, key=lambda p: (capacitance_f(p[1].circuit), -p[0].f_low_hz))
    else:
        aim, syn, est = max(passes, key=lambda p: p[2].predicted)
    # the passes are compared on the quick estimate; the one kept gets the full one (with
    # the exact check of bias-loop peaking, which only lowers it)
    return replace(syn, yield_estimate=yield_estimate.with_peaking(est, syn.circuit, tol))


def capacitance_f(circuit) -> float:
    """Total capacitance of the circuit's capacitors: the part-size cost of a centring."""
    total = 0.0
    for st in circuit.stages:
        total += sum(c for c in (st.c_couple_f, st.c_gain_f, st.c_feedback_f) if c is not None)
    if circuit.c_out_f is not None:
        total += circuit.c_out_f
    if circuit.bias is not None:
        total += circuit.bias.c_bypass_f
    return total


def _fraction_between(ratios: np.ndarray, keep: np.ndarray, lo: np.ndarray | None,
                      hi: np.ndarray | None) -> np.ndarray:
    """For each candidate: the fraction of all samples with ``keep`` and ``lo <= ratio <= hi``
    (``ratios``: each sample's figure over its nominal; ``lo``/``hi`` per candidate, None:
    open), by binary search in the sorted kept ratios."""
    r = np.sort(ratios[keep & np.isfinite(ratios)])
    n = ratios.size
    upper = np.searchsorted(r, hi, side="right") if hi is not None else r.size
    lower = np.searchsorted(r, lo, side="left") if lo is not None else 0
    return (upper - lower) / n


def next_aim(req: DesignRequest, aim: Aim, syn, est) -> Aim | None:
    """Aims whose predicted yield reaches ``min_yield + YIELD_MARGIN`` (module docstring)."""
    t = req.target
    ab = syn.as_built
    want = min(t.min_yield + YIELD_MARGIN, 1.0)
    f_lo = est.samples[:, 1]
    f_hi = est.samples[:, 2]
    gain_ok = est.passed["gain"]
    low_ok = est.passed["low"]
    new_high = aim.f_high_hz
    high_ok = est.passed["high"]
    if aim.f_high_hz is not None and math.isfinite(ab.f_high_hz) and \
            any(st.c_feedback_f is not None for st in syn.circuit.stages):
        # the band limit lands at ab.f_high_hz for the aim; ratio kept for the new aim
        lo_ln, hi_ln = math.log(t.f_high_hz), math.log(t.f_high_max_hz)
        aims = np.exp(np.linspace(lo_ln, hi_ln, AIM_POINTS))
        nominal_new = aims * (ab.f_high_hz / aim.f_high_hz)
        ratios = f_hi / est.nominal["f_high_hz"]
        frac = _fraction_between(ratios, gain_ok & low_ok, t.f_high_hz / nominal_new,
                                 t.f_high_max_hz / nominal_new)
        centre_ln = 0.5 * (lo_ln + hi_ln)
        best = np.lexsort((np.abs(np.log(aims) - centre_ln), -np.round(frac, 9)))[0]
        new_high = float(aims[best])
        moved = ratios * nominal_new[best]
        high_ok = (moved >= t.f_high_hz) & (moved <= t.f_high_max_hz)
    new_low = aim.f_low_hz
    if t.f_low_hz > 0 and math.isfinite(ab.f_low_hz):
        ln_t = math.log(t.f_low_hz)
        aims = np.exp(ln_t - np.linspace(0.0, AIM_SPAN_LN, AIM_POINTS))
        if t.f_low_min_hz is not None:
            aims = aims[aims > t.f_low_min_hz]
        # the low side is sized for the largest capacitors' scale whose corner is at or
        # below the aim: aiming at the highest nominal corner that reaches the yield
        # guarantees it (parts only land lower, in E-series steps)
        nominal_new = aims
        ratios = f_lo / est.nominal["f_low_hz"]
        frac = _fraction_between(
            ratios, gain_ok & high_ok,
            None if t.f_low_min_hz is None else t.f_low_min_hz / nominal_new,
            t.f_low_hz / nominal_new)
        reach = np.nonzero(frac >= want)[0]
        # highest aim reaching the yield (aims fall with the index), else the best yield
        i = int(reach[0]) if reach.size else int(np.argmax(np.round(frac, 9)))
        new_low = float(aims[i])
    new = Aim(new_low, new_high)
    return None if new == aim else new
