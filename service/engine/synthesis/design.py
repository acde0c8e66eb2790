"""Synthesis: from a target to a complete circuit of E-series parts.

Steps for a stage count n (``synthesize``):

1. **Gains.** Each stage aims at ``g = G**(1/n)``. Feedback pairs come from the resistor
   series, with the impedance-level resistor (``r_feedback_ohm`` non-inverting, ``r_in_ohm``
   inverting) within a decade centred on ``impedance_ohm`` and the stage's noise gain at or
   above the op-amp's ``min_stable_gain``. Stages 1..n-2 take the pair nearest ``g``; the
   last two search their pairs jointly for the product the cascade still needs (E96 ratios
   are quantised in ~2.4 % steps, products of two far more finely). The losses (source
   divider, finite A0) are predicted by one solve at the band centre before any capacitor
   exists, then measured on the finished circuit; the pairs are re-chosen while that
   promises a better product, and the best pass is kept.
2. **Low corner.** The m high-pass poles (coupling ``(Rs+Rb) Cc`` or ``(Rs+Rin) Cc``,
   ground leg ``Rg Cg``, output ``RL Cout``) start equal at ``f_low sqrt(2**(1/m) - 1)``
   (the shrinkage rule of ``ideal``). A common scale factor sigma moves them all; for each
   sigma on a grid, capacitors are rounded *up* to the capacitor series and the bias
   resistor is re-tuned from the resistor series to restore its pole. All sigmas are
   estimated in one solve; the largest sigma (smallest capacitors) is then sought whose
   as-built f_low meets the target *and* whose response peaks inside the target band
   (a pass band far wider than the target on the high side pulls the maximum up, and
   larger capacitors pull it back), checked on the full model.
3. **Bias** (single supply): a divider from the resistor series sets VMID at the centre of
   the output swing window; VMID is buffered by a spare op-amp unit when a package has one
   (and the part is unity-gain stable), else the divider is bypassed, the bypass grown until
   the response is free of low-frequency peaking, and buffered as a last resort.
4. **Band limit** (with ``f_high_max_hz``): feedback capacitors set the upper corner
   (:mod:`service.engine.synthesis.band_limit`).

Around these steps: an ``"auto"`` impedance level is chosen first
(:mod:`service.engine.synthesis.impedance`), the gain may be split unequally
(:mod:`service.engine.synthesis.gain_split`), and the passes are repeated for aimed corners
until the predicted yield reaches ``min_yield`` (:mod:`service.engine.synthesis.centring`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np

from service.engine.errors import EngineError
from service.engine.judge import checks, yield_estimate
from service.engine.judge.analysis import (
    AsBuilt,
    as_built,
    flat_outside_band,
    peak_deficit_db,
)
from service.engine.judge.supply_rejection import ripple_frequencies
from service.engine.judge.verdict import Judgement, judge, with_startup_time
from service.engine.model import eseries
from service.engine.model.circuit import (
    DUAL,
    INVERTING,
    NON_INVERTING,
    Bias,
    Circuit,
    DesignRequest,
    Stage,
)
from service.engine.model.parts import tolerances_of
from service.engine.solver import chain, corners, magnitude
from service.engine.solver.mna import build as build_mna
from service.engine.synthesis import band_limit, centring, gain_split, ideal, impedance

TWO_PI = 2.0 * math.pi
#: Scale factors tried for the low-side poles (sigma), log-spaced; 6 % apart, finer than
#: one E12 step, so the rounding of capacitors rather than the grid sets the result.
SIGMA_GRID = np.geomspace(0.02, 4.0, 92)
#: Margin kept below the target f_low by the sigma search (the full check follows).
F_LOW_MARGIN = 1e-3
#: The bias node's own pole sits this far below the lowest signal pole to begin with.
BYPASS_POLE_RATIO = 20.0
#: Growth of the bypass capacitor per attempt, and the attempts before buffering.
BYPASS_GROWTH = 3.3
BYPASS_ATTEMPTS = 5
#: Stage 1's bias resistor is at least this multiple of the source impedance.
SOURCE_LOAD_RATIO = 10.0
#: A further gain pass must promise at least this improvement (natural log, ~0.001 dB).
GAIN_PASS_MIN_IMPROVEMENT = 1.2e-4
#: Gain passes at most (each sizes the low side and measures the product again).
GAIN_PASSES = 3


@dataclass(frozen=True)
class Synthesis:
    circuit: Circuit
    as_built: AsBuilt
    bias_reason: str | None
    yield_estimate: object = None  # judge.yield_estimate.YieldEstimate of the final circuit
    components: object = None  # the request's Components, impedance level resolved
    impedance_reason: str | None = None  # why the level, when it was chosen ("auto")


@lru_cache(maxsize=16)
def _series_values(series: str | tuple) -> np.ndarray:
    """Every value of a series, ascending; ``series`` is a name ("E96") or a pool
    ``(name, allowed values)`` (``Components.resistor_pool``): the series' members among
    the allowed values (to 1e-9 relative)."""
    if isinstance(series, str):
        return eseries.values_between(series, 1e-13, 1e9)
    name, allowed = series
    full = eseries.values_between(name, 1e-13, 1e9)
    allowed = np.asarray(allowed, dtype=float)
    keep = np.isclose(full[:, None], allowed[None, :], rtol=1e-9, atol=0.0).any(axis=1)
    if not keep.any():
        raise EngineError(f"none of the stocked values is a member of {name}",
                          field="components.stocked_only")
    return full[keep]


def _between(series: str | tuple, low: float, high: float) -> np.ndarray:
    """Series (or pool) values in ``[low, high]``; for a pool with none there, the pool
    values nearest the range (so a sparse stock still yields a choice)."""
    if isinstance(series, str):
        return eseries.values_between(series, low, high)
    v = _series_values(series)
    inside = v[(v >= low) & (v <= high)]
    if inside.size:
        return inside
    centre = math.sqrt(low * high)
    return v[np.argsort(np.abs(np.log(v / centre)), kind="stable")[:3]]


def _round_up(series: str, x: np.ndarray) -> np.ndarray:
    v = _series_values(series)
    i = np.searchsorted(v, np.asarray(x) * (1 - 1e-12), side="left")
    return v[np.minimum(i, v.size - 1)]


def _nearest(series: str, x: np.ndarray) -> np.ndarray:
    v = _series_values(series)
    x = np.asarray(x)
    i = np.clip(np.searchsorted(v, x), 1, v.size - 1)
    lo, hi = v[i - 1], v[i]
    return np.where(np.log(x / lo) <= np.log(hi / x), lo, hi)


def gain_candidates(series: str, gain: float, topology: str, impedance_ohm: float,
                    r_extra_ohm: float = 0.0, spread: float = 0.06,
                    min_noise_gain: float = 1.0):
    """E-series feedback pairs whose stage gain lies within ``spread`` of ``gain``.

    Non-inverting: ``g = 1 + Rf/Rg``; inverting: ``g = Rf / (Rin + r_extra)`` where
    ``r_extra`` is the source impedance in front of stage 1. The impedance-level resistor
    (Rf, or Rin) ranges over one decade centred on ``impedance_ohm``. Returns arrays
    ``(gain, r_feedback_ohm, r_other_ohm)`` sorted by the distance of the gain from
    ``gain``, then by the level resistor's distance from ``impedance_ohm``. Pairs whose
    noise gain (``g`` non-inverting, ``1 + Rf/(Rin + r_extra)`` inverting) falls below
    ``min_noise_gain`` are left out unless no pair reaches it.
    """
    level = _between(series, impedance_ohm / math.sqrt(10), impedance_ohm * math.sqrt(10))
    level2 = np.concatenate([level, level])
    if topology == NON_INVERTING:
        other = level / max(gain - 1.0, 1e-6)
        cands = np.concatenate([_round_down_vec(series, other), _round_up(series, other)])
        rf, r2 = level2, cands
        g = 1.0 + rf / r2
    else:
        other = gain * (level + r_extra_ohm)
        cands = np.concatenate([_round_down_vec(series, other), _round_up(series, other)])
        rf, r2 = cands, level2
        g = rf / (r2 + r_extra_ohm)
    noise = g if topology == NON_INVERTING else 1.0 + g
    err = np.abs(np.log(g / gain))
    closeness = np.abs(np.log(level2 / impedance_ohm))
    stable = noise >= min_noise_gain
    if stable.any():
        g, rf, r2 = g[stable], rf[stable], r2[stable]
        err, closeness = err[stable], closeness[stable]
    order = np.lexsort((closeness, np.round(err, 12)))
    keep = order[err[order] <= max(spread, err[order[0]])]
    return g[keep], rf[keep], r2[keep]


def choose_pairs(series: str, gain: float, n: int, topology: str, impedance_ohm: float,
                 r_source_ohm: float, correction: float = 1.0,
                 previous: list | None = None,
                 min_noise_gain: float = 1.0,
                 first_gain: float | None = None) -> list[tuple[float, float]]:
    """Feedback pairs for n stages whose gain *product* is nearest ``gain / correction``.

    Stages 1..n-2 take the pair nearest ``g = gain**(1/n)``; the last two stages search all
    combinations of their candidate lists (E96 ratios are quantised in ~2.4 % steps, their
    pairwise products far more finely), so the product lands within a few 0.01 % of the
    need. ``correction`` is the measured as-built / ideal-product ratio of a previous pass.
    ``first_gain`` (a ``low_noise`` split, :mod:`service.engine.synthesis.gain_split`):
    stage 1 takes the pair nearest it and the others share the rest the same way.
    """
    g = gain ** (1.0 / n)
    targets = [g] * n
    alone = max(n - 2, 0)
    if first_gain is not None and n >= 2:
        targets = [first_gain] + [(gain / first_gain) ** (1.0 / (n - 1))] * (n - 1)
        alone = max(n - 2, 1)
    extra = [r_source_ohm if (topology == INVERTING and k == 0) else 0.0 for k in range(n)]
    pairs = []
    for k in range(alone):
        if previous is not None:
            pairs.append(previous[k])
            continue
        _, rf, r2 = gain_candidates(series, targets[k], topology, impedance_ohm, extra[k],
                                    min_noise_gain=min_noise_gain)
        pairs.append((float(rf[0]), float(r2[0])))
    done = math.prod(_pair_gain(p, topology, r_source_ohm, k) for k, p in enumerate(pairs))
    need = gain / correction / done
    if n - alone == 1:  # one stage left (n = 1, or n = 2 with a first-stage gain)
        ga, rfa, r2a = gain_candidates(series, need, topology, impedance_ohm, extra[n - 1],
                                         min_noise_gain=min_noise_gain)
        return pairs + [(float(rfa[0]), float(r2a[0]))]
    rest = need ** 0.5
    ga, rfa, r2a = gain_candidates(series, rest, topology, impedance_ohm, extra[n - 2],
                                     min_noise_gain=min_noise_gain)
    gb, rfb, r2b = gain_candidates(series, rest, topology, impedance_ohm, extra[n - 1],
                                     min_noise_gain=min_noise_gain)
    ga, rfa, r2a, gb, rfb, r2b = (a[:40] for a in (ga, rfa, r2a, gb, rfb, r2b))
    err = np.abs(np.log(ga[:, None] * gb[None, :] / need))
    i, j = np.unravel_index(np.argmin(np.round(err, 12)), err.shape)
    return pairs + [(float(rfa[i]), float(r2a[i])), (float(rfb[j]), float(r2b[j]))]


def _round_down_vec(series: str, x: np.ndarray) -> np.ndarray:
    v = _series_values(series)
    i = np.searchsorted(v, np.asarray(x) * (1 + 1e-12), side="right") - 1
    return v[np.maximum(i, 0)]


def bias_divider(series: str, v_supply: float, v_target: float,
                 impedance_ohm: float) -> tuple[float, float]:
    """E-series (r_top, r_bottom) whose divider ratio is nearest ``v_target / v_supply``.

    r_top ranges over a decade centred on twice the impedance level (so the divider's
    source impedance sits near the impedance level); ties go to the value nearest it.
    """
    ratio = v_target / v_supply
    centre = 2.0 * impedance_ohm
    tops = _between(series, centre / math.sqrt(10), centre * math.sqrt(10))
    want = tops * ratio / (1.0 - ratio)
    bottoms = np.concatenate([_round_down_vec(series, want), _round_up(series, want)])
    tops2 = np.concatenate([tops, tops])
    err = np.abs(bottoms / (tops2 + bottoms) - ratio)
    closeness = np.abs(np.log(tops2 / centre))
    best = np.lexsort((closeness, np.round(err, 12)))[0]
    return float(tops2[best]), float(bottoms[best])


def _midrail_target_v(req: DesignRequest) -> float:
    op = req.opamp
    return 0.5 * ((req.supply.v_pos - op.swing_to_pos_v) + op.swing_to_neg_v)


def synthesize(req: DesignRequest, n: int, *, aim: centring.Aim | None = None) -> Synthesis:
    """The complete circuit for ``n`` stages (deterministic: a pure function of its inputs),
    centred for the target's ``min_yield`` (:mod:`service.engine.synthesis.centring`: the
    passes below size for ``aim``'s corners)."""
    if aim is None:
        # the request's own stage count plays no part here: one cache entry serves an
        # "auto" design and the same request asked for with that count (an exploration
        # designs both)
        return _synthesis_cached(replace(req, stages=None), n)
    return _synthesize_aimed(req, n, aim)


