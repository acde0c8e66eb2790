"""POST /v1/analyses: analyse a circuit object (e.g. a design's, possibly hand-edited)."""

from flask import Blueprint

from service.errors import get_json_body
from service.pipeline import run_analysis
from service.views import json_response

bp = Blueprint("analyses", __name__, url_prefix="/v1")


@bp.post("/analyses")
def create_analysis():
    """Analyse a circuit: as-built figures, headroom, bias, warnings (status with a target).

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: invalid circuit.
    """
    return json_response(run_analysis(get_json_body()), field="response.points")
