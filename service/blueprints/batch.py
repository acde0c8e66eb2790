"""POST /v1/designs/batch: up to ``MAX_BATCH`` design requests in one call.

Each item is designed exactly as POST /v1/designs would (``service.pipeline.run_design``);
a bad item becomes a problem document in its slot and does not fail the others.
"""

from __future__ import annotations

import json

from flask import Blueprint
from marshmallow import ValidationError

from service.engine.errors import EngineError
from service.errors import (
    ApiProblem,
    engine_problem,
    get_json_body,
    problem_body,
    validation_problem,
)
from service.ops import budget, cost
from service.pipeline import run_design
from service.views import json_response

bp = Blueprint("batch", __name__, url_prefix="/v1")

MAX_BATCH = 100


def _requests_of(body) -> list:
    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object with 'requests'."]})
    unknown = sorted(set(body) - {"requests"})
    if unknown:
        raise ValidationError({key: ["Unknown field."] for key in unknown})
    items = body.get("requests")
    if items is None:
        raise ValidationError({"requests": ["Missing data for required field."]})
    if not isinstance(items, list):
        raise ValidationError({"requests": ["Not a valid list."]})
    if len(items) > MAX_BATCH:
        raise ValidationError({"requests": [f"At most {MAX_BATCH} requests per batch "
                                            f"(got {len(items)})."]})
    return items


def design_one(item) -> dict:
    """One batch slot: ``{"status": 200, "design": ...}`` or ``{"status": 4xx, "problem": ...}``."""
    try:
        return {"status": 200, "design": run_design(item)}
    except ValidationError as err:
        problem = validation_problem(err)
    except EngineError as err:
        problem = engine_problem(err)
    except ApiProblem as err:
        problem = problem_body(err.status, err.title, err.detail, type_=err.type_,
                               errors=err.errors, **err.extensions)
    return {"status": problem["status"], "problem": problem}


def _charge_batch(items: list) -> None:
    """Refuse a batch whose items add up to more than one request may cost or send back,
    before any item is designed (each is then charged again as it runs)."""
    units = reply = 0
    for item in items:
        item_units, item_reply = cost.estimate_item(item)
        units += item_units
        reply += item_reply
    limit = cost.max_reply_bytes()
    if limit is not None and reply > limit:
        raise cost.reply_too_large("requests", reply, limit, estimated=True)
    meter_units = cost.max_units()
    if meter_units is not None and units > meter_units:
        raise cost.too_expensive(
            "requests", f"These {len(items)} requests would cost about {units:,} units ('auto' "
                        f"stages counted as {cost.AUTO_STAGES_BOUND}); a request may use "
                        f"{meter_units:,} (GAINCHAIN_MAX_COST_UNITS). Send fewer items, "
                        "trials or points, or fix the stage counts.")


@bp.post("/designs/batch")
def create_designs():
    """Design up to 100 cascades; results in request order.

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: the body is not
        ``{"requests": [...]}`` or holds more than 100 items.
    """
    items = _requests_of(get_json_body())
    _charge_batch(items)
    # A design is a pure function of its request: an item repeated in the batch is designed
    # once and its result repeated (every item is still charged above).
    results, done = [], {}
    for i, item in enumerate(items):
        key = json.dumps(item, sort_keys=True, separators=(",", ":"))
        if key not in done:
            budget.check(f"batch item {i}")
            done[key] = design_one(item)
        results.append(done[key])
    return json_response({"results": results}, field="requests")
