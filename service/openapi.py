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

import importlib
import re
from dataclasses import dataclass, field

from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin
from marshmallow import Schema, fields
from marshmallow.validate import Length

from service.examples import README_EXAMPLE

OPENAPI_VERSION = "3.0.3"
PROBLEM_MEDIA = "application/problem+json"
# The lead's problem schema when it exists, else ours (below), which describes
# service.errors.problem_body exactly.
PROBLEM_SCHEMA = "schemas.problem:ProblemSchema"
PROBLEM_SCHEMA_FALLBACK = "service.openapi:ProblemDocSchema"
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
    400: "Malformed request: a JSON body that cannot be read (syntax, duplicate keys, lone "
         "surrogates, nesting deeper than 32), or a request line or header the front or the "
         "server cannot read.",
    401: "Missing or invalid API key (answered when API keys are configured; documented "
         "whatever the configuration).",
    404: "No such resource.",
    405: "Method not allowed; the Allow header lists the allowed ones.",
    413: "Request body larger than GAINCHAIN_MAX_BODY_BYTES.",
    414: "Request line longer than 4 KiB (answered by the front, or by the server).",
    415: "Body is not application/json in UTF-8.",
    422: "Validation failed, or the request is too expensive or its reply too large; "
         "'errors' maps each field to its messages.",
    429: "Too many requests from this client, or too many in flight (answered by the front; "
         "Retry-After says when to retry).",
    431: "A header line longer than 4 KiB or headers over 16 KiB (answered by the front, or "
         "by the server).",
    500: "Unexpected failure (logged; no details are returned).",
    503: "Not ready, or the request exceeded its compute budget.",
}

# Statuses every operation may answer with (the front's and the server's own refusals of a
# request they cannot read included: problem+json like the app's), those of every /v1
# operation whatever the configuration (API keys, the front's per-client limits), and those
# of operations that take a JSON body.
COMMON_ERRORS = (400, 414, 431, 500)
API_ERRORS = (401, 429)
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
    path_enums: dict = field(default_factory=dict)  # path parameter -> "module:TUPLE" of values
    query: tuple = ()  # OpenAPI parameter objects for the query string (values may be refs)
    request_example: dict | None = None  # a valid body (docs, client generators, the fuzzer)
    #: What the operation does, camelCase (client generators name their functions after it).
    operation_id: str = ""



_PLOT_BODY = {"anyOf": ["schemas.request:DesignRequestSchema",
                        "schemas.request:AnalysisRequestSchema"]}
_PLOT_QUERY = tuple(
    {"name": name, "in": "query", "required": False, "description": f"Image {what} in pixels.",
     "schema": {"type": "integer", "minimum": "service.blueprints.plots:MIN_PX",
                "maximum": "service.blueprints.plots:MAX_PX", "default": default}}
    for name, what, default in (("width_px", "width", 900), ("height_px", "height", 600)))
_PLOT_DESCRIPTION = ("The body is a design request (as for POST /v1/designs) or a circuit "
                     "with an optional target (as for POST /v1/analyses).")
_SCHEMATIC_QUERY = tuple(
    {"name": name, "in": "query", "required": False,
     "description": f"Image {what} in pixels (default: the drawing's natural size, fitted "
                    "within the maximum; one side given, the other keeps the aspect ratio).",
     "schema": {"type": "integer", "minimum": "exporters.schematic:MIN_PX",
                "maximum": "exporters.schematic:MAX_PX"}}
    for name, what in (("width_px", "width"), ("height_px", "height")))
_SCHEMATIC_DESCRIPTION = (
    "The designed board drawn as a schematic: every part with its reference (the same as "
    "in the BOM and netlists) and value, signal left to right, the bias network, spare "
    "op-amp units, supply decoupling, connectors and a title block. " + _PLOT_DESCRIPTION)