@lru_cache(maxsize=32)
def _synthesis_cached(req: DesignRequest, n: int) -> Synthesis:
    return _synthesize_centred(req, n)


def _synthesize_centred(req: DesignRequest, n: int) -> Synthesis:
    """The impedance level (when "auto") and the yield centring around the aimed passes."""
    passes: dict = {}  # (request, aim) -> Synthesis: the level search and the centring
                       # share their first passes

    def at(r: DesignRequest, a: centring.Aim) -> Synthesis:
        if (r, a) not in passes:
            passes[(r, a)] = _synthesize_aimed(r, n, a)
        return passes[(r, a)]

    req, why = impedance.resolve(req, lambda r: at(r, centring.first_aim(r)))
    syn = centring.centre(req, lambda a: at(req, a))
    return replace(syn, components=req.components, impedance_reason=why)


def _synthesize_aimed(req: DesignRequest, n: int, aim: centring.Aim) -> Synthesis:
    """One pass: the circuit sized for ``aim``'s corners (module docstring, steps 1-4)."""
    req = centring.aimed_request(req, aim)
    comp = req.components
    topo = req.topology
    target = req.target
    rs = req.signal.source_impedance_ohm
    ac = target.f_low_hz > 0
    stable = req.opamp.min_stable_gain
    first = gain_split.first_stage_gain(req, n)
    pairs = choose_pairs(comp.resistor_pool, target.gain, n, topo, comp.impedance_ohm, rs,
                         min_noise_gain=stable, first_gain=first)
    bias, bias_reason = _initial_bias(req, n)
    # One cheap solve predicts the losses (source divider, finite A0) before any capacitor
    # is sized, so the loop below usually settles in one pass.
    ideal_product = math.prod(_pair_gain(p, topo, rs, k) for k, p in enumerate(pairs))
    pairs = choose_pairs(comp.resistor_pool, target.gain, n, topo, comp.impedance_ohm, rs,
                         correction=_midband_estimate(req, pairs) / ideal_product,
                         min_noise_gain=stable, first_gain=first)
    pairs, circuit, result = _gain_passes(req, pairs, bias, first)
    for _ in range(BIAS_ROUNDS):
        if bias is None or not ac:
            break
        settled, reason = _settle_bias(req, pairs, bias)
        if settled == bias:
            break
        # the gain passes run again against the bias network they will be built with
        bias, bias_reason = settled, reason
        pairs, circuit, result = _gain_passes(req, pairs, bias, first)
    circuit = band_limit.limit_band(req, circuit, f_high_aim_hz=aim.f_high_hz)
    if ac and any(st.c_feedback_f is not None for st in circuit.stages):
        circuit = _with_band_limit(req, pairs, circuit, aim.f_high_hz, first)
    # per-stage figures only for the design returned (design() adds them)
    return Synthesis(circuit=circuit, as_built=as_built(circuit, per_stage=False),
                     bias_reason=bias_reason)


