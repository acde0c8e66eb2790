"""From a request body to a JSON-ready response dict: validation, engine, report.

Used by the blueprints, the batch endpoint and the exporters' endpoint alike, so that every
path validates and computes the same way. Raises ``marshmallow.ValidationError`` or
``EngineError`` for bad input (mapped to 422 problem+json by ``service.errors``) and
``ApiProblem`` for a strict design that misses its target.
"""

from __future__ import annotations

import time
from dataclasses import replace

from marshmallow import ValidationError

from schemas.opamp import swing_window_error
from schemas.request import AnalysisRequestSchema, DesignRequestSchema, limits_of
from service.engine import report
from service.engine.judge import extras
from service.engine.model.circuit import Circuit, DesignRequest
from service.engine.model.identity import design_id
from service.engine.model.parts import Tolerances, tolerances_of
from service.engine.synthesis import design as design_mod
from service.errors import ApiProblem

_DESIGN_SCHEMA = DesignRequestSchema()
_ANALYSIS_SCHEMA = AnalysisRequestSchema()


def _catalog(catalog):
    if catalog is not None:
        return catalog
    from service.catalog_state import current_catalog

    return current_catalog()


def _library(library=False):
    """The app's parts library (None without one, or outside an app); ``library`` if given."""
    if library is not False:
        return library
    from flask import has_app_context

    if not has_app_context():
        return None
    from service.parts_library import current_library

    return current_library()


def _stocked_components(components, library):
    """``components.stocked_only``: restrict the synthesis to the library's values (resistors
    at the request's tolerance or tighter; capacitors of any tolerance, since the board picks
    their class and tolerance from the value)."""
    if not components.stocked_only:
        return components
    if library is None:
        raise ValidationError({"components": {"stocked_only": [
            "No parts library is loaded (GAINCHAIN_PARTS_LIBRARY); GET /v1/parts lists it."]}})
    r_values = library.values("resistor", max_tolerance_pct=components.resistor_tolerance_pct)
    c_values = library.values("capacitor")
    errors = {}
    if not r_values:
        errors["resistor"] = (f"no stocked resistor at {components.resistor_tolerance_pct:g} % "
                              "or tighter")
    if not c_values:
        errors["capacitor"] = "no stocked capacitor"
    if errors:
        raise ValidationError({"components": {"stocked_only": [
            "The parts library has " + " and ".join(errors.values()) + "."]}})
    return replace(components, resistor_values=r_values, capacitor_values=c_values)


