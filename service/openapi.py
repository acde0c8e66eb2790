"""The OpenAPI 3 description of this service, built from the marshmallow schemas.

Every operation is one :class:`Operation` row in :data:`OPERATIONS` (path, method, summary,
request schema, success media types and schemas, error statuses); adding an endpoint is
adding a row. Schemas are named as ``"module:Class"`` strings and imported when the spec
is built, so this table can be read without importing the whole app.

Only rows whose route exists in the app are published, and :func:`undocumented_routes`
lists app routes that have no row (a test keeps that list empty). Every error status is
documented as ``application/problem+json`` with the problem schema, the one that also
dumps the bodies. The spec is built once per app (:func:`get_spec`) and cached in
``app.extensions``.
"""

from __future__ import annotations

import copy
import importlib
from dataclasses import dataclass, field

from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin

OPENAPI_VERSION = "3.0.3"
PROBLEM_MEDIA = "application/problem+json"
PROBLEM_SCHEMA = "schemas.problem:ProblemSchema"
UNDOCUMENTED = frozenset({"/docs", "/static/<path:filename>"})
_IGNORED_METHODS = frozenset({"HEAD", "OPTIONS"})

JSON = "application/json"
CSV = "text/csv"
XLSX = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
TEXT = "text/plain"
XML = "application/xml"
SVG = "image/svg+xml"
PNG = "image/png"
METRICS_TEXT = "text/plain"  # Prometheus text exposition format

# A literal JSON Schema (dict) may stand in for a marshmallow schema (files, free text).
BINARY = {"type": "string", "format": "binary"}
TEXT_BODY = {"type": "string"}
ANY_OBJECT = {"type": "object", "additionalProperties": True}

# Titles of the statuses we document (RFC 9110 names; 413 "Content Too Large").
_STATUS_TEXT = {
    400: "Malformed JSON body.",
    401: "Missing or invalid API key (only when API keys are configured).",
    404: "No such resource.",
    405: "Method not allowed; the Allow header lists the allowed ones.",
    413: "Request body larger than GAINCHAIN_MAX_BODY_BYTES.",
    415: "Body is not application/json.",
    422: "Validation failed; 'errors' maps each field to its messages.",
    500: "Unexpected failure (logged; no details are returned).",
    503: "Not ready, or the request exceeded its compute budget.",
}

# Statuses every operation may answer with, and those of operations that take a JSON body.
COMMON_ERRORS = (500,)
BODY_ERRORS = (400, 413, 415, 422)
COMPUTE_ERRORS = BODY_ERRORS + (503,)


@dataclass(frozen=True)
class Operation:
    """One documented operation. ``path`` is the Flask rule, e.g. ``/v1/opamps/<opamp_id>``.

    ``responses`` maps a success status to ``{media type: schema}`` where a schema is a
    ``"module:Class"`` string, a marshmallow schema class or a literal JSON Schema dict.
    """

    path: str
    method: str
    summary: str
    tag: str
    responses: dict
    request: str | dict | None = None
    errors: tuple[int, ...] = ()
    description: str = ""
    public: bool = False  # True: never needs an API key (probes, metrics, the spec)
    parameters: dict = field(default_factory=dict)  # extra docs per path parameter