#: Rounds of (settle the bias, redo the gain passes on it); the second rarely changes more.
BIAS_ROUNDS = 2


def _gain_passes(req: DesignRequest, pairs, bias, first=None):
    """Size the low side for ``pairs`` on ``bias``, measure the gain product on the full
    model and re-choose the last pairs while that promises a better product; the best pass
    is kept. ``first`` is stage 1's gain of a ``low_noise`` split. Returns ``(pairs,
    circuit, as_built)``."""
    comp = req.components
    topo = req.topology
    target = req.target
    rs = req.signal.source_impedance_ohm
    ac = target.f_low_hz > 0
    n = len(pairs)
    tried: set = set()
    best = None  # (gain error, pairs, circuit, result)
    for _ in range(GAIN_PASSES):
        tried.add(tuple(pairs))
        circuit = _with_low_side(req, pairs, bias) if ac else _dc_circuit(req, pairs)
        result = as_built(circuit, per_stage=False)
        err = abs(math.log(target.gain / result.gain))
        if best is None or err < best[0]:
            best = (err, pairs, circuit, result)
        if err < 1e-5:
            break
        ideal_product = math.prod(_pair_gain(p, topo, rs, k) for k, p in enumerate(pairs))
        new = choose_pairs(comp.resistor_pool, target.gain, n, topo, comp.impedance_ohm, rs,
                           correction=result.gain / ideal_product, previous=pairs,
                           min_noise_gain=req.opamp.min_stable_gain, first_gain=first)
        new_product = math.prod(_pair_gain(p, topo, rs, k) for k, p in enumerate(new))
        predicted = abs(math.log(target.gain / (result.gain * new_product / ideal_product)))
        if tuple(new) in tried or predicted >= err - GAIN_PASS_MIN_IMPROVEMENT:
            break
        pairs = new
    return best[1], best[2], best[3]


