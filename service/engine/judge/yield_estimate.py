"""Predicted yield: the fraction of builds that meet the target, fast enough for every request.

Method ("log-linear sensitivities"): each toleranced part ``x_i`` (every resistor and
capacitor of the circuit except the source and load, each op-amp unit's gain-bandwidth
when its tolerance is not zero; the same parts and tolerances as the Monte Carlo, see
:mod:`service.engine.judge.montecarlo`) gets a sensitivity of each figure by a central
finite difference on the circuit's own per-trial solver, in logarithmic coordinates:

    S_i = (y(x_i e^h) - y(x_i e^-h)) / (2 h),    y in {gain_db, ln f_low_hz, ln f_high_hz}

and each part's own curvature ``C_i = (y(x_i e^h) - 2 y0 + y(x_i e^-h)) / h^2`` from the
same evaluations. The figures are then modelled as ``y = y0 + sum_i (S_i z_i + C_i z_i^2 / 2)``,
``z_i = ln(1 + t_i u_i)``, with ``u_i`` independent and uniform on [-1, 1] (the parts'
distribution) and ``t_i`` each part's tolerance (cross terms between parts are left out),
and that model is sampled ``SAMPLES`` times (a fixed-seed PCG64 stream, so the
same circuit always gives the same figure). The predicted yield is the fraction of samples
meeting every condition of the target (gain within ``gain_tolerance_db``, f_low <= f_low_hz,
f_high >= f_high_hz, and the band limits ``f_low_min_hz`` / ``f_high_max_hz`` when given).

With a shared (unbuffered) bias divider, part spreads can also turn the bias loop into a
low-frequency resonance that changes the response's shape; no sensitivity at nominal sees
it coming, so :func:`peaking_fraction` checks ``PEAKING_TRIALS`` exact builds against the
model and the yield is multiplied by the fraction that keep their shape.

Working in logarithms makes the model exact for any figure that is a power law of the parts
(a single RC corner ``1/(2 pi R C)``, a gain ratio ``Rf/Rg``), which is what the corners and
gain of a cascade nearly are; the remaining error is second order in the tolerances. The
tests compare the prediction with a 20,000-trial Monte Carlo of the full per-trial solver
and with an ngspice Monte Carlo.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from functools import lru_cache

import numpy as np

from service.engine.judge import montecarlo as mc
from service.engine.model import parts as parts_mod
from service.engine.model.circuit import Circuit, Target
from service.engine.solver.chain import params_from_circuit

METHOD = "log-sensitivities"
METHOD_DESCRIPTION = (
    "sensitivities (slope and own curvature) of gain_db, ln f_low_hz and ln f_high_hz to the "
    "logarithm of every toleranced part (central finite differences on the per-trial solver "
    "of the Monte Carlo), then {samples} fixed-seed samples of that model with every part uniform "
    "within its tolerance; the yield is the fraction of samples meeting the target, times the "
    "fraction of builds without bias-loop peaking (peaking_fraction: with a shared bias "
    "divider, 512 exact builds checked against that model; 0 with a stiff VMID)")
#: Samples of the linear model: binomial sampling error sqrt(0.09 / 8192) ~ 0.003 at 0.9.
SAMPLES = 8192
SEED = 9
#: Half-step of the central differences in ln(part): 1 % moves a corner by ~1 %, far above
#: the corner search's precision and small enough for the curvature to stay second order.
STEP = 0.01
FIGURES = mc.FIGURES
#: Shared-bias designs: exact builds checked for a changed response shape (sampling error
#: of a fraction near 0.05: 0.01), the seed of their draws, and what counts as changed.
PEAKING_TRIALS = 512
PEAKING_SEED = 10
PEAKING_GAIN_DB = 0.5
PEAKING_LN_F = 0.2


@dataclass(frozen=True)
class YieldEstimate:
    """The prediction and what it rests on.

    :ivar samples: ``(SAMPLES, 3)`` modelled figures (gain_db, f_low_hz, f_high_hz), nan
        where the nominal figure does not exist.
    :ivar passed: per-sample pass mask of each condition group: ``gain``, ``low``, ``high``.
    """

    predicted: float
    min_yield: float
    nominal: dict
    limits: dict
    samples: np.ndarray = field(repr=False)
    passed: dict = field(repr=False)
    peaking: float = 0.0
    #: ``(parts, half-widths, nominal, S, C)`` of :func:`sensitivities`, for
    #: :func:`with_peaking` (not part of the figures).
    basis: tuple = field(default=(), repr=False, compare=False)
    #: Whether the exact peaking check has run (``peaking`` then holds its fraction).
    peaking_checked: bool = False

    @property
    def meets(self) -> bool:
        return self.predicted >= self.min_yield

    def spread(self, name: str) -> float | None:
        """Standard deviation of the modelled figure (its unit); None when it does not exist."""
        col = self.samples[:, FIGURES.index(name)]
        col = col[np.isfinite(col)]
        return float(np.std(col)) if col.size else None


@lru_cache(maxsize=32)
def _uniform_draws(parts_count: int) -> np.ndarray:
    """The fixed ``(SAMPLES, parts)`` uniform draws on [-1, 1] (cached, read-only)."""
    rng = np.random.default_rng(SEED)
    draws = rng.uniform(-1.0, 1.0, size=(SAMPLES, parts_count))
    draws.flags.writeable = False
    return draws


@lru_cache(maxsize=32)
def _log_draws(half: tuple) -> tuple[np.ndarray, np.ndarray]:
    """``(z, z^2)`` with ``z = ln(1 + t u)`` for the fixed draws and the parts' half-widths
    ``half`` (cached: a design's passes share their parts list; read-only)."""
    z = np.log1p(_uniform_draws(len(half)) * np.asarray(half)[None, :])
    z2 = z * z
    z.flags.writeable = False
    z2.flags.writeable = False
    return z, z2


def limits_of(target: Target) -> dict:
    """``{figure: (low, high)}`` of the target (None: open side)."""
    return {
        "gain_db": (target.gain_db - target.gain_tolerance_db,
                    target.gain_db + target.gain_tolerance_db),
        "f_low_hz": (target.f_low_min_hz, target.f_low_hz if target.f_low_hz > 0 else None),
        "f_high_hz": (target.f_high_hz, target.f_high_max_hz),
    }


def sensitivities(circuit: Circuit, tolerances: parts_mod.Tolerances, grid_hz=None):
    """``(parts, half-widths, nominal (3,), S (parts, 3), C (parts, 3))`` in the log
    coordinates above; ``C`` holds each part's own curvature (second central difference)."""
    tol = mc.Tolerances.from_block(tolerances)
    params = params_from_circuit(circuit)
    parts = mc.varied_parts(params, tol, parts_mod.capacitor_kinds(circuit))
    model = mc.model_for(circuit)
    if grid_hz is None:
        grid_hz = _grid(circuit)
    nominal = np.array([p.nominal for p in parts])
    count = len(parts)
    steps = np.vstack([nominal[None, :],
                       nominal * np.exp(STEP * np.eye(count)),
                       nominal * np.exp(-STEP * np.eye(count))]) if count else None
    if count:
        p = mc.with_values(params, parts, steps)
        g, lo, hi = mc.figures(p, grid_hz, steps.shape[0], model)
    else:
        g, lo, hi = mc.figures(params, grid_hz, 1, model)
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.stack([g, np.log(lo), np.log(hi)], axis=1)
    y0 = y[0]
    if not count:
        return parts, np.zeros(0), y0, np.zeros((0, 3)), np.zeros((0, 3))
    sens = (y[1:count + 1] - y[count + 1:]) / (2.0 * STEP)
    curv = (y[1:count + 1] - 2.0 * y0[None, :] + y[count + 1:]) / (STEP * STEP)
    half = np.array([tol.of(p.kind) for p in parts])
    return parts, half, y0, np.nan_to_num(sens), np.nan_to_num(curv)


def _grid(circuit: Circuit) -> np.ndarray:
    from service.engine.judge.analysis import as_built

    ab = as_built(circuit, per_stage=False)
    f_high = ab.f_high_hz if math.isfinite(ab.f_high_hz) else \
        mc.F_MAX_HZ / 10 ** mc.GRID_MARGIN_DECADES
    return mc.analysis_grid(ab.f_low_hz, f_high)


def predict(circuit: Circuit, target: Target, tolerances: parts_mod.Tolerances, *,
            peaking: bool = True) -> YieldEstimate:
    """The predicted yield of ``circuit`` against ``target`` (module docstring);
    ``peaking=False`` skips the exact peaking check (a quicker estimate for searches)."""
    parts, half, y0, sens, curv = sensitivities(circuit, tolerances)
    if len(parts):
        z, z2 = _log_draws(tuple(half.tolist()))
        dy = z @ sens + 0.5 * z2 @ curv  # (SAMPLES, 3)
    else:
        dy = np.zeros((SAMPLES, 3))
    y = y0[None, :] + dy
    samples = np.column_stack([y[:, 0], np.exp(y[:, 1]), np.exp(y[:, 2])])
    limits = limits_of(target)
    g, f_lo, f_hi = samples[:, 0], samples[:, 1], samples[:, 2]
    (g_min, g_max), (lo_min, lo_max), (hi_min, hi_max) = (
        limits["gain_db"], limits["f_low_hz"], limits["f_high_hz"])
    # As montecarlo.meets: a missing low corner (DC coupled) meets f_low but fails
    # f_low_min; a missing high corner (none below 10 GHz) meets f_high but fails f_high_max.
    with np.errstate(invalid="ignore"):
        passed = {"gain": (g >= g_min) & (g <= g_max),
                  "low": ~(f_lo > lo_max) if lo_max is not None else np.ones(SAMPLES, bool),
                  "high": ~(f_hi < hi_min)}
        if lo_min is not None:
            passed["low"] &= f_lo >= lo_min
        if hi_max is not None:
            passed["high"] &= np.isfinite(f_hi) & (f_hi <= hi_max)
    predicted = float(np.mean(passed["gain"] & passed["low"] & passed["high"]))
    nominal = {"gain_db": float(y0[0]), "f_low_hz": float(np.exp(y0[1])),
               "f_high_hz": float(np.exp(y0[2]))}
    est = YieldEstimate(predicted=predicted, min_yield=target.min_yield, nominal=nominal,
                        limits=limits, samples=samples, passed=passed,
                        basis=(parts, half, y0, sens, curv))
    return with_peaking(est, circuit, tolerances) if peaking else est


def with_peaking(est: YieldEstimate, circuit: Circuit,
                 tolerances: parts_mod.Tolerances) -> YieldEstimate:
    """``est`` (of ``circuit``, made with ``peaking=False``) with the exact peaking check
    applied: the same estimate :func:`predict` gives with ``peaking=True``, without
    computing the sensitivities again."""
    if est.peaking_checked:
        return est
    peaking = peaking_fraction(circuit, tolerances, *est.basis)
    return replace(est, predicted=est.predicted * (1 - peaking), peaking=peaking,
                   peaking_checked=True)


def peaking_fraction(circuit: Circuit, tolerances: parts_mod.Tolerances, parts, half, y0,
                     sens, curv) -> float:
    """Fraction of builds whose response changes shape: with a shared (unbuffered) bias
    node, part spreads can turn the bias loop into a low-frequency resonance that lifts the
    response outside the band; no sensitivity at nominal sees that coming. Checked exactly:
    ``PEAKING_TRIALS`` fixed-seed builds through the Monte Carlo's per-trial solver, each
    compared with the log-sensitivity model for the same draws; a build off it by more than
    ``PEAKING_GAIN_DB`` in gain or ``PEAKING_LN_F`` in ln f_low counts (and fails: its gain
    or its low corner has jumped). Zero with a stiff REF (dual supply or buffered VMID)."""
    if mc.stiff_reference(circuit) or not len(parts):
        return 0.0
    rng = np.random.default_rng(PEAKING_SEED)
    u = rng.uniform(-1.0, 1.0, size=(PEAKING_TRIALS, len(parts)))
    nominal = np.array([p.nominal for p in parts])
    params = params_from_circuit(circuit)
    values = nominal * (1.0 + half * u)
    g, lo, _ = mc.figures(mc.with_values(params, parts, values), _grid(circuit),
                          PEAKING_TRIALS, mc.model_for(circuit))
    z = np.log1p(u * half[None, :])
    lin = y0[None, :] + z @ sens + 0.5 * (z * z) @ curv
    with np.errstate(invalid="ignore", divide="ignore"):
        off = np.abs(g - lin[:, 0]) > PEAKING_GAIN_DB
        if math.isfinite(y0[1]):
            off |= ~(np.abs(np.log(lo) - lin[:, 1]) <= PEAKING_LN_F)
    return float(np.mean(off))


def yield_block(est: YieldEstimate) -> dict:
    """The response's ``yield`` block (JSON-ready; non-finite values become null)."""
    return {
        "predicted": est.predicted,
        "min_yield": est.min_yield,
        "method": METHOD,
        "description": METHOD_DESCRIPTION.format(samples=SAMPLES),
        "peaking_fraction": est.peaking,
        "figures": {
            name: {"nominal": est.nominal[name], "spread": est.spread(name),
                   "limit": list(est.limits[name])}
            for name in FIGURES
        },
    }


def shortfall(est: YieldEstimate) -> dict | None:
    """The ``yield`` shortfall when the prediction falls below ``min_yield``."""
    if est.meets:
        return None
    return {"quantity": "yield", "target": est.min_yield, "achieved": est.predicted}


def with_yield(status: str, shortfalls: list, est: YieldEstimate | None) -> tuple[str, list]:
    """``(status, shortfalls)`` with the yield counted: ``meets_target`` only when the
    prediction reaches ``min_yield``."""
    miss = None if est is None else shortfall(est)
    if miss is None:
        return status, shortfalls
    return "target_not_met", [*shortfalls, miss]
