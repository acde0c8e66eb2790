"""GET /v1/parts: the stocked-parts library the service matches BOM lines against."""

from flask import Blueprint

from service.parts_library import current_library
from service.views import json_response

bp = Blueprint("parts", __name__, url_prefix="/v1")


@bp.get("/parts")
def list_parts():
    """List the loaded parts library (``{"currency": null, "parts": []}`` without one)."""
    library = current_library()
    if library is None:
        return json_response({"currency": None, "parts": []})
    return json_response(library.to_dict())