def _with_band_limit(req: DesignRequest, pairs, circuit: Circuit, f_high_aim_hz, first):
    """The low side sized again with the band-limiting capacitors in place (a narrow band's
    peak then lies inside the target without oversized capacitors), the band limit redone
    on it, and the last two gain pairs re-chosen while the skirts' loss of midband gain
    (measured on the nodal model) leaves the product off the target."""
    comp = req.components
    rs = req.signal.source_impedance_ohm
    best = None
    for _ in range(GAIN_PASSES):
        caps = [st.c_feedback_f for st in circuit.stages]
        circuit = band_limit.limit_band(req, _with_low_side(req, pairs, circuit.bias, caps),
                                        f_high_aim_hz=f_high_aim_hz)
        gain = as_built(circuit, per_stage=False).gain
        err = abs(math.log(req.target.gain / gain))
        if best is None or err < best[0]:
            best = (err, circuit)
        ideal_product = math.prod(_pair_gain(p, req.topology, rs, k)
                                  for k, p in enumerate(pairs))
        new = choose_pairs(comp.resistor_pool, req.target.gain, len(pairs), req.topology,
                           comp.impedance_ohm, rs, correction=gain / ideal_product,
                           previous=pairs, min_noise_gain=req.opamp.min_stable_gain,
                           first_gain=first)
        if err < 1e-4 or new == pairs:
            break
        pairs = new
    return best[1]


#: Stand-in for "short at midband" when predicting the midband gain before sizing.
_SHORT_F = 1.0


def _midband_estimate(req: DesignRequest, pairs) -> float:
    """|Vout/Vs| at the target's band centre with every capacitor a near-short and the
    bias resistors at their starting values: the midband gain before the low side exists."""
    t = req.target
    f_mid = math.sqrt(t.f_low_hz * t.f_high_hz) if t.f_low_hz > 0 else t.f_high_hz / 100.0
    n = len(pairs)
    ac = t.f_low_hz > 0
    single = req.supply.kind != DUAL
    comp = req.components
    rb0 = float(_nearest(comp.resistor_pool, comp.impedance_ohm))
    rs = req.signal.source_impedance_ohm
    rb_first = float(_nearest(comp.resistor_pool,
                              max(comp.impedance_ohm, SOURCE_LOAD_RATIO * rs)))
    non_inv = req.topology == NON_INVERTING
    params = chain.ChainParams(
        inverting=not non_inv,
        source_impedance_ohm=rs,
        load_ohm=req.signal.load_ohm,
        a0=req.opamp.a0,
        gbw_hz=[req.opamp.gbw_hz] * n,
        c_couple_f=[_SHORT_F if ac else None] * n,
        r_bias_ohm=[(rb_first if k == 0 else rb0) if (ac and non_inv) else None for k in range(n)],
        r_feedback_ohm=[rf for rf, _ in pairs],
        r_gain_ohm=[r2 for _, r2 in pairs] if non_inv else [None] * n,
        c_gain_f=[_SHORT_F if ac else None] * n if non_inv else [None] * n,
        r_in_ohm=[r2 for _, r2 in pairs] if not non_inv else [None] * n,
        c_out_f=_SHORT_F if single else None,
    )
    return float(np.abs(chain.solve_params(params, np.array([f_mid])).vout[0]))


def _pair_gain(pair, topology, rs, k) -> float:
    rf, r2 = pair
    if topology == NON_INVERTING:
        return 1.0 + rf / r2
    return rf / (r2 + (rs if k == 0 else 0.0))


def _initial_bias(req: DesignRequest, n: int):
    if req.supply.kind == DUAL:
        return None, None
    op = req.opamp
    spare = n % op.channels_per_package != 0
    if spare and op.min_stable_gain <= 1.0:
        bias = _bias(req, n, buffered=True, level_ohm=_divider_level(req, True, 0))
        return bias, ("VMID is buffered by the spare op-amp unit of the last package: a stiff "
                      "mid-rail keeps the stages from coupling through the shared bias at no "
                      "extra package.")
    bias = _bias(req, n, buffered=False, level_ohm=_divider_level(req, False, 0))
    if op.min_stable_gain > 1.0:
        return bias, ("VMID is the bypassed divider itself: the op-amp is not unity-gain "
                      "stable, so it cannot buffer VMID as a follower.")
    return bias, ("VMID is the bypassed divider itself: no spare op-amp unit, and the bypass "
                  "keeps the shared bias node stiff enough.")


#: A buffered divider carries no signal current, so it sits this many times above the
#: impedance level: the same bypass then filters the supply ten times more.
BUFFERED_DIVIDER_RATIO = 10.0
#: Divider impedance steps tried (x1, x10, x100 of the starting level) when the bypass
#: alone cannot meet the supply-ripple limit within the largest capacitor allowed.
DIVIDER_STEPS = 3


def _divider_level(req: DesignRequest, buffered: bool, step: int) -> float:
    base = req.components.impedance_ohm * (BUFFERED_DIVIDER_RATIO if buffered else 1.0)
    level = base * 10.0 ** step
    # r_top sits near twice the level: keep it under the largest resistor allowed
    return min(level, req.limits.max_resistor_ohm / 2.0)


def _bias(req: DesignRequest, n: int, *, buffered: bool, level_ohm: float) -> Bias:
    r_top, r_bottom = bias_divider(req.components.resistor_pool, req.supply.v_pos,
                                   _midrail_target_v(req), level_ohm)
    return Bias(r_top, r_bottom, _bypass_for(req, r_top, r_bottom, n), buffered)


