"""Placeholder: filled in by the plots work."""

from flask import Blueprint

bp = Blueprint("plots", __name__)
