"""Liveness: cheap, never touches the engine."""

from flask import Blueprint, jsonify

bp = Blueprint("health", __name__)


@bp.get("/healthz")
def healthz():
    """Liveness probe."""
    return jsonify({"status": "ok"})