def _bypass_for(req: DesignRequest, r_top: float, r_bottom: float, n: int) -> float:
    """Bypass capacitor putting the divider's pole ``BYPASS_POLE_RATIO`` below the signal
    poles: ``C = 1 / (2 pi (Rt || Rb) f_pole)``, rounded up to the capacitor series."""
    m = _low_pole_count(req, n)
    f_pole = req.target.f_low_hz * ideal.shrinkage(m) / BYPASS_POLE_RATIO
    r_par = r_top * r_bottom / (r_top + r_bottom)
    return float(_round_up(req.components.capacitor_pool, 1.0 / (TWO_PI * r_par * f_pole)))


def _low_pole_count(req: DesignRequest, n: int) -> int:
    per_stage = 2 if req.topology == NON_INVERTING else 1
    return n * per_stage + (1 if req.supply.kind != DUAL else 0)


def _largest_capacitor(req: DesignRequest) -> float:
    """The largest value of the capacitor series within ``limits.max_capacitor_f``."""
    v = _series_values(req.components.capacitor_pool)
    ok = v[v <= req.limits.max_capacitor_f * (1 + 1e-12)]
    return float(ok[-1]) if ok.size else float(v[0])


def _bias_quality(req: DesignRequest, pairs, bias: Bias) -> tuple[bool, float]:
    """``(flat, ripple excess dB)`` of the circuit built on ``bias``: flat = no peaking
    outside the band, the maximum inside the target band and no growing natural frequency
    (a loop through a soft shared bias node); ripple excess as
    :func:`service.engine.judge.checks.ripple_excess_db` (<= 0 passes)."""
    circuit = _with_low_side(req, pairs, bias)
    ab = as_built(circuit, per_stage=False)
    system = build_mna(circuit)
    flat = flat_outside_band(ab, req.target, circuit) and \
        checks.growth_rate_per_s(system) <= 0.0
    ctx = checks.CheckContext(
        input_peak_v=req.signal.input_peak_v, target=req.target, limits=req.limits,
        f_low_hz=ab.f_low_hz, f_high_hz=ab.f_high_hz, peak_hz=ab.peak_hz,
        ripple_frequencies_hz=ripple_frequencies(req.supply_rejection_hz))
    return flat, checks.ripple_excess_db(circuit, ctx, system)


def _settle_bias(req: DesignRequest, pairs, bias: Bias) -> tuple[Bias, str | None]:
    """The cheapest bias network that keeps the response flat and meets the ripple limit.

    Tried in order of cost: the bypass grown on the current divider; then VMID buffered
    (when the op-amp is unity-gain stable) with a divider ten times higher; then dividers
    ten and a hundred times higher still. On each, the bypass starts at its pole-ratio size
    and grows by the predicted ripple excess (above its corner the divider's ripple falls
    as ``1/C``) or by ``BYPASS_GROWTH``, up to the largest capacitor allowed. When nothing
    passes, the network with the least ripple excess among the flat ones is kept (the
    ``supply_ripple`` check then reports it).
    """
    n = len(pairs)
    c_max = _largest_capacitor(req)
    configs = [(bias.buffered, 0)]
    can_buffer = req.opamp.min_stable_gain <= 1.0
    if not bias.buffered and can_buffer:
        configs.append((True, 0))
    buffered_end = bias.buffered or can_buffer
    configs += [(buffered_end, step) for step in range(1, DIVIDER_STEPS)]
    best = None  # (not flat, excess, order, bias)
    order = 0
    for buffered, step in configs:
        if (buffered, step) == (bias.buffered, 0):
            cand = bias
        else:
            cand = _bias(req, n, buffered=buffered,
                         level_ohm=_divider_level(req, buffered, step))
        for _ in range(BYPASS_ATTEMPTS + 3):
            flat, excess = _bias_quality(req, pairs, cand)
            order += 1
            key = (not flat, max(excess, 0.0), order)
            if best is None or key < best[:3]:
                best = key + (cand,)
            if flat and excess <= 0.0:
                return cand, _bias_reason(bias, cand)
            if cand.c_bypass_f >= c_max:
                break
            # ripple: grow by the predicted excess (+20 %); peaking: by BYPASS_GROWTH
            growth = max(1.2 * 10.0 ** (excess / 20.0), 1.5) if excess > 0 else BYPASS_GROWTH
            bigger = min(float(_round_up(req.components.capacitor_pool,
                                         cand.c_bypass_f * growth)), c_max)
            cand = replace(cand, c_bypass_f=bigger)
    chosen = best[3]
    return chosen, _bias_reason(bias, chosen)


def _bias_reason(start: Bias, chosen: Bias) -> str | None:
    """Why the bias network differs from the starting one (None: unchanged)."""
    if chosen == start:
        return None
    parts = []
    if chosen.buffered and not start.buffered:
        parts.append("VMID is buffered by an extra op-amp unit")
    if chosen.r_top_ohm != start.r_top_ohm:
        parts.append(f"the divider was raised to {chosen.r_top_ohm:.4g}/"
                     f"{chosen.r_bottom_ohm:.4g} ohm")
    if chosen.c_bypass_f != start.c_bypass_f:
        parts.append(f"the bypass was enlarged to {chosen.c_bypass_f * 1e6:.4g} uF")
    text = "; ".join(parts)
    return (text[:1].upper() + text[1:] + ": the shared bias node must keep the response "
            "free of low-frequency peaking and attenuate supply ripple to the limit.")


def _dc_circuit(req: DesignRequest, pairs) -> Circuit:
    stages = [_stage(req.topology, rf, r2, None, None, None) for rf, r2 in pairs]
    return _circuit(req, stages, None, None)


def _stage(topology, rf, r2, cc, rb, cg) -> Stage:
    if topology == NON_INVERTING:
        return Stage(r_feedback_ohm=rf, r_gain_ohm=r2, c_couple_f=cc, r_bias_ohm=rb, c_gain_f=cg)
    return Stage(r_feedback_ohm=rf, r_in_ohm=r2, c_couple_f=cc)