OPERATIONS: tuple[Operation, ...] = (
    Operation("/healthz", "GET", "Liveness probe: the process answers.", "meta",
              {200: {JSON: "service.ops.meta:HealthSchema"}}, public=True,
              operation_id="checkLiveness"),
    Operation("/readyz", "GET", "Readiness probe: the op-amp catalog is loaded.", "meta",
              {200: {JSON: "service.ops.meta:ReadySchema"}}, errors=(503,), public=True,
              operation_id="checkReadiness"),
    Operation("/metrics", "GET", "Prometheus metrics (text exposition format).", "meta",
              {200: {METRICS_TEXT: TEXT_BODY}}, public=True, operation_id="getMetrics"),
    Operation("/openapi.json", "GET", "This OpenAPI 3 description.", "meta",
              {200: {JSON: ANY_OBJECT}}, public=True, operation_id="getOpenApiDocument"),
    Operation("/v1/opamps", "GET", "List the op-amp catalog.", "opamps",
              {200: {JSON: "schemas.opamp:OpAmpListSchema"}}, operation_id="listOpamps"),
    Operation("/v1/opamps/<opamp_id>", "GET", "One op-amp of the catalog.", "opamps",
              {200: {JSON: "schemas.opamp:OpAmpOutSchema"}}, errors=(404,),
              parameters={"opamp_id": "Catalog id (see GET /v1/opamps)."},
              operation_id="getOpamp"),
    Operation("/v1/parts", "GET", "List the stocked-parts library (GAINCHAIN_PARTS_LIBRARY).",
              "parts", {200: {JSON: "schemas.parts:PartsListSchema"}},
              operation_id="listParts"),
    Operation("/v1/designs", "POST", "Design a cascade of gain stages for a target.", "designs",
              {200: {JSON: "schemas.response:DesignResponseSchema"}},
              request="schemas.request:DesignRequestSchema", errors=COMPUTE_ERRORS,
              request_example=README_EXAMPLE, operation_id="createDesign"),
    Operation("/v1/designs/batch", "POST", "Design up to 100 targets in one call.", "designs",
              {200: {JSON: {"type": "object", "additionalProperties": False,
                            "required": ["results"],
                            "properties": {"results": {"type": "array", "items": {
                                "type": "object", "additionalProperties": False,
                                "required": ["status"],
                                "properties": {
                                    "status": {"type": "integer"},
                                    "design": "schemas.response:DesignResponseSchema",
                                    "problem": PROBLEM_SCHEMA}}}}}}},
              request={"type": "object", "additionalProperties": False, "required": ["requests"],
                       "properties": {"requests": {
                           "type": "array", "maxItems": "service.blueprints.batch:MAX_BATCH",
                           "items": "schemas.request:DesignRequestSchema"}}},
              errors=COMPUTE_ERRORS, request_example={"requests": [README_EXAMPLE]},
              operation_id="createDesignBatch",
              description="Results come in request order; a bad item gets a problem document "
                          "in its slot (status 4xx) and does not fail the others."),
    Operation("/v1/analyses", "POST", "Analyse a (possibly hand-edited) circuit.", "analyses",
              {200: {JSON: "schemas.response:AnalysisResponseSchema"}},
              request="schemas.request:AnalysisRequestSchema", errors=COMPUTE_ERRORS,
              operation_id="analyseCircuit"),
    Operation("/v1/explorations", "POST",
              "Try a design request across op-amps and stage counts; rank the candidates.",
              "designs", {200: {JSON: "schemas.response:ExplorationResponseSchema"}},
              request="schemas.request:ExplorationRequestSchema", errors=COMPUTE_ERRORS,
              request_example={k: v for k, v in README_EXAMPLE.items() if k != "opamp"},
              operation_id="exploreDesigns",
              description="opamp omitted: the whole catalog; or a list of catalog ids and/or "
                          "op-amp objects (at most 200). stages: \"auto\" (the count POST "
                          "/v1/designs picks) or a list of counts. One candidate per (op-amp, "
                          "stage count), its design exactly what POST /v1/designs returns for "
                          "that op-amp and stage count (same design_id); pareto marks the "
                          "meeting candidates no other meeting candidate dominates on part "
                          "count, input-referred noise, supply current and (with a priced "
                          "parts library) BOM cost; candidates come in rank order."),
    Operation("/v1/exports/<kind>", "POST", "Export a design or a circuit as a file.", "exports",
              {200: {CSV: TEXT_BODY, XLSX: BINARY, TEXT: TEXT_BODY, XML: TEXT_BODY}},
              request={"anyOf": ["schemas.request:DesignRequestSchema",
                                 "service.openapi:ExportCircuitBodySchema"]},
              errors=COMPUTE_ERRORS + (404,), request_example=README_EXAMPLE,
              operation_id="exportDesign",
              description="The body is a design request (designed first) or "
                          "{name, circuit}. bom.csv -> text/csv, bom.xlsx -> xlsx workbook, "
                          "netlist.cir -> SPICE deck (text/plain), netlist.net -> KiCad "
                          "S-expression netlist (text/plain), netlist.xml -> KiCad XML netlist.",
              path_enums={"kind": "exporters.formats:KINDS"},
              parameters={"kind": "File kind."},
              query=({"name": "size", "in": "query", "required": False,
                      "description": "Chip size of resistors and ceramic capacitors.",
                      "schema": {"type": "string", "enum": "exporters.board:SIZES",
                                 "default": "0603"}},
                     {"name": "date", "in": "query", "required": False,
                      "description": "ISO date written into the file headers (none: no date).",
                      "schema": {"type": "string", "format": "date"}})),
    Operation("/v1/plots/bode.svg", "POST", "Bode plot (SVG) of a design or a circuit.",
              "plots", {200: {SVG: TEXT_BODY}}, request=_PLOT_BODY, query=_PLOT_QUERY,
              errors=COMPUTE_ERRORS, description=_PLOT_DESCRIPTION,
              request_example=README_EXAMPLE, operation_id="plotBodeSvg"),
    Operation("/v1/plots/bode.png", "POST", "Bode plot (PNG) of a design or a circuit.",
              "plots", {200: {PNG: BINARY}}, request=_PLOT_BODY, query=_PLOT_QUERY,
              errors=COMPUTE_ERRORS, description=_PLOT_DESCRIPTION,
              request_example=README_EXAMPLE, operation_id="plotBodePng"),
    Operation("/v1/plots/schematic.svg", "POST", "Schematic (SVG) of a design or a circuit.",
              "plots", {200: {SVG: TEXT_BODY}}, request=_PLOT_BODY, query=_SCHEMATIC_QUERY,
              errors=COMPUTE_ERRORS, description=_SCHEMATIC_DESCRIPTION,
              request_example=README_EXAMPLE, operation_id="drawSchematicSvg"),
    Operation("/v1/plots/schematic.png", "POST", "Schematic (PNG) of a design or a circuit.",
              "plots", {200: {PNG: BINARY}}, request=_PLOT_BODY, query=_SCHEMATIC_QUERY,
              errors=COMPUTE_ERRORS, description=_SCHEMATIC_DESCRIPTION,
              request_example=README_EXAMPLE, operation_id="drawSchematicPng"),
)