def load_design_request(body, catalog=None, library=False) -> tuple[DesignRequest, dict]:
    """Validate a design request body; returns the engine request and the options dict."""
    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object."]})
    data = _DESIGN_SCHEMA.load(body)
    components = data["components"][0]  # (Components, its limit fields: see limits_of)
    components = _stocked_components(components, _library(library))
    opamp = data["opamp"]
    if isinstance(opamp, str):
        found = _catalog(catalog).get(opamp)
        if found is None:
            raise ValidationError({"opamp": [f"Unknown catalog id {opamp!r}; GET /v1/opamps "
                                             "lists the catalog."]})
        opamp = found
    swing = swing_window_error(opamp.swing_to_pos_v, opamp.swing_to_neg_v,
                               data["supply"][0].span_v, "the requested supply span")
    if swing:
        where = [swing] if isinstance(data["opamp"], str) else {"swing_to_pos_v": [swing]}
        raise ValidationError({"opamp": where})
    req = DesignRequest(target=data["target"], supply=data["supply"][0], opamp=opamp,
                        signal=data["signal"][0], topology=data["topology"],
                        stages=data["stages"], components=components,
                        strict=data["strict"], name=data.get("name"), limits=limits_of(data),
                        supply_rejection_hz=data.get("supply_rejection_hz"),
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
        # The design is already the best one for the request: with a fixed ``stages``, that
        # count; in auto mode the best of the stage counts tried (design.best_of).
        best_body = _design_body(result, options)
        raise ApiProblem(
            422, "Target not met",
            "No cascade of this op-amp meets the target and passes every build check; "
            "'best_design' holds the best design found.",
            type_="target-not-met", shortfalls=best_body["shortfalls"], best_design=best_body)
    out = _design_body(result, options)
    _observe(time.perf_counter() - started)
    return out


def _charge(n_stages: int, options: dict, what: str) -> None:
    """Count this design's (or analysis') cost and reply size before its analyses run
    (:mod:`service.ops.cost`; 422 naming the costliest option when it is too much)."""
    from service.ops import cost

    trials = int((options.get("tolerance") or {}).get("trials") or 0)
    points = int((options.get("response") or {}).get("points") or 0)
    cost.charge(cost.design_units(n_stages, trials=trials, points=points),
                reply=cost.design_reply_bytes(n_stages, points=points),
                field=cost.costliest_field(n_stages, trials=trials, points=points),
                what=f"{what} with {n_stages} stages, {trials} Monte Carlo trials and "
                     f"{points} response points")


def _design_body(result: design_mod.Design, options: dict) -> dict:
    circuit = result.synthesis.circuit
    _charge(circuit.n_stages, options, "This design")
    out = report.design_block(result)
    out.update(extras.extra_blocks(
        circuit, target=result.request.target, input_peak_v=result.request.signal.input_peak_v,
        as_built=out["performance"]["as_built"], options=options, check_deadline=_deadline()))
    out = _with_identity(out, circuit)
    out["bom_cost"] = _stock_report(out, circuit, result.request)
    return out


def _with_identity(out: dict, circuit: Circuit) -> dict:
    """``design_id`` right after ``name`` (the identity of ``service.engine.model.identity``)."""
    head = {"name": out.pop("name", None), "design_id": design_id(circuit)}
    return {**head, **out}


def board_of(circuit: Circuit, req: DesignRequest):
    """The board the exports draw for this design at their defaults (size 0603, the
    request's tolerances)."""
    from exporters.board import build_board

    comp = req.components
    return build_board(circuit, name=req.name or "",
                       resistor_tolerance_pct=comp.resistor_tolerance_pct,
                       capacitor_tolerance_pct=comp.capacitor_tolerance_pct)


def _stock_report(out: dict, circuit: Circuit, req: DesignRequest):
    """``bom_cost`` of the design's board (null without a library); a warning names the
    resistor and capacitor lines the library does not stock."""
    library = _library()
    if library is None:
        return None
    from exporters.bom import bom_cost, unstocked_references

    board = board_of(circuit, req)
    missing = unstocked_references(board, library)
    if missing:
        out["warnings"].append({"code": "unstocked_parts", "message": (
            "No stocked part (GAINCHAIN_PARTS_LIBRARY) matches the BOM line(s) "
            + "; ".join(missing) + " (matched on kind, value, package, dielectric, tolerance "
            "and voltage rating at the default size 0603).")})
    return bom_cost(board, library)


def run_analysis(body) -> dict:
    """Analyse a (possibly hand-edited) circuit: as_built, headroom, bias, warnings, and
    status/shortfalls when a target is given; plus the analyses blocks."""
    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object."]})
    data = _ANALYSIS_SCHEMA.load(body)
    circuit: Circuit = data["circuit"]
    target = data.get("target")
    options = _options(data, data["tolerances"])
    _charge(circuit.n_stages, options, "This analysis")
    out = {"name": data.get("name"), "design_id": design_id(circuit)}
    out.update(report.analysis_block(circuit, target=target, input_peak_v=data["input_peak_v"],
                                     limits=data["limits"],
                                     supply_rejection_hz=data.get("supply_rejection_hz"),
                                     tolerances=data["tolerances"]))
    out["tolerances"] = data["tolerances"].to_dict()
    out.update(extras.extra_blocks(circuit, target=target, input_peak_v=data["input_peak_v"],
                                   as_built=out["performance"]["as_built"], options=options,
                                   check_deadline=_deadline()))
    return out

