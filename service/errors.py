"""One error path: every failure becomes an RFC 9457 problem details response.

Members: ``type``, ``title``, ``status``, ``detail`` and, for validation failures, an
``errors`` map of field path -> list of messages (marshmallow's shape). Content-Type is
``application/problem+json``. Nothing here ever includes a traceback.
"""

from __future__ import annotations

import json
import logging
import re

from flask import Flask, Response, request
from marshmallow import ValidationError
from werkzeug.exceptions import HTTPException, MethodNotAllowed

from service.engine.errors import EngineError

PROBLEM_MIME = "application/problem+json"
PROBLEM_BASE = "https://gainchain.invalid/problems/"

log = logging.getLogger("gainchain")


class ApiProblem(Exception):
    """Raise from a view to answer with a problem (status, short title, detail, extensions)."""

    def __init__(self, status: int, title: str, detail: str, *, type_: str | None = None,
                 errors: dict | None = None, headers: dict | None = None, **extensions):
        super().__init__(detail)
        self.status = status
        self.title = title
        self.detail = detail
        self.type_ = type_
        self.errors = errors
        self.headers = headers or {}
        self.extensions = extensions


def problem_body(status: int, title: str, detail: str, *, type_: str | None = None,
                 errors: dict | None = None, **extensions) -> dict:
    """The problem+json document as a dict (used by batch results too)."""
    body = {
        "type": PROBLEM_BASE + (type_ or _slug(title)),
        "title": title,
        "status": status,
        "detail": detail,
    }
    if errors is not None:
        body["errors"] = errors
    body.update(extensions)
    return body


def problem_response(status: int, title: str, detail: str, *, headers: dict | None = None,
                     **kwargs) -> Response:
    from service.jsonout import dumps

    body = problem_body(status, title, detail, **kwargs)
    resp = Response(dumps(body), status=status, mimetype=PROBLEM_MIME)
    for key, value in (headers or {}).items():
        resp.headers[key] = value
    return resp


def _slug(title: str) -> str:
    return "-".join(title.lower().replace("/", " ").split())


def validation_problem(err: ValidationError) -> dict:
    """Problem body for a marshmallow ValidationError: 422 with the per-field ``errors`` map."""
    messages = err.messages if isinstance(err.messages, dict) else {"_schema": err.messages}
    fields = ", ".join(sorted(_flatten(messages))) or "request body"
    return problem_body(422, "Validation failed",
                        f"The request body is not valid; see 'errors' (fields: {fields}).",
                        type_="validation-failed", errors=messages)


def engine_problem(err: EngineError) -> dict:
    field = err.field or "_schema"
    return problem_body(422, "Validation failed", err.message, type_="validation-failed",
                        errors=_nest(field, [err.message]))


def _flatten(messages: dict, prefix: str = "") -> list[str]:
    out = []
    for key, value in messages.items():
        path = f"{prefix}.{key}" if prefix else str(key)
        if isinstance(value, dict):
            out.extend(_flatten(value, path))
        else:
            out.append(path)
    return out


def _nest(path: str, messages: list[str]) -> dict:
    parts = path.split(".")
    node: dict = {}
    cursor = node
    for part in parts[:-1]:
        cursor[part] = {}
        cursor = cursor[part]
    cursor[parts[-1]] = messages
    return node


#: Deepest nesting of arrays/objects a body may have. The deepest valid request (a circuit
#: inside an analysis: body > circuit > stages > stage > value) is 5 levels; 32 leaves room
#: for future fields while keeping every recursive walk (marshmallow, json) far from
#: Python's recursion limit (OWASP API4: bounded resource use per request).
MAX_JSON_DEPTH = 32
_SURROGATE_RE = re.compile("[\ud800-\udfff]")
# A JSON string (skipped whole) or one bracket.
_TOKEN_RE = re.compile(r'"[^"\\]*(?:\\.[^"\\]*)*"|[\[\]{}]')
# Only a \uD800-\uDFFF escape can put a surrogate into a text decoded from UTF-8.
_SURROGATE_ESCAPE_RE = re.compile(r"\\u[dD][89a-fA-F]")


