"""POST /v1/designs: a design request in, a complete design out."""

from flask import Blueprint

from service.errors import get_json_body
from service.pipeline import run_design
from service.views import json_response

bp = Blueprint("designs", __name__, url_prefix="/v1")


@bp.post("/designs")
def create_design():
    """Design a cascade for a target.

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: invalid request, or a
        strict design that misses its target (with ``best_design``).
    """
    return json_response(run_design(get_json_body()), field="response.points")
