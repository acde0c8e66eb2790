"""Band-limiting capacitors: a capacitor across each stage's feedback resistor sets the
cascade's upper corner, so the op-amp's gain-bandwidth (and its spread) barely moves it.

With ``Cf`` across ``Rf`` the feedback impedance is ``Zf = Rf / (1 + s Rf Cf)``: an inverting
stage ``-Zf/Zi`` gets one pole at ``fp = 1 / (2 pi Rf Cf)``; a non-inverting one
``1 + Zf/Zg`` a pole at ``fp`` and a zero at about ``(1 + Rf/Rg) fp``, where its gain has
fallen to unity (textbook op-amp stage forms, common practice). ``n`` equal real poles at
``fp`` put the cascade's
-3 dB corner at ``fp sqrt(2**(1/n) - 1)`` (the shrinkage rule of
:func:`service.engine.synthesis.ideal.shrinkage`).

Sizing (only when the target gives ``f_high_max_hz``, and only when the op-amp alone would
put f_high above the aim): every stage takes the same RC pole ``fp``, started from the
shrinkage rule and corrected on the full nodal model until the as-built f_high is at the
aim (the op-amp poles pull it down a little); the capacitors are then rounded to the
capacitor series, every combination of rounding each stage down or up is evaluated in one
vectorised solve, and the combination whose f_high lies nearest the aim (in log) is kept.
The aim defaults to the log centre ``sqrt(f_high_hz f_high_max_hz)`` of the allowed band.
In auto mode the stage count grows (up to ``EXTRA_STAGES`` beyond the fewest that meet
the target) until a +-30 % change of the gain-bandwidth moves the corner by under 3 %:
fewer gain per stage puts the op-amp's closed-loop poles further above the RC poles.

A part that is stable only at a noise gain above one gets no capacitor: ``Cf`` brings a
non-inverting stage's high-frequency noise gain down to one (common practice).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import replace

import numpy as np

from service.engine.judge import montecarlo as mc
from service.engine.judge.analysis import as_built
from service.engine.model import eseries
from service.engine.model.circuit import Circuit, DesignRequest
from service.engine.solver.chain import params_from_circuit
from service.engine.synthesis import ideal

TWO_PI = 2.0 * math.pi
#: Correction passes of the common pole on the nodal model (each converges ~10x).
POLE_PASSES = 4
#: Stages whose rounding (down or up) is searched jointly: 2**10 combinations at most; any
#: further stage takes the nearest series value.
JOINT_STAGES = 10
#: With ``f_high_max_hz`` given, the upper corner may move at most GBW_CORNER_MOVE for a
#: GBW_SPREAD change of the op-amp's gain-bandwidth (the op-amp poles sit well above the RC
#: poles); auto stage counts add stages for it, at most EXTRA_STAGES beyond the fewest that
#: meet the target.
GBW_SPREAD = 0.3
GBW_CORNER_MOVE = 0.03
EXTRA_STAGES = 3
#: The RC poles must set the corner: the op-amp alone must put f_high at least this far
#: above the aim, else no capacitor is added (it would only pull the corner down).
MIN_HEADROOM = 1.0


def with_c_feedback(circuit: Circuit, caps) -> Circuit:
    """The circuit with ``caps[k]`` across stage k's feedback resistor (None: none)."""
    return circuit.with_stages(replace(st, c_feedback_f=None if c is None else float(c))
                               for st, c in zip(circuit.stages, caps, strict=True))


def default_aim_hz(req: DesignRequest) -> float | None:
    """Log centre of the allowed upper-corner range; None without ``f_high_max_hz``."""
    t = req.target
    if t.f_high_max_hz is None:
        return None
    return math.sqrt(t.f_high_hz * t.f_high_max_hz)