def get_json_body() -> object:
    """Parse the request body as JSON, strictly.

    :raise ApiProblem 415: the Content-Type is not ``application/json`` (or ``+json``), or
        names a charset other than UTF-8 (RFC 8259 section 8.1: JSON exchanged between
        systems is UTF-8).
    :raise ApiProblem 400: the body is not valid JSON (NaN/Infinity literals included), an
        object repeats a key, a string holds a lone surrogate (not a Unicode scalar value,
        RFC 8259 section 8.2), or arrays/objects nest deeper than :data:`MAX_JSON_DEPTH`.
    """
    mimetype = request.mimetype or ""
    if not (mimetype == "application/json" or mimetype.endswith("+json")):
        got = mimetype or "no Content-Type"
        raise ApiProblem(415, "Unsupported media type",
                         f"Send the body as application/json (got {got}).")
    charset = request.mimetype_params.get("charset")
    if charset is not None and charset.strip().lower().replace("_", "-") not in ("utf-8",
                                                                              "utf8"):
        raise ApiProblem(415, "Unsupported media type",
                         f"The body must be UTF-8 JSON (Content-Type names charset "
                         f"{ascii(charset)}).")
    raw = request.get_data(cache=True)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ApiProblem(400, "Malformed JSON", f"The body is not valid JSON: {exc}.") from None
    depth = _nesting_depth(text)
    if depth > MAX_JSON_DEPTH:
        raise ApiProblem(400, "Malformed JSON",
                         f"The body nests arrays/objects {depth} deep; at most "
                         f"{MAX_JSON_DEPTH} levels are accepted.", type_="json-too-deep")
    try:
        value = json.loads(text, parse_constant=_reject_constant,
                           object_pairs_hook=_unique_keys)
    except (ValueError, RecursionError) as exc:
        detail = ascii(str(exc))[1:-1]
        raise ApiProblem(400, "Malformed JSON", f"The body is not valid JSON: {detail}.") \
            from None
    bad = _first_surrogate_path(value) if _SURROGATE_ESCAPE_RE.search(text) else None
    if bad is not None:
        raise ApiProblem(400, "Malformed JSON",
                         f"The body holds a lone UTF-16 surrogate escape (at {bad}); JSON "
                         "text must be Unicode scalar values.", type_="malformed-json")
    return value


def _nesting_depth(text: str) -> int:
    """Deepest bracket nesting of a JSON text, brackets inside strings ignored. No recursion:
    it runs before the parser so that a hostile depth never reaches it; strings are skipped
    by one regular expression, so the Python loop only sees the brackets."""
    depth = deepest = 0
    for match in _TOKEN_RE.finditer(text):
        ch = match.group()
        if ch in "[{":
            depth += 1
            if depth > deepest:
                deepest = depth
                if deepest > MAX_JSON_DEPTH:
                    break
        elif ch in "]}":
            depth -= 1
    return deepest


def _unique_keys(pairs):
    """``object_pairs_hook`` that refuses a repeated key (RFC 8259 section 4: names SHOULD
    be unique; a silent last-wins would let two readers see two different requests)."""
    out = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"duplicate key {key!r} in an object")
        out[key] = value
    return out


def _first_surrogate_path(value, path: str = "body") -> str | None:
    """Path of the first string (key or value) holding a surrogate code point, else None."""
    stack = [(value, path)]
    while stack:
        node, where = stack.pop()
        if isinstance(node, str):
            if _SURROGATE_RE.search(node):
                return where
        elif isinstance(node, dict):
            for key, item in node.items():
                if _SURROGATE_RE.search(key):
                    return f"a key of {where}"
                stack.append((item, f"{where}.{key}"))
        elif isinstance(node, list):
            stack.extend((item, f"{where}[{i}]") for i, item in enumerate(node))
    return None


def _reject_constant(name: str):
    raise ValueError(f"{name} is not a JSON number")


def register_error_handlers(app: Flask) -> None:
    @app.errorhandler(ApiProblem)
    def _api_problem(err: ApiProblem):
        body_kwargs = dict(type_=err.type_, errors=err.errors, **err.extensions)
        return problem_response(err.status, err.title, err.detail, headers=err.headers,
                                **body_kwargs)

    @app.errorhandler(ValidationError)
    def _validation(err: ValidationError):
        body = validation_problem(err)
        return _from_body(body)

    @app.errorhandler(EngineError)
    def _engine(err: EngineError):
        return _from_body(engine_problem(err))

    @app.errorhandler(HTTPException)
    def _http(err: HTTPException):
        headers = {}
        if isinstance(err, MethodNotAllowed) and err.valid_methods:
            headers["Allow"] = ", ".join(sorted(err.valid_methods))
        status = err.code or 500
        title = err.name or "Error"
        detail = _http_detail(status, err)
        return problem_response(status, title, detail, headers=headers)

    @app.errorhandler(Exception)
    def _unexpected(err: Exception):
        log.exception("unhandled error")
        return problem_response(500, "Internal server error",
                                "The service failed to answer; the error was logged.")


def _from_body(body: dict) -> Response:
    from service.jsonout import dumps

    return Response(dumps(body), status=body["status"], mimetype=PROBLEM_MIME)


_DETAILS = {
    404: "No such resource; see /openapi.json for the paths this service serves.",
    405: "This method is not allowed here; the Allow header lists the ones that are.",
    413: "The request body is larger than this service accepts (GAINCHAIN_MAX_BODY_BYTES).",
}


def _http_detail(status: int, err: HTTPException) -> str:
    if status in _DETAILS:
        return _DETAILS[status]
    description = err.description or ""
    return description.replace("\n", " ").strip() or (err.name or "Error")
