"""From a request body to a JSON-ready response dict: validation, engine, report.

Used by the blueprints, the batch endpoint and the exporters' endpoint alike, so that every
path validates and computes the same way. Raises ``marshmallow.ValidationError`` or
``EngineError`` for bad input (mapped to 422 problem+json by ``service.errors``) and
``ApiProblem`` for a strict design that misses its target.
"""

from __future__ import annotations

import time

from marshmallow import ValidationError

from schemas.request import AnalysisRequestSchema, DesignRequestSchema, limits_of
from service.engine.synthesis import design as design_mod
from service.engine.judge import extras
from service.engine import report
from service.engine.model.circuit import Circuit, DesignRequest
from service.engine.model.parts import Tolerances, tolerances_of
from service.errors import ApiProblem

_DESIGN_SCHEMA = DesignRequestSchema()
_ANALYSIS_SCHEMA = AnalysisRequestSchema()


def _catalog(catalog):
    if catalog is not None:
        return catalog
    from service.catalog_state import current_catalog

    return current_catalog()


def load_design_request(body, catalog=None) -> tuple[DesignRequest, dict]:
    """Validate a design request body; returns the engine request and the options dict."""
    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object."]})
    data = _DESIGN_SCHEMA.load(body)
    opamp = data["opamp"]
    if isinstance(opamp, str):
        found = _catalog(catalog).get(opamp)
        if found is None:
            raise ValidationError({"opamp": [f"Unknown catalog id {opamp!r}; GET /v1/opamps "
                                             "lists the catalog."]})
        opamp = found
    req = DesignRequest(target=data["target"], supply=data["supply"][0], opamp=opamp,
                        signal=data["signal"][0], topology=data["topology"],
                        stages=data["stages"], components=data["components"][0],
                        strict=data["strict"], name=data.get("name"), limits=limits_of(data),
                        gain_split=data["gain_split"])
    options = _options(data, tolerances_of(req.components))
    return req, options


def _options(data: dict, tolerances: Tolerances) -> dict:
    """Analyses options; the Monte Carlo takes every tolerance its block leaves out from the
    request's normalised ``tolerances`` (one source of truth with the BOM)."""
    out = {"temperature_k": data.get("temperature_k", 300.0), "tolerances": tolerances}
    for key in ("tolerance", "response", "supply_rejection_hz"):
        if data.get(key) is not None:
            out[key] = data[key]
    if "tolerance" in out:
        tol = dict(out["tolerance"])
        for key, value in tolerances.to_dict().items():
            if tol.get(key) is None:
                tol[key] = value
        out["tolerance"] = tol
    return out


def _deadline():
    """The compute-budget checker of the current request (never raises outside one)."""
    from service.ops import budget

    return budget.checker()


def _observe(seconds: float) -> None:
    from service.ops.metrics import observe_design_seconds

    observe_design_seconds(seconds)


def run_design(body, catalog=None) -> dict:
    """Design from a request body: the JSON-ready design response.

    :raise ValidationError: the body breaks the schema (422).
    :raise EngineError: the engine refuses the request (422).
    :raise ApiProblem: ``strict`` is true and the target is not met (422, with
        ``best_design``).
    """
    req, options = load_design_request(body, catalog)
    started = time.perf_counter()
    check = _deadline()
    result = design_mod.design(req, check_deadline=check)
    if req.strict and result.status != "meets_target":
        best = design_mod.best_design(req, check_deadline=check)
        best_body = _design_body(best, options)
        raise ApiProblem(
            422, "Target not met",
            "No cascade of this op-amp meets the target; 'best_design' holds the stage count "
            "with the highest as-built f_high.",
            type_="target-not-met", shortfalls=best_body["shortfalls"], best_design=best_body)
    out = _design_body(result, options)
    _observe(time.perf_counter() - started)
    return out


def _design_body(result: design_mod.Design, options: dict) -> dict:
    out = report.design_block(result)
    circuit = result.synthesis.circuit
    out.update(extras.extra_blocks(
        circuit, target=result.request.target, input_peak_v=result.request.signal.input_peak_v,
        as_built=out["performance"]["as_built"], options=options, check_deadline=_deadline()))
    return out


def run_analysis(body) -> dict:
    """Analyse a (possibly hand-edited) circuit: as_built, headroom, bias, warnings, and
    status/shortfalls when a target is given; plus the analyses blocks."""
    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object."]})
    data = _ANALYSIS_SCHEMA.load(body)
    circuit: Circuit = data["circuit"]
    target = data.get("target")
    out = {"name": data.get("name")}
    out.update(report.analysis_block(circuit, target=target, input_peak_v=data["input_peak_v"],
                                     tolerances=data["tolerances"]))
    out["tolerances"] = data["tolerances"].to_dict()
    options = _options(data, data["tolerances"])
    out.update(extras.extra_blocks(circuit, target=target, input_peak_v=data["input_peak_v"],
                                   as_built=out["performance"]["as_built"], options=options,
                                   check_deadline=_deadline()))
    return out