def _circuit(req: DesignRequest, stages, bias, c_out) -> Circuit:
    return Circuit(
        topology=req.topology, supply=req.supply, opamp=req.opamp,
        source_impedance_ohm=req.signal.source_impedance_ohm, load_ohm=req.signal.load_ohm,
        bias=bias, stages=tuple(stages), c_out_f=c_out,
    )


def _with_low_side(req: DesignRequest, pairs, bias, c_feedback=None) -> Circuit:
    """Size the coupling, ground-leg and output capacitors (module docstring, step 2), with
    the band-limiting capacitors ``c_feedback`` (one per stage) in place when given.

    Cached: the gain passes, the bias settling and the band limit ask for the same sizing
    again (about half the calls of a design repeat one), and the result is a pure function
    of its (frozen) arguments."""
    return _low_side_cached(req, tuple(pairs), bias,
                            None if c_feedback is None else tuple(c_feedback))


@lru_cache(maxsize=256)
def _low_side_cached(req: DesignRequest, pairs: tuple, bias, c_feedback) -> Circuit:
    comp = req.components
    cser, rser = comp.capacitor_pool, comp.resistor_pool
    n = len(pairs)
    rs = req.signal.source_impedance_ohm
    single = req.supply.kind != DUAL
    m = _low_pole_count(req, n)
    sigma = SIGMA_GRID[:, None]  # (S, 1)
    p = sigma * req.target.f_low_hz * ideal.shrinkage(m)
    rb0 = float(_nearest(rser, comp.impedance_ohm))
    # Stage 1's bias resistor also loads the source: keep it at least SOURCE_LOAD_RATIO
    # times the source impedance so the input divider costs under ~1 dB (common practice).
    rb0_first = float(_nearest(rser, max(comp.impedance_ohm, SOURCE_LOAD_RATIO * rs)))
    cc, rb, cg = [], [], []
    for k, (_rf, r2) in enumerate(pairs):
        r_front = rs if k == 0 else 0.0
        if req.topology == NON_INVERTING:
            r_level = rb0_first if k == 0 else rb0
            c = _round_up(cser, 1.0 / (TWO_PI * (r_level + r_front) * p))
            r = _nearest(rser, np.maximum(1.0 / (TWO_PI * c * p) - r_front, 1.0))
            cc.append(c)
            rb.append(r)
            cg.append(_round_up(cser, 1.0 / (TWO_PI * r2 * p)))
        else:
            cc.append(_round_up(cser, 1.0 / (TWO_PI * (r2 + r_front) * p)))
    c_out = _round_up(cser, 1.0 / (TWO_PI * req.signal.load_ohm * p)) if single else None
    params = chain.ChainParams(
        inverting=req.topology == INVERTING,
        source_impedance_ohm=rs,
        load_ohm=req.signal.load_ohm,
        a0=req.opamp.a0,
        gbw_hz=[req.opamp.gbw_hz] * n,
        c_couple_f=cc,
        r_bias_ohm=rb if rb else [None] * n,
        r_feedback_ohm=[rf for rf, _ in pairs],
        r_gain_ohm=[r2 for _, r2 in pairs] if req.topology == NON_INVERTING else [None] * n,
        c_gain_f=cg if cg else [None] * n,
        r_in_ohm=[r2 for _, r2 in pairs] if req.topology == INVERTING else [None] * n,
        c_out_f=c_out,
        r_top_ohm=bias.r_top_ohm if bias is not None and not bias.buffered else None,
        r_bottom_ohm=bias.r_bottom_ohm if bias is not None and not bias.buffered else None,
        c_bypass_f=bias.c_bypass_f if bias is not None and not bias.buffered else None,
    )
    f_est = _f_low_estimates(params, req)
    order = np.argsort(-SIGMA_GRID, kind="stable")
    ok = f_est <= req.target.f_low_hz * (1.0 - F_LOW_MARGIN)
    candidates = [int(i) for i in order if ok[i]] or [int(order[-1])]

    def build(j: int) -> Circuit:
        picked = _pick(req, pairs, bias, cc, rb, cg, c_out, candidates[j])
        return picked if c_feedback is None else band_limit.with_c_feedback(picked, c_feedback)

    def good(j: int) -> bool:
        circuit = build(j)
        ab = as_built(circuit, per_stage=False)
        if math.isnan(ab.f_low_hz) or ab.f_low_hz > req.target.f_low_hz:
            return False
        return peak_deficit_db(circuit, ab, req.target) <= corners.FLATNESS_SLACK_DB

    return build(_first_good(good, len(candidates)))


def _first_good(good, count: int) -> int:
    """Smallest index j with ``good(j)``, assuming good is monotone (false..., true...):
    galloping 0, 1, 3, 7, ... then bisection. Returns the last index when none is good.

    Smaller sigma (larger capacitors) lowers f_low and moves the response maximum down
    into the target band, so both conditions of ``good`` hold from some sigma downward.
    """
    if good(0):
        return 0
    bad, step, j = 0, 1, 1
    while j < count and not good(j):
        bad = j
        step *= 2
        j = bad + step
    if j >= count:
        if bad == count - 1 or not good(count - 1):
            return count - 1
        j = count - 1
    while j - bad > 1:
        mid = (bad + j) // 2
        if good(mid):
            j = mid
        else:
            bad = mid
    return j


def _pick(req, pairs, bias, cc, rb, cg, c_out, i) -> Circuit:
    stages = []
    for k, (rf, r2) in enumerate(pairs):
        if req.topology == NON_INVERTING:
            stages.append(_stage(NON_INVERTING, rf, r2, float(cc[k][i, 0]), float(rb[k][i, 0]),
                                 float(cg[k][i, 0])))
        else:
            stages.append(_stage(INVERTING, rf, r2, float(cc[k][i, 0]), None, None))
    out = None if c_out is None else float(c_out[i, 0])
    return _circuit(req, stages, bias, out)


