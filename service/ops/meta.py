"""Meta endpoints: /openapi.json, /docs, /readyz, /metrics (/healthz is the health blueprint)."""

from __future__ import annotations

from flask import Blueprint, Response, current_app
from marshmallow import Schema, fields

from service.jsonout import dumps
from service.ops import docs_page, metrics

bp = Blueprint("meta", __name__)

DOCS_CSP = "default-src 'none'; style-src 'unsafe-inline'; frame-ancestors 'none'"


class HealthSchema(Schema):
    """Body of a 200 from /healthz (the health blueprint answers ``{"status": "ok"}``)."""

    status = fields.String(required=True, metadata={"enum": ["ok"]})


class ReadySchema(Schema):
    """Body of a 200 from /readyz."""

    status = fields.String(required=True, metadata={"enum": ["ready"]})
    opamp_count = fields.Integer(required=True,
                                 metadata={"description": "Op-amps in the loaded catalog."})


def _json(doc, status: int = 200) -> Response:
    return Response(dumps(doc), status=status, mimetype="application/json")


@bp.get("/openapi.json")
def openapi_json():
    """This service's OpenAPI 3 description."""
    from service.openapi import get_spec

    return _json(get_spec(current_app))


@bp.get("/docs")
def docs():
    """Human-readable API page rendered from the OpenAPI description (no scripts, no downloads)."""
    from service.openapi import get_spec

    cached = current_app.extensions.get("gainchain_docs_html")
    if cached is None:
        cached = docs_page.render(get_spec(current_app))
        current_app.extensions["gainchain_docs_html"] = cached
    resp = Response(cached, mimetype="text/html")
    resp.headers["Content-Security-Policy"] = DOCS_CSP
    return resp


@bp.get("/readyz")
def readyz():
    """Readiness: 200 once the op-amp catalog is loaded, else 503 problem+json."""
    from service.errors import ApiProblem

    catalog = current_app.extensions.get("gainchain_catalog")
    if not catalog:
        raise ApiProblem(503, "Not ready", "The op-amp catalog is not loaded.",
                         type_="not-ready")
    return _json(ReadySchema().dump({"status": "ready", "opamp_count": len(catalog)}))


@bp.get("/metrics")
def prometheus_metrics():
    """Prometheus text exposition (all gunicorn workers when PROMETHEUS_MULTIPROC_DIR is set)."""
    return Response(metrics.render_latest(), mimetype=None,
                    headers={"Content-Type": metrics.CONTENT_TYPE})