OPERATIONS: tuple[Operation, ...] = (
    Operation("/healthz", "GET", "Liveness probe: the process answers.", "meta",
              {200: {JSON: "schemas.response:HealthSchema"}}, public=True),
    Operation("/readyz", "GET", "Readiness probe: the op-amp catalog is loaded.", "meta",
              {200: {JSON: "service.ops.meta:ReadySchema"}}, errors=(503,), public=True),
    Operation("/metrics", "GET", "Prometheus metrics (text exposition format).", "meta",
              {200: {METRICS_TEXT: TEXT_BODY}}, public=True),
    Operation("/openapi.json", "GET", "This OpenAPI 3 description.", "meta",
              {200: {JSON: ANY_OBJECT}}, public=True),
    Operation("/v1/opamps", "GET", "List the op-amp catalog.", "opamps",
              {200: {JSON: "schemas.response:OpampListSchema"}}),
    Operation("/v1/opamps/<opamp_id>", "GET", "One op-amp of the catalog.", "opamps",
              {200: {JSON: "schemas.circuit:OpampSchema"}}, errors=(404,),
              parameters={"opamp_id": "Catalog id (see GET /v1/opamps)."}),
    Operation("/v1/designs", "POST", "Design a cascade of gain stages for a target.", "designs",
              {200: {JSON: "schemas.response:DesignResponseSchema"}},
              request="schemas.request:DesignRequestSchema", errors=COMPUTE_ERRORS),
    Operation("/v1/designs/batch", "POST", "Design up to 100 targets in one call.", "designs",
              {200: {JSON: "schemas.response:BatchResponseSchema"}},
              request="schemas.request:BatchRequestSchema", errors=COMPUTE_ERRORS),
    Operation("/v1/analyses", "POST", "Analyse a (possibly hand-edited) circuit.", "analyses",
              {200: {JSON: "schemas.response:AnalysisResponseSchema"}},
              request="schemas.request:AnalysisRequestSchema", errors=COMPUTE_ERRORS),
    Operation("/v1/exports/<format>", "POST", "Export a design or circuit as a file.", "exports",
              {200: {CSV: TEXT_BODY, XLSX: BINARY, TEXT: TEXT_BODY, XML: TEXT_BODY}},
              request="schemas.request:ExportRequestSchema", errors=COMPUTE_ERRORS + (404,)),
    Operation("/v1/plots/bode.svg", "POST", "Bode plot of a circuit as SVG.", "plots",
              {200: {SVG: TEXT_BODY}}, request="schemas.request:PlotRequestSchema",
              errors=COMPUTE_ERRORS),
    Operation("/v1/plots/bode.png", "POST", "Bode plot of a circuit as PNG.", "plots",
              {200: {PNG: BINARY}}, request="schemas.request:PlotRequestSchema",
              errors=COMPUTE_ERRORS),
)

INFO_DESCRIPTION = """\
Stateless JSON service that designs cascades of capacitively coupled op-amp gain stages.

Errors are RFC 9457 problem details (application/problem+json). Limits: request body at most
GAINCHAIN_MAX_BODY_BYTES (default 262144 bytes, 413); at most 12 stages, 2000 response points,
100000 Monte Carlo trials and 100 batch items (422); a compute budget per request
(GAINCHAIN_COMPUTE_BUDGET_S, default 10 s, 503). A design aid: prototype and measure.
"""


def openapi_path(rule: str) -> str:
    """Flask rule -> OpenAPI path: ``/v1/opamps/<string:opamp_id>`` -> ``/v1/opamps/{opamp_id}``."""
    out, i = [], 0
    while i < len(rule):
        if rule[i] == "<":
            end = rule.index(">", i)
            name = rule[i + 1:end].rsplit(":", 1)[-1]
            out.append("{" + name + "}")
            i = end + 1
        else:
            out.append(rule[i])
            i += 1
    return "".join(out)


def _resolve(ref):
    if isinstance(ref, str) and ":" in ref:
        module_name, _, attr = ref.partition(":")
        return getattr(importlib.import_module(module_name), attr)
    return ref


def _schema_entry(ref):
    resolved = _resolve(ref)
    return copy.deepcopy(resolved) if isinstance(resolved, dict) else resolved


def _app_routes(app) -> dict[str, object]:
    return {rule.rule: rule for rule in app.url_map.iter_rules()}


def _rule_methods(rule) -> set[str]:
    return set(rule.methods or ()) - _IGNORED_METHODS


