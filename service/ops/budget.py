"""Per-request compute budget (OWASP API4: no single request may hold a worker for long).

Every request gets a wall-clock deadline when it starts (``GAINCHAIN_COMPUTE_BUDGET_S``,
default 10 s). The engine stays free of Flask and of clocks it does not own, so the web
layer hands it a plain callable::

    from service.ops import budget
    design = engine.design(req, check_deadline=budget.checker())

and the engine calls ``check_deadline()`` between candidate cascades, Monte Carlo chunks,
batch items... Once the deadline has passed the call raises :class:`BudgetExceeded`, which
``service.ops`` turns into a 503 problem+json. A view may also call :func:`check` itself.

This is cooperative. gunicorn's worker ``timeout`` (``GAINCHAIN_WORKER_TIMEOUT_S``,
default 30 s, kept well above the budget) is the hard stop for code that never checks.
"""

from __future__ import annotations

import time

_KEY = "gainchain_deadline"


class BudgetExceeded(Exception):
    """The request used up its compute budget."""

    def __init__(self, budget_s: float, where: str | None = None):
        self.budget_s = budget_s
        self.where = where
        super().__init__(f"compute budget of {budget_s:g} s exceeded" +
                         (f" during {where}" if where else ""))


def start(budget_s: float, *, now=time.monotonic) -> None:
    """Open the budget of the current request (called by the ops before_request hook)."""
    from flask import g

    setattr(g, _KEY, (now() + budget_s, budget_s))


def _current():
    from flask import g, has_app_context

    if not has_app_context():
        return None
    return getattr(g, _KEY, None)


def remaining_s(*, now=time.monotonic) -> float:
    """Seconds left in this request's budget (``inf`` outside a request)."""
    state = _current()
    if state is None:
        return float("inf")
    return state[0] - now()


def checker(*, now=time.monotonic):
    """A zero-argument callable the engine can call; it raises once the deadline has passed.

    The callable holds the deadline itself, so it works without Flask (threads, pure code).
    Outside a request it never raises.
    """
    state = _current()
    if state is None:
        return _never
    deadline, budget_s = state

    def check_deadline(where: str | None = None) -> None:
        if now() > deadline:
            raise BudgetExceeded(budget_s, where)

    return check_deadline


def check(where: str | None = None) -> None:
    """Raise :class:`BudgetExceeded` if the current request is past its deadline."""
    checker()(where)


def _never(where: str | None = None) -> None:
    return None
