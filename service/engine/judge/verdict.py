"""The verdict on a circuit: its as-built figures against the target, and every build check.

``status`` is ``meets_target`` iff the as-built circuit meets the target (gain within
``gain_tolerance_db``, f_low at or below and f_high at or above the target, inside
``f_low_min_hz`` / ``f_high_max_hz`` when given), every check with a limit passes, and the
predicted yield reaches ``min_yield`` (:mod:`service.engine.judge.checks`). The synthesis and the
report both judge through :func:`judge`, so a design and the analysis of its circuit agree.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from service.engine.judge import analysis, yield_estimate
from service.engine.judge.checks import (
    STARTUP_SKIPPED,
    Check,
    CheckContext,
    run_checks,
    startup_check,
)
from service.engine.judge.supply_rejection import ripple_frequencies
from service.engine.model.circuit import Circuit, Limits, Target


@dataclass(frozen=True)
class Judgement:
    """Checks in the contract's order, and (given a target) the status and shortfalls."""

    checks: tuple[Check, ...]
    status: str | None
    shortfalls: tuple[dict, ...]

    @property
    def meets_target(self) -> bool:
        return self.status == "meets_target"


def judge(circuit: Circuit, ab: analysis.AsBuilt, *, target: Target | None,
          input_peak_v: float, limits: Limits, supply_rejection_hz: float | None = None,
          startup: bool = True, yield_est=None) -> Judgement:
    """Run every check on ``circuit`` (as built: ``ab``) and give the verdict; with a
    target, the predicted yield (``yield_est``, :mod:`service.engine.judge.yield_estimate`)
    must also reach ``min_yield`` (shortfall ``yield``, after the failed checks)."""
    ctx = CheckContext(input_peak_v=input_peak_v, target=target, limits=limits,
                       f_low_hz=ab.f_low_hz, f_high_hz=ab.f_high_hz, peak_hz=ab.peak_hz,
                       ripple_frequencies_hz=ripple_frequencies(supply_rejection_hz))
    checks = tuple(run_checks(circuit, ctx, startup=startup))
    if target is None:
        return Judgement(checks, None, ())
    status, shortfalls = analysis.verdict(ab, target, list(checks))
    status, shortfalls = yield_estimate.with_yield(status, shortfalls, yield_est)
    return Judgement(checks, status, tuple(shortfalls))


def with_startup_time(judgement: Judgement, circuit: Circuit, limits: Limits) -> Judgement:
    """A judgement made with ``startup=False`` completed with the start-up transient: equal
    to judging again with ``startup=True`` (a skipped start-up entry has no limit, so the
    status and shortfalls stand), at the cost of the transient alone."""
    checks = tuple(startup_check(circuit, limits)
                   if c.check == "startup_time" and c.detail == STARTUP_SKIPPED else c
                   for c in judgement.checks)
    return replace(judgement, checks=checks)
