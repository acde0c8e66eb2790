"""POST /v1/explorations: a design request tried across op-amps and stage counts."""

from flask import Blueprint

from service.errors import get_json_body
from service.explorations import explore
from service.views import json_response

bp = Blueprint("explorations", __name__, url_prefix="/v1")


@bp.post("/explorations")
def create_exploration():
    """Try a design request with every op-amp (or the listed ones) and stage count.

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: invalid request.
    :raise 503: the compute budget ran out.
    """
    return json_response(explore(get_json_body()))
