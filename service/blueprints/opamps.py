"""The op-amp catalog."""

from flask import Blueprint

from service.catalog_state import current_catalog
from service.errors import ApiProblem
from service.views import json_response

bp = Blueprint("opamps", __name__, url_prefix="/v1/opamps")


@bp.get("")
def list_opamps():
    """List the op-amp catalog (built-in archetypes and approved parts)."""
    catalog = current_catalog()
    return json_response({"opamps": [catalog[k].to_dict() for k in sorted(catalog)]})


@bp.get("/<opamp_id>")
def get_opamp(opamp_id: str):
    """One catalog entry.

    :raise 404: no entry with that id.
    """
    found = current_catalog().get(opamp_id)
    if found is None:
        raise ApiProblem(404, "Not Found", f"No op-amp {opamp_id!r} in the catalog.")
    return json_response(found.to_dict())