class ExportCircuitBodySchema(Schema):
    """Body of POST /v1/exports/<kind> when exporting a circuit as it is."""

    name = fields.String(validate=Length(max=80), allow_none=True)
    circuit = fields.Nested("schemas.circuit.CircuitSchema", required=True)


def _custom_fields() -> dict:
    """JSON Schema for the project's custom marshmallow fields (the plugin cannot infer them).

    Keys are "module:Class"; values are functions of the converter (to reference nested
    schemas) returning the property dict.
    """
    return {
        "schemas.request:StagesField": lambda conv: {"oneOf": [
            {"type": "string", "enum": ["auto"]},
            {"type": "integer", "minimum": 1, "maximum": _max_stages()}]},
        "schemas.request:ImpedanceField": lambda conv: {"oneOf": [
            {"type": "string", "enum": ["auto"]},
            {"type": "number", "minimum": 10, "maximum": 1e7}]},
        "schemas.opamp:OpAmpField": lambda conv: {"oneOf": [
            {"type": "string", "minLength": 1, "maxLength": 80,
             "description": "Catalog id (GET /v1/opamps)."},
            conv.resolve_nested_schema(_resolve("schemas.opamp:OpAmpSchema"))]},
        "schemas.request:OpAmpChoicesField": lambda conv: {
            "type": "array", "minItems": 1,
            "maxItems": _resolve("schemas.request:MAX_EXPLORATION_OPAMPS"),
            "description": "Catalog ids and/or op-amp objects; omitted: the whole catalog.",
            "items": {"oneOf": [
                {"type": "string", "minLength": 1, "maxLength": 80},
                conv.resolve_nested_schema(_resolve("schemas.opamp:OpAmpSchema"))]}},
        "schemas.request:StageCountsField": lambda conv: {"oneOf": [
            {"type": "string", "enum": ["auto"]},
            {"type": "array", "minItems": 1, "maxItems": _max_stages(), "uniqueItems": True,
             "items": {"type": "integer", "minimum": 1, "maximum": _max_stages()}}]},
    }


def _max_stages() -> int:
    try:
        return int(_resolve("schemas.request:MAX_STAGES"))
    except (ImportError, AttributeError):
        return 12


def _custom_field_attributes():
    table = {}
    for ref, make in _custom_fields().items():
        try:
            table[_resolve(ref)] = make
        except (ImportError, AttributeError):
            continue  # that schema module is not there (yet): nothing to describe

    def attribute_function(conv, field_obj, **kwargs):
        for cls, make in table.items():
            if type(field_obj) is cls:
                return make(conv)
        return {}

    return attribute_function