def undocumented_routes(app) -> list[tuple[str, str]]:
    """(rule, method) pairs the app serves but :data:`OPERATIONS` does not describe."""
    documented = {(op.path, op.method) for op in OPERATIONS}
    missing = []
    for rule in app.url_map.iter_rules():
        if rule.rule in UNDOCUMENTED:
            continue
        for method in sorted(_rule_methods(rule)):
            if (rule.rule, method) not in documented:
                missing.append((rule.rule, method))
    return sorted(missing)


def _path_parameters(rule, op: Operation) -> list[dict]:
    params = []
    for name, converter in getattr(rule, "_converters", {}).items():
        schema: dict = {"type": "string"}
        items = getattr(converter, "items", None)
        kind = type(converter).__name__
        if items:
            schema = {"type": "string", "enum": sorted(items)}
        elif kind == "IntegerConverter":
            schema = {"type": "integer"}
        elif kind == "UnicodeConverter":
            schema = {"type": "string", "pattern": "^[^/]+$", "minLength": 1}
        param = {"name": name, "in": "path", "required": True, "schema": schema}
        if name in op.parameters:
            param["description"] = op.parameters[name]
        params.append(param)
    return params


def _problem_response(status: int) -> dict:
    return {"description": _STATUS_TEXT.get(status, "Error."),
            "content": {PROBLEM_MEDIA: {"schema": _schema_entry(PROBLEM_SCHEMA)}}}


def build_spec(app) -> dict:
    """Build the OpenAPI document for the routes ``app`` serves (see :data:`OPERATIONS`)."""
    auth_enabled = bool(app.extensions.get("gainchain_ops", {}).get("auth_enabled"))
    spec = APISpec(
        title="gainchain",
        version=_version(),
        openapi_version=OPENAPI_VERSION,
        plugins=[MarshmallowPlugin()],
        info={"description": INFO_DESCRIPTION},
    )
    spec.components.security_scheme(
        "bearerAuth", {"type": "http", "scheme": "bearer",
                       "description": "API key (GAINCHAIN_API_KEYS / GAINCHAIN_API_KEYS_FILE)."})
    routes = _app_routes(app)
    by_path: dict[str, dict] = {}
    for op in OPERATIONS:
        rule = routes.get(op.path)
        if rule is None or op.method not in _rule_methods(rule):
            continue
        operation: dict = {"summary": op.summary, "tags": [op.tag],
                           "operationId": _operation_id(op)}
        if op.description:
            operation["description"] = op.description
        params = _path_parameters(rule, op)
        if params:
            operation["parameters"] = params
        if op.request is not None:
            operation["requestBody"] = {
                "required": True,
                "content": {JSON: {"schema": _schema_entry(op.request)}},
            }
        responses = {}
        for status, media in op.responses.items():
            responses[str(status)] = {
                "description": "Success.",
                "content": {mt: {"schema": _schema_entry(ref)} for mt, ref in media.items()},
            }
        errors = set(op.errors) | set(COMMON_ERRORS)
        if auth_enabled and not op.public:
            errors.add(401)
            operation["security"] = [{"bearerAuth": []}]
        for status in sorted(errors):
            responses[str(status)] = _problem_response(status)
        operation["responses"] = responses
        by_path.setdefault(op.path, {})[op.method.lower()] = operation
    for path, operations in by_path.items():
        spec.path(path=openapi_path(path), operations=operations)
    return spec.to_dict()


def _operation_id(op: Operation) -> str:
    words = openapi_path(op.path).replace("{", "").replace("}", "")
    for ch in "/.-":
        words = words.replace(ch, "_")
    return op.method.lower() + "_" + "_".join(w for w in words.split("_") if w)


def _version() -> str:
    try:
        from importlib.metadata import version

        return version("gainchain")
    except Exception:  # not installed (running from a source tree)
        return "0.0.0"


def get_spec(app) -> dict:
    """The app's OpenAPI document, built on first use and cached for the app's lifetime."""
    cached = app.extensions.get("gainchain_openapi")
    if cached is None:
        cached = build_spec(app)
        app.extensions["gainchain_openapi"] = cached
    return cached