def _f_low_estimates(params: chain.ChainParams, req: DesignRequest) -> np.ndarray:
    """Low -3 dB crossing for every sigma, on a grid below the band centre.

    The reference level is |H| at the band centre ``sqrt(f_low f_high)`` of the target,
    close to the midband maximum; the result only ranks the candidates, and the chosen one
    is verified on the full model (``as_built``).
    """
    t = req.target
    f_mid = math.sqrt(t.f_low_hz * t.f_high_hz)
    grid = np.geomspace(t.f_low_hz / 300.0, f_mid, 48)
    f = np.concatenate([grid, [f_mid]])[None, :]
    mag = magnitude.evaluator(params, magnitude.model_of(params))(f)
    mag = np.broadcast_to(mag, (SIGMA_GRID.size, f.shape[1]))
    thr = mag[:, -1:] / math.sqrt(2.0)
    below = mag[:, :-1] < thr
    idx = np.arange(grid.size)[None, :]
    j = np.max(np.where(below, idx, -1), axis=1)
    j = np.clip(j, 0, grid.size - 2)
    m0 = np.log(mag[np.arange(mag.shape[0]), j] / thr[:, 0])
    m1 = np.log(mag[np.arange(mag.shape[0]), j + 1] / thr[:, 0])
    x0, x1 = np.log(grid[j]), np.log(grid[j + 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.where(m1 != m0, x0 - m0 * (x1 - x0) / (m1 - m0), x0)
    est = np.exp(x)
    est = np.where(below.any(axis=1), est, 0.0)
    return est


# ----------------------------------------------------------------------------- top level


@dataclass(frozen=True)
class Design:
    request: DesignRequest
    synthesis: Synthesis
    ideal: ideal.IdealCascade
    judgement: Judgement
    #: ``(code, message)`` remarks of the stage-count search for the report's warnings.
    notes: tuple = ()

    @property
    def status(self) -> str:
        return self.judgement.status

    @property
    def shortfalls(self) -> list:
        return [dict(s) for s in self.judgement.shortfalls]


def check_request(req: DesignRequest) -> None:
    """Engine-level checks the schema cannot make (they need the resolved op-amp)."""
    span = req.supply.span_v
    op = req.opamp
    if not op.supply_min_v <= span <= op.supply_max_v:
        raise EngineError(
            f"supply span {span:g} V is outside the op-amp's {op.supply_min_v:g}.."
            f"{op.supply_max_v:g} V", field="supply")
    if req.target.f_low_hz == 0 and req.supply.kind != DUAL:
        raise EngineError("f_low_hz = 0 (DC coupling) needs a dual supply", field="target.f_low_hz")


#: Auto mode skips stage counts whose *ideal* f_high is below this fraction of the target
#: (E-series rounding moves the as-built figure by well under 3 %).
IDEAL_REACH_FRACTION = 0.97


def _stable(req: DesignRequest, n: int) -> bool:
    """True when n identical stages run at a noise gain the op-amp is stable at."""
    g = req.target.gain ** (1.0 / n)
    return ideal.noise_gain(g, req.topology) >= req.opamp.min_stable_gain


def _ideal_f_high_hz(req: DesignRequest, n: int) -> float:
    return ideal.ideal_cascade(req.target.gain, req.target.f_low_hz, req.opamp.gbw_hz, n,
                               req.topology).f_high_hz


#: Auto mode tries at most this many stages beyond the fewest that reach the target
#: ideally (more stages than that add parts, noise and supply ripple gain for nothing a
#: practising engineer would trade them for; band_limit.EXTRA_STAGES is the same margin).
AUTO_EXTRA_STAGES = 3


def stage_counts_to_try(req: DesignRequest) -> list[int]:
    """Auto mode: stage counts in increasing order whose ideal f_high can reach the target
    and whose stage noise gain the op-amp tolerates, up to ``AUTO_EXTRA_STAGES`` beyond the
    first."""
    counts = [n for n in range(1, ideal.MAX_STAGES + 1) if _stable(req, n)
              and _ideal_f_high_hz(req, n) >= IDEAL_REACH_FRACTION * req.target.f_high_hz]
    return [n for n in counts if n <= counts[0] + AUTO_EXTRA_STAGES] if counts else []


def best_reach(req: DesignRequest) -> int:
    """Stage count with the highest ideal f_high among the stable ones (1 if none)."""
    stable = [n for n in range(1, ideal.MAX_STAGES + 1) if _stable(req, n)]
    return max(stable, key=lambda n: (_ideal_f_high_hz(req, n), -n), default=1)


def _no_deadline(where: str | None = None) -> None:
    return None


def output_beyond_window(req: DesignRequest) -> tuple[float, float] | None:
    """``(needed peak V, window V)`` when the output signal alone, ``input_peak_v`` times
    the target gain at its lower tolerance, exceeds the op-amp's whole output window
    ``(v_pos - swing_to_pos_v) - (v_neg + swing_to_neg_v)``; else None.

    The last stage's output carries that signal around its DC level, which leaves at most
    half the window on either side, so no circuit meeting the gain passes ``output_swing``
    (by a factor of two at least, whatever the stage count, bias or offsets)."""
    op, sup, t = req.opamp, req.supply, req.target
    window = (sup.v_pos - op.swing_to_pos_v) - (sup.v_neg + op.swing_to_neg_v)
    need = req.signal.input_peak_v * t.gain * 10.0 ** (-t.gain_tolerance_db / 20.0)
    return (need, window) if need > window else None


#: Loop gain at DC (A0 over the stage's noise gain) a stage keeps when auto mode designs a
#: single count for a request that clips anyway: under 10 the open-loop gain, not the
#: feedback network, sets the stage gain (common practice).
LOOP_GAIN_MIN = 10.0


def _count_for_clipping(req: DesignRequest) -> int:
    """The one stage count designed when the output is beyond the window: the fewest auto
    mode tries whose noise gain per stage is at most ``A0 / LOOP_GAIN_MIN``, else the most
    it tries (``best_reach`` when it tries none)."""
    counts = stage_counts_to_try(req)
    if not counts:
        return best_reach(req)
    g_max = req.opamp.a0 / LOOP_GAIN_MIN
    fit = [n for n in counts
           if ideal.noise_gain(req.target.gain ** (1.0 / n), req.topology) <= g_max]
    return fit[0] if fit else counts[-1]


def judge_synthesis(req: DesignRequest, syn: Synthesis, *, startup: bool = True) -> Judgement:
    """The verdict on a synthesised circuit at the request's conditions, limits and
    tolerances (its predicted yield included)."""
    est = syn.yield_estimate or yield_estimate.predict(syn.circuit, req.target,
                                                       tolerances_of(req.components))
    return judge(syn.circuit, syn.as_built, target=req.target,
                 input_peak_v=req.signal.input_peak_v, limits=req.limits,
                 supply_rejection_hz=req.supply_rejection_hz, startup=startup,
                 yield_est=est)


def design(req: DesignRequest, *, check_deadline=None) -> Design:
    """Design the cascade: the requested stage count, or the fewest stages whose as-built
    design meets the target and passes every check (auto); when none does, the best of
    those tried (:func:`best_of`). When the output signal alone exceeds the op-amp's whole
    output window (:func:`output_beyond_window`), no count can meet the target and auto mode
    designs only one (:func:`_count_for_clipping`; a note says so in the warnings).

    :param check_deadline: optional callable, called before each candidate stage count is
        synthesised; the web layer passes its compute-budget checker, which raises once the
        request has used its budget.
    :raise EngineError: the supply span does not suit the op-amp, or DC coupling was asked
        for on a single supply.
    """
    check_deadline = check_deadline or _no_deadline
    check_request(req)
    tried: dict[int, tuple[Synthesis, Judgement]] = {}
    notes: tuple = ()
    beyond = output_beyond_window(req) if req.stages is None else None
    if req.stages is not None:
        syn = synthesize(req, req.stages)
    elif beyond is not None:
        # no stage count can meet the target: design one, the first auto mode would try
        # whose stages keep a DC loop gain of LOOP_GAIN_MIN (their gain set by the feedback
        # network, not by A0)
        n = _count_for_clipping(req)
        check_deadline("design")
        syn = synthesize(req, n)
        tried[n] = (syn, judge_synthesis(req, syn, startup=False))
        notes = (("output_beyond_window",
                  f"The output signal alone, input_peak_v x the target gain (at its lower "
                  f"tolerance), is {beyond[0]:.4g} V peak, more than the op-amp's whole "
                  f"output window of {beyond[1]:.4g} V: no stage count can pass "
                  f"output_swing, so only {n} stage{'s' if n > 1 else ''} (the fewest auto "
                  f"mode tries whose stage gain leaves the op-amp a loop gain of "
                  f"{LOOP_GAIN_MIN:g}) "
                  f"{'were' if n > 1 else 'was'} designed. Lower the gain or the input, or "
                  "raise the supply."),)
    else:
        syn = None
        first_met = None  # fewest stages meeting everything, before the band-limit rule
        for n in stage_counts_to_try(req):
            check_deadline("design")
            cand = synthesize(req, n)
            tried[n] = (cand, judge_synthesis(req, cand, startup=False))
            if tried[n][1].meets_target:
                first_met = first_met or cand
                # with f_high_max_hz: more stages until the upper corner holds against
                # the op-amp's GBW spread (synthesis.band_limit)
                if band_limit.holds_against_gbw(req, cand.circuit):
                    syn = cand
                    break
            if first_met is not None and \
                    n >= first_met.circuit.n_stages + band_limit.EXTRA_STAGES:
                break
        syn = syn or first_met
        if syn is None:
            # none meets everything: the best of those tried and of the best reach's
            # neighbourhood (the stage counts a practising engineer would weigh)
            reach = best_reach(req)
            for n in fallback_counts(req):
                if n not in tried:
                    check_deadline("design")
                    cand = synthesize(req, n)
                    tried[n] = (cand, judge_synthesis(req, cand, startup=False))
            if not tried:  # no stage count is stable: best_reach's pick, flagged by a check
                cand = synthesize(req, reach)
                tried[reach] = (cand, judge_synthesis(req, cand, startup=False))
            syn = best_of(tried)
    n = syn.circuit.n_stages
    judged = tried.get(n)
    syn = replace(syn, as_built=as_built(syn.circuit))  # with the per-stage figures
    if judged is not None:
        # the search judged this circuit without its start-up transient: complete that one
        judgement = with_startup_time(judged[1], syn.circuit, req.limits)
    else:
        judgement = judge_synthesis(req, syn)
    ic = ideal.ideal_cascade(req.target.gain, req.target.f_low_hz, req.opamp.gbw_hz, n,
                             req.topology)
    return Design(request=req, synthesis=syn, ideal=ic, judgement=judgement, notes=notes)


def fallback_counts(req: DesignRequest) -> list[int]:
    """Stage counts weighed when none meets everything: those auto mode tries, and the
    stable ones around the count with the best ideal reach."""
    reach = best_reach(req)
    near = [n for n in (reach - 1, reach, reach + 1)
            if 1 <= n <= ideal.MAX_STAGES and _stable(req, n)]
    return sorted(set(stage_counts_to_try(req)) | set(near))


def best_of(tried: dict) -> Synthesis:
    """Among ``{n: (synthesis, judgement)}`` none of which meets everything: the one that
    meets the gain and band target if any, then with the fewest failed checks, then (target
    met) the fewest stages or (target missed) the highest as-built f_high."""
    def rank(n):
        syn, jd = tried[n]
        target_misses = sum(1 for s in jd.shortfalls
                            if s["quantity"] in ("gain_db", "f_low_hz", "f_high_hz"))
        # a met target: the fewest stages; a missed one: the widest band
        reach = -syn.as_built.f_high_hz if target_misses else n
        return (target_misses > 0, len(jd.shortfalls), reach, n)
    return tried[min(sorted(tried), key=rank)][0]
