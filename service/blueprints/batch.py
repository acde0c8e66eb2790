"""Placeholder: filled in by the analyses work (POST /v1/designs/batch)."""

from flask import Blueprint

bp = Blueprint("batch", __name__)
