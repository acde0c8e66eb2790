"""``POST /v1/exports/<kind>``: a design or a circuit as a downloadable file.

Kinds: ``bom.csv``, ``bom.xlsx``, ``netlist.cir`` (SPICE), ``netlist.net`` (KiCad
S-expression netlist), ``netlist.xml`` (KiCad XML generic netlist).

Body: either a design request (as for ``POST /v1/designs``; the service designs first) or
``{"name": optional label, "circuit": <a circuit object>}``. A body with a ``circuit`` key is
taken as the second form.

Export options are query parameters, so the design-request schema stays untouched:

* ``size``: chip size of resistors and ceramic capacitors, ``0603`` (default), ``0805`` or
  ``1206``;
* ``date``: an ISO date (``2026-01-31``) written into the netlists' design header and the
  workbook's document dates; without it no file carries a timestamp.

Answers: the file with ``Content-Disposition: attachment; filename="<safe name>-<kind>"``;
unknown kind -> 404; bad body or option -> the same problem+json errors as /v1/designs.
"""

from __future__ import annotations

import datetime as dt

from flask import Blueprint, Response, request
from marshmallow import ValidationError

from exporters.board import SIZES
from exporters.formats import KINDS, export
from service.engine.model.circuit import Circuit
from service.errors import ApiProblem, get_json_body
from service.ops import budget
from service.parts_library import current_library

bp = Blueprint("exports", __name__)

MAX_NAME_CHARS = 80
MIN_DATE = dt.date(1900, 1, 1)
_CIRCUIT_BODY_KEYS = ("name", "circuit")


@bp.post("/v1/exports/<kind>")
def create_export(kind: str):
    """Export a design (or a circuit) as a BOM, a SPICE deck or a KiCad netlist.

    :raise 404: unknown kind. :raise 400/415: body not JSON. :raise 422: invalid body or option.
    """
    if kind not in KINDS:
        raise ApiProblem(404, "Not Found",
                         f"Unknown export kind {kind!r}; one of: {', '.join(KINDS)}.")
    size, date = _options()
    body = get_json_body()
    if isinstance(body, dict) and "circuit" in body:
        circuit, name, report, tolerances = _from_circuit_body(body)
    else:
        circuit, name, report, tolerances = _from_design_request(body)
    budget.check("before writing the file")
    file = export(kind, circuit, name=name, report=report, size=size, date=date,
                  library=current_library(), **tolerances)
    budget.check("writing the file")  # a file finished past the budget is not sent
    resp = Response(file.data, mimetype=None, content_type=file.mimetype)
    resp.headers["Content-Disposition"] = f'attachment; filename="{file.filename}"'
    return resp


def _options() -> tuple[str, dt.date | None]:
    errors: dict[str, list[str]] = {}
    for key in request.args:
        if key not in ("size", "date"):
            errors[key] = ["Unknown query parameter; allowed: size, date."]
    size = request.args.get("size", "0603")
    if size not in SIZES:
        errors["size"] = [f"Must be one of: {', '.join(SIZES)}."]
    date = None
    raw_date = request.args.get("date")
    if raw_date is not None:
        try:
            date = dt.date.fromisoformat(raw_date)
        except ValueError:
            errors["date"] = ["Not a valid ISO date (YYYY-MM-DD)."]
        else:
            if date < MIN_DATE:
                # Spreadsheet date serials start at 1900-01-01 (ECMA-376 Part 1, 18.17.4):
                # an xlsx cannot hold an earlier date.
                errors["date"] = [f"From {MIN_DATE.isoformat()} on (spreadsheets cannot "
                                  "hold earlier dates)."]
    if errors:
        raise ValidationError({"query": errors})
    return size, date


def _from_circuit_body(body: dict):
    """``{"name", "circuit"}``: validate, then analyse the circuit for the Design sheet."""
    from service.pipeline import run_analysis

    errors: dict = {key: ["Unknown field."] for key in body if key not in _CIRCUIT_BODY_KEYS}
    name = body.get("name")
    if name is not None and not isinstance(name, str):
        errors["name"] = ["Not a valid string."]
    elif name is not None and len(name) > MAX_NAME_CHARS:
        errors["name"] = [f"Longer than maximum length {MAX_NAME_CHARS}."]
    if errors:
        raise ValidationError(errors)
    report = run_analysis({"circuit": body["circuit"]})  # validates the circuit (422)
    return Circuit.from_dict(report.get("circuit") or body["circuit"]), name, report, {}


def _from_design_request(body):
    from service.pipeline import run_design

    design = run_design(body)  # validates; raises ValidationError / EngineError -> 422
    # The BOM states the tolerances the design was judged by (its ``tolerances`` block).
    return Circuit.from_dict(design["circuit"]), body.get("name"), design, {}
