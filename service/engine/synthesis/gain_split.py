"""How the cascade's gain is split over its stages (request field ``gain_split``).

* ``"equal"`` (default): n identical stages of ``G**(1/n)``, the textbook cascade that
  maximises bandwidth for a given op-amp.
* ``"low_noise"``: more of the gain in stage 1, so the noise of every later stage (its
  resistors and op-amp) is divided by a larger gain when referred to the input (Friis'
  formula for cascaded stages, common practice). Stage 1 takes the largest gain that
  still leaves (all with the stage-1 output at the stated input peak):

  - swing: its output peak at most ``SWING_USE`` of the room between the mid-rail and the
    nearer swing limit (6 dB of headroom kept);
  - slew: ``2 pi f_high x peak`` at most ``SLEW_USE`` of the slew rate;
  - bandwidth: the cascade of single-pole stages (each at ``GBW / noise gain``) keeping its
    -3 dB corner at least ``BANDWIDTH_MARGIN`` times the target's upper corner
    (``f_high_max_hz`` when given: band-limited stages need their op-amp poles above it);
  - stability: every later stage keeps a noise gain of at least ``min_stable_gain``.

  The remaining stages share the rest equally. When these leave no room above the equal
  split, the split stays equal.

The ideal block of the response keeps describing the equal split; the as-built block is
the truth.
"""

from __future__ import annotations

import math

from service.engine.model.circuit import DUAL, NON_INVERTING, DesignRequest

EQUAL = "equal"
LOW_NOISE = "low_noise"
SPLITS = (EQUAL, LOW_NOISE)
SWING_USE = 0.5
SLEW_USE = 0.5
BANDWIDTH_MARGIN = 1.15
#: Bisection steps on ln(stage-1 gain) (2**-40 of the range: far below an E96 step).
STEPS = 40


def _noise_gain(g: float, topology: str) -> float:
    return g if topology == NON_INVERTING else 1.0 + g


def cascade_f_high_hz(gains, gbw_hz: float, topology: str) -> float:
    """-3 dB corner of single-pole stages at ``GBW / noise gain``: the f with
    ``prod (1 + (f/f_k)^2) = 2`` (handbook cascade formula), by bisection in ln f."""
    poles = [gbw_hz / _noise_gain(g, topology) for g in gains]
    lo, hi = math.log(min(poles) * 1e-3), math.log(min(poles) * 2.0)
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        f = math.exp(mid)
        if sum(math.log1p((f / p) ** 2) for p in poles) > math.log(2.0):
            hi = mid
        else:
            lo = mid
    return math.exp(0.5 * (lo + hi))


def first_stage_gain(req: DesignRequest, n: int) -> float | None:
    """Stage 1's gain for ``low_noise`` (module docstring); None for an equal split."""
    if getattr(req, "gain_split", EQUAL) != LOW_NOISE or n < 2:
        return None
    t = req.target
    op = req.opamp
    gain = t.gain
    equal = gain ** (1.0 / n)
    peak_in = req.signal.input_peak_v
    v_lo = req.supply.v_neg + op.swing_to_neg_v
    v_hi = req.supply.v_pos - op.swing_to_pos_v
    ref = 0.0 if req.supply.kind == DUAL else 0.5 * (v_lo + v_hi)
    room = min(v_hi - ref, ref - v_lo)
    caps = [SWING_USE * room / peak_in]
    f_edge = t.f_high_max_hz or t.f_high_hz
    caps.append(SLEW_USE * op.slew_v_per_us * 1e6 / (2.0 * math.pi * f_edge * peak_in))
    # later stages keep their noise gain at or above min_stable_gain
    rest_min = op.min_stable_gain if req.topology == NON_INVERTING else \
        max(op.min_stable_gain - 1.0, 1e-9)
    caps.append(gain / max(rest_min, 1.0) ** (n - 1))
    cap = min(caps)
    need = BANDWIDTH_MARGIN * f_edge

    def reach(g1: float) -> float:
        rest = (gain / g1) ** (1.0 / (n - 1))
        return cascade_f_high_hz([g1] + [rest] * (n - 1), op.gbw_hz, req.topology)

    if cap <= equal or reach(equal) < need:
        return None
    lo, hi = math.log(equal), math.log(cap)
    if reach(cap) >= need:
        return cap
    for _ in range(STEPS):
        mid = 0.5 * (lo + hi)
        if reach(math.exp(mid)) >= need:
            lo = mid
        else:
            hi = mid
    g1 = math.exp(lo)
    return g1 if g1 > equal * 1.001 else None
