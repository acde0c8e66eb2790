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
("stage-product", real arithmetic); with a shared divider the chain's nodal recursion runs
in fraction-free form ("chain-fraction-free"); both kernels live in
:mod:`service.engine.solver.magnitude`; "chain-nodal"
(:func:`service.engine.solver.chain.solve_params` itself) serves as their reference in the
tests. When VMID is buffered the
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
from service.engine.solver.chain import ChainParams, params_from_circuit
from service.engine.solver.corners import F_MAX_HZ, find_band
from service.engine.solver.magnitude import (  # noqa: F401  (the models, re-exported)
    CHAIN_NODAL,
    SHARED_REF,
    STAGE_PRODUCT,
    evaluator,
    shared_ref_mag,
    stage_factors,
    stage_product_mag,
)

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