INFO_DESCRIPTION = """\
Stateless JSON service that designs cascades of capacitively coupled op-amp gain stages.

Errors are RFC 9457 problem details (application/problem+json). Limits: request body at most
GAINCHAIN_MAX_BODY_BYTES (default 262144 bytes, 413); at most 12 stages, 2000 response points,
100000 Monte Carlo trials and 100 batch items (422); an estimated cost per request
(GAINCHAIN_MAX_COST_UNITS, about two seconds of one core) and reply size
(GAINCHAIN_MAX_REPLY_BYTES, default 8 MiB), both 422 naming the field; a compute budget per
request (GAINCHAIN_COMPUTE_BUDGET_S, default 10 s, 503). In production a front (nginx)
refuses unreadable requests (400, 414, 431) and too many requests per client (429 with
Retry-After), as problem details too. A design aid: prototype and measure.
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


_REF_RE = re.compile(r"^[a-z_][\w.]*:[A-Za-z_]\w*$")


def _schema_entry(ref, pending: list | None = None):
    """Resolve "module:NAME" strings anywhere in a schema description.

    A marshmallow schema class stays a class (the plugin turns it into a $ref); a tuple of
    values (``enum``) becomes a sorted list; dicts and lists are walked. A schema that does
    not exist (yet) is described as any object and its name appended to ``pending``
    (published as ``x-pending-schemas``); without a ``pending`` list it raises.
    """
    if isinstance(ref, str) and _REF_RE.match(ref):
        if ref == PROBLEM_SCHEMA:
            ref = _problem_ref()
        try:
            ref = _resolve(ref)
        except (ImportError, AttributeError):
            if pending is None:
                raise
            pending.append(ref)
            return {"type": "object", "description": f"Schema not published yet ({ref})."}
        if isinstance(ref, tuple | frozenset | set):
            return sorted(ref)
    if isinstance(ref, dict):
        return {k: _schema_entry(v, pending) for k, v in ref.items()}
    if isinstance(ref, list | tuple):
        return [_schema_entry(v, pending) for v in ref]
    return ref


def _problem_ref() -> str:
    try:
        _resolve(PROBLEM_SCHEMA)
        return PROBLEM_SCHEMA
    except (ImportError, AttributeError):
        return PROBLEM_SCHEMA_FALLBACK


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
        if name in op.path_enums:
            schema = {"type": "string", "enum": _schema_entry(op.path_enums[name])}
        elif items:
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


class ProblemDocSchema(Schema):
    """RFC 9457 problem details as ``service.errors.problem_body`` writes them."""

    class Meta:
        unknown = "include"  # extension members (e.g. best_design) are allowed

    type = fields.String(required=True, metadata={"format": "uri"})
    title = fields.String(required=True)
    status = fields.Integer(required=True)
    detail = fields.String(required=True)
    instance = fields.String()
    errors = fields.Dict(metadata={"description": "Field path -> messages (validation)."})


def build_spec(app) -> dict:
    """Build the OpenAPI document for the routes ``app`` serves (see :data:`OPERATIONS`)."""
    plugin = MarshmallowPlugin()
    spec = APISpec(
        title="gainchain",
        version=_version(),
        openapi_version=OPENAPI_VERSION,
        plugins=[plugin],
        info={"description": INFO_DESCRIPTION},
    )
    plugin.converter.add_attribute_function(_custom_field_attributes())
    spec.components.security_scheme(
        "bearerAuth", {"type": "http", "scheme": "bearer",
                       "description": "API key (GAINCHAIN_API_KEYS / GAINCHAIN_API_KEYS_FILE)."})
    routes = _app_routes(app)
    pending: list[str] = []
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
        params += [_schema_entry(q, pending) for q in op.query]
        if params:
            operation["parameters"] = params
        if op.request is not None:
            media = {"schema": _schema_entry(op.request, pending)}
            if op.request_example is not None:
                media["example"] = op.request_example
            operation["requestBody"] = {"required": True, "content": {JSON: media}}
        responses = {}
        for status, media in op.responses.items():
            responses[str(status)] = {
                "description": "Success.",
                "content": {mt: {"schema": _schema_entry(ref, pending)}
                            for mt, ref in media.items()},
            }
        errors = set(op.errors) | set(COMMON_ERRORS)
        if not op.public:
            # The same description whatever the configuration: a key is asked for only
            # when keys are configured, so the bearer requirement is one of two options.
            errors.update(API_ERRORS)
            operation["security"] = [{"bearerAuth": []}, {}]
        for status in sorted(errors):
            responses[str(status)] = _problem_response(status)
        operation["responses"] = responses
        by_path.setdefault(op.path, {})[op.method.lower()] = operation
    for path, operations in by_path.items():
        spec.path(path=openapi_path(path), operations=operations)
    doc = spec.to_dict()
    if pending:
        doc["info"]["x-pending-schemas"] = sorted(set(pending))
    return doc


def _operation_id(op: Operation) -> str:
    """The row's ``operation_id``; a row without one falls back to method and path (a test
    asks every row for its own)."""
    if op.operation_id:
        return op.operation_id
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
