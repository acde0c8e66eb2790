"""Request cost and reply size: estimated before the work, refused with a 422 naming the
field that makes a request too expensive (OWASP API4: unrestricted resource consumption).

The compute budget (:mod:`service.ops.budget`) stops a request that runs long; this module
keeps requests from being accepted in the first place when they cannot finish quickly, so
that a few of them cannot hold every worker for the whole budget.

Cost is counted in *units*; one unit is one Monte Carlo trial through one stage-sized
block of the circuit, about 6.5 us on one core of the 2-core build machine (measured
through the app's tolerance Monte Carlo: 12 stages x 30,000 trials in 2.6 s, 2 stages x
100,000 trials in 2.7 s; ``make bench`` prints today's per-trial figures). A request may
use at most ``GAINCHAIN_MAX_COST_UNITS`` units
(default :data:`DEFAULT_MAX_COST_UNITS`, about two seconds on one core):

* a design or an analysis: :data:`DESIGN_UNITS` (the synthesis and the fixed analyses),
  plus ``trials x (stages + 2)`` for a Monte Carlo (the 200-frequency grid and the bias
  network make the +2), plus ``points x (stages + 1) / 10`` for response curves;
* a batch: the sum over its items, an ``"auto"`` stage count counted as 12 (the items are
  checked before any is designed);
* a plot: its design plus ``width_px x height_px / 100`` (a 4000 x 4000 PNG is about one
  second to draw).

The reply is estimated the same way (:func:`reply_bytes`) and refused past
``GAINCHAIN_MAX_REPLY_BYTES``; the real reply is checked again when it is written
(:mod:`service.views`), so no request can make the service hold a huge reply in memory.

Outside a Flask request nothing is limited (the engine's tests and benchmarks call the
pipeline directly).
"""

from __future__ import annotations

from service.errors import ApiProblem

DEFAULT_MAX_COST_UNITS = 300_000
DEFAULT_MAX_REPLY_BYTES = 8 * 1024 * 1024
#: Synthesis, as-built analysis, noise and supply blocks of one design (about 10 ms).
DESIGN_UNITS = 1_500
#: Stage count assumed for ``"auto"`` when a batch is estimated before any design is made.
AUTO_STAGES_BOUND = 12
#: Pixels per unit when a plot is drawn (matplotlib's Agg, measured: 16 Mpx in about 1 s).
PIXELS_PER_UNIT = 100
#: Reply bytes: a design without curves is 15-25 KB; each curve point is a frequency, a gain
#: and a phase per stage and for the cascade, about 22 bytes per number in JSON.
DESIGN_REPLY_BYTES = 32 * 1024
BYTES_PER_NUMBER = 22

_KEY = "gainchain_cost"


def start(max_units: int, max_reply_bytes: int) -> None:
    """Open the meter of the current request (called by the ops before_request hook)."""
    from flask import g

    setattr(g, _KEY, {"units": 0, "max_units": int(max_units), "reply": 0,
                      "max_reply": int(max_reply_bytes)})


def _meter():
    from flask import g, has_app_context

    if not has_app_context():
        return None
    return getattr(g, _KEY, None)


def max_units() -> int | None:
    meter = _meter()
    return None if meter is None else meter["max_units"]


def max_reply_bytes() -> int | None:
    meter = _meter()
    return None if meter is None else meter["max_reply"]


def design_units(stages: int, *, trials: int = 0, points: int = 0) -> int:
    """Cost units of one design or analysis (see the module docstring)."""
    stages = max(int(stages), 1)
    return DESIGN_UNITS + int(trials) * (stages + 2) + int(points) * (stages + 1) // 10


def design_reply_bytes(stages: int, *, points: int = 0) -> int:
    """Upper estimate of one design's JSON size: the fixed blocks plus the curves."""
    stages = max(int(stages), 1)
    return DESIGN_REPLY_BYTES + int(points) * (2 * (stages + 1) + 1) * BYTES_PER_NUMBER


def plot_units(width_px: int, height_px: int) -> int:
    return int(width_px) * int(height_px) // PIXELS_PER_UNIT


def charge(units: int, *, field: str, what: str, reply: int = 0) -> None:
    """Add ``units`` (and ``reply`` bytes) to the request's meter.

    :raise ApiProblem 422: the request would pass ``GAINCHAIN_MAX_COST_UNITS`` or
        ``GAINCHAIN_MAX_REPLY_BYTES``; ``errors`` names ``field``.
    """
    meter = _meter()
    if meter is None:
        return
    meter["units"] += int(units)
    meter["reply"] += int(reply)
    if meter["units"] > meter["max_units"]:
        raise too_expensive(field, f"{what} would cost about {meter['units']:,} units; "
                                   f"a request may use {meter['max_units']:,} "
                                   "(GAINCHAIN_MAX_COST_UNITS, about two seconds of one core).")
    if meter["reply"] > meter["max_reply"]:
        raise reply_too_large(field, meter["reply"], meter["max_reply"], estimated=True)


def too_expensive(field: str, message: str) -> ApiProblem:
    return ApiProblem(422, "Request too expensive", message + " Ask for less (see 'errors').",
                      type_="request-too-expensive", errors=_nest(field, [message]))


def reply_too_large(field: str, size: int, limit: int, *, estimated: bool) -> ApiProblem:
    message = (f"The reply would be {'about ' if estimated else ''}{size:,} bytes; at most "
               f"{limit:,} are sent (GAINCHAIN_MAX_REPLY_BYTES).")
    return ApiProblem(422, "Reply too large", message + " Ask for fewer points or items.",
                      type_="reply-too-large", errors=_nest(field, [message]))


def _nest(path: str, messages: list[str]) -> dict:
    node: dict = {}
    cursor = node
    parts = path.split(".")
    for part in parts[:-1]:
        cursor = cursor.setdefault(part, {})
    cursor[parts[-1]] = messages
    return node


def _int_or(value, default: int) -> int:
    return value if isinstance(value, int) and not isinstance(value, bool) else default


def estimate_item(item) -> tuple[int, int]:
    """(units, reply bytes) of a raw design request before validation (a batch item; a
    malformed one is costed at its defaults and refused when it is validated)."""
    if not isinstance(item, dict):
        return DESIGN_UNITS, DESIGN_REPLY_BYTES
    stages = _int_or(item.get("stages"), AUTO_STAGES_BOUND)
    stages = min(max(stages, 1), AUTO_STAGES_BOUND)
    tolerance = item.get("tolerance")
    trials = _int_or(tolerance.get("trials"), 2000) if isinstance(tolerance, dict) else 0
    response = item.get("response")
    points = _int_or(response.get("points"), 200) if isinstance(response, dict) else 0
    trials, points = max(trials, 0), max(points, 0)
    return (design_units(stages, trials=trials, points=points),
            design_reply_bytes(stages, points=points))


def costliest_field(stages: int, *, trials: int, points: int) -> str:
    """The option that weighs most in :func:`design_units` (named in a refusal)."""
    if trials and trials * (stages + 2) >= points * (stages + 1) // 10:
        return "tolerance.trials"
    return "response.points" if points else "stages"
