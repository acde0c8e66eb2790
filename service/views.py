"""Small helpers shared by the blueprints."""

from flask import Response

from service.jsonout import dumps


def json_response(body, status: int = 200) -> Response:
    """Strict JSON (no NaN/Infinity; non-finite numbers become null)."""
    return Response(dumps(body), status=status, mimetype="application/json")