def limit_band(req: DesignRequest, circuit: Circuit, *,
               f_high_aim_hz: float | None = None) -> Circuit:
    """``circuit`` with ``c_feedback_f`` sized so its as-built f_high sits at the aim
    (module docstring); unchanged when the request sets no ``f_high_max_hz``, when the
    op-amp is not unity-gain stable, or when the op-amp alone keeps f_high below the aim."""
    aim = f_high_aim_hz or default_aim_hz(req)
    if aim is None or req.opamp.min_stable_gain > 1.0:
        return circuit
    bare = circuit if all(st.c_feedback_f is None for st in circuit.stages) else \
        with_c_feedback(circuit, [None] * circuit.n_stages)
    if not as_built(bare, per_stage=False).f_high_hz > aim * MIN_HEADROOM:
        return bare
    rf = np.array([st.r_feedback_ohm for st in circuit.stages])
    fp = aim / ideal.shrinkage(circuit.n_stages)
    for _ in range(POLE_PASSES):
        trial = with_c_feedback(bare, 1.0 / (TWO_PI * rf * fp))
        f_high = as_built(trial, per_stage=False).f_high_hz
        if not math.isfinite(f_high):
            break
        fp *= aim / f_high
    return _round_jointly(req, bare, 1.0 / (TWO_PI * rf * fp), aim)


def _round_jointly(req: DesignRequest, circuit: Circuit, ideal_caps: np.ndarray,
                   aim: float) -> Circuit:
    """Series values for the capacitors: the down/up combination nearest the aim."""
    series = req.components.capacitor_series
    values = eseries.values_between(series, 1e-13, 10.0)
    lo_i = np.searchsorted(values, ideal_caps * (1 + 1e-12), side="right") - 1
    down = values[np.clip(lo_i, 0, values.size - 1)]
    up = values[np.clip(lo_i + 1, 0, values.size - 1)]
    n = len(ideal_caps)
    joint = min(n, JOINT_STAGES)
    nearest = np.where(np.log(ideal_caps / down) <= np.log(up / ideal_caps), down, up)
    combos = np.array(list(itertools.product((0, 1), repeat=joint)), dtype=bool)
    caps = np.tile(nearest, (combos.shape[0], 1))
    caps[:, :joint] = np.where(combos, up[:joint], down[:joint])
    nominal = with_c_feedback(circuit, nearest)
    ab = as_built(nominal, per_stage=False)
    f_low = ab.f_low_hz if math.isfinite(ab.f_low_hz) else math.nan
    grid = mc.analysis_grid(f_low, aim, mc.DEFAULT_FREQUENCY_POINTS)
    params = params_from_circuit(nominal)
    parts = tuple(mc.Part("c_feedback_f", k, "capacitor", float(nearest[k])) for k in range(n))
    model = mc.model_for(nominal)
    _, _, f_high = mc.figures(mc.with_values(params, parts, caps), grid, caps.shape[0], model)
    err = np.where(np.isfinite(f_high), np.abs(np.log(f_high / aim)), np.inf)
    best = int(np.argmin(np.round(err, 12)))
    return with_c_feedback(circuit, caps[best])


def gbw_corner_shift(circuit: Circuit, spread: float = 0.3) -> float:
    """Largest relative move of the as-built f_high when the op-amp's gain-bandwidth moves by
    ``+-spread`` (every unit together): ``max |f_high(GBW (1 +- spread)) / f_high - 1|``."""
    base = as_built(circuit, per_stage=False).f_high_hz
    moves = []
    for k in (1.0 - spread, 1.0 + spread):
        amp = replace(circuit.opamp, gbw_hz=circuit.opamp.gbw_hz * k)
        moves.append(abs(as_built(replace(circuit, opamp=amp), per_stage=False).f_high_hz
                         / base - 1.0))
    return max(moves)


def holds_against_gbw(req: DesignRequest, circuit: Circuit) -> bool:
    """True without ``f_high_max_hz``; else when a ``GBW_SPREAD`` change of the op-amp's
    gain-bandwidth moves the as-built f_high by less than ``GBW_CORNER_MOVE``."""
    if req.target.f_high_max_hz is None:
        return True
    return gbw_corner_shift(circuit, GBW_SPREAD) < GBW_CORNER_MOVE
