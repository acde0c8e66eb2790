"""CORS allow-list for browser-based portals (``GAINCHAIN_CORS_ORIGINS``).

Only origins on the list (exact ``scheme://host[:port]`` match) get CORS headers; any
other origin gets none, so the browser blocks the read. No cookies are used, so
``Access-Control-Allow-Credentials`` is never sent. A preflight from an allowed origin is
answered here with 204 (before authentication: browsers send preflights without the
Authorization header).
"""

from __future__ import annotations

from flask import Response

ALLOW_HEADERS = "Authorization, Content-Type, X-Request-ID"
EXPOSE_HEADERS = "X-Request-ID, Content-Disposition"
ALLOW_METHODS = "GET, POST, OPTIONS"
MAX_AGE_S = 600


def is_preflight(request) -> bool:
    return (request.method == "OPTIONS" and "Origin" in request.headers
            and "Access-Control-Request-Method" in request.headers)


def allowed_origin(request, allowed: frozenset[str]) -> str | None:
    origin = request.headers.get("Origin")
    if origin and origin in allowed:
        return origin
    return None


def preflight_response(origin: str) -> Response:
    resp = Response(status=204)
    resp.headers["Access-Control-Allow-Origin"] = origin
    resp.headers["Access-Control-Allow-Methods"] = ALLOW_METHODS
    resp.headers["Access-Control-Allow-Headers"] = ALLOW_HEADERS
    resp.headers["Access-Control-Max-Age"] = str(MAX_AGE_S)
    return resp


def decorate(response: Response, request, allowed: frozenset[str]) -> None:
    """Add CORS headers to an actual (non-preflight) response for an allowed origin."""
    if not allowed:
        return
    response.vary.add("Origin")
    origin = allowed_origin(request, allowed)
    if origin and "Access-Control-Allow-Origin" not in response.headers:
        response.headers["Access-Control-Allow-Origin"] = origin
        response.headers["Access-Control-Expose-Headers"] = EXPOSE_HEADERS
