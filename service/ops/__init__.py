"""Operational concerns: everything a service needs besides its domain views.

``init_app(app)`` installs, in this order of execution for each request:

1. request id (``X-Request-ID`` kept or generated) and the latency clock;
2. the compute budget's deadline (:mod:`service.ops.budget`) and the cost meter
   (:mod:`service.ops.cost`);
3. CORS preflight answers for allowed origins (:mod:`service.ops.cors`);
4. API-key authentication (:mod:`service.ops.auth`), before any view reads the body;
5. the body-size limit: a declared ``Content-Length`` above ``GAINCHAIN_MAX_BODY_BYTES`` is
   413 before the body is read; a body without a length (chunked upload) is read here, at
   most limit + 1 bytes, and is 413 once it passes the limit. (Werkzeug 3.1 alone silently
   *truncates* such a body at ``MAX_CONTENT_LENGTH``, which would hand a view a cut-off
   document; see :func:`_buffer_unsized_body`.)

and, on every response: CORS headers, security headers (``X-Content-Type-Options:
nosniff``, ``Referrer-Policy: no-referrer``, ``X-Frame-Options: DENY``, ``Cache-Control:
no-store`` unless a view set its own), the echoed request id, Prometheus metrics and one
JSON log line. It also registers the meta endpoints (:mod:`service.ops.meta`).
"""

from __future__ import annotations

import io
import time

from flask import Flask, g, request

from service.ops import auth, budget, cors, cost, logs, metrics

SECURITY_HEADERS = {
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "X-Frame-Options": "DENY",
}
# JSON and files need no active content; /docs sets its own, slightly wider, policy.
DEFAULT_CSP = "default-src 'none'; frame-ancestors 'none'"
UNMATCHED_ENDPOINT = "<unmatched>"


def init_app(app: Flask) -> None:
    if app.config.get("DEBUG") and not app.config.get("TESTING"):
        raise RuntimeError("debug mode is never allowed in this service")
    key_digests = auth.load_keys(app.config)
    allowed_origins = frozenset(app.config.get("GAINCHAIN_CORS_ORIGINS") or ())
    budget_s = float(app.config.get("GAINCHAIN_COMPUTE_BUDGET_S") or 10.0)
    max_cost_units = int(app.config.get("GAINCHAIN_MAX_COST_UNITS")
                         or cost.DEFAULT_MAX_COST_UNITS)
    max_reply_bytes = int(app.config.get("GAINCHAIN_MAX_REPLY_BYTES")
                          or cost.DEFAULT_MAX_REPLY_BYTES)
    max_body = app.config.get("MAX_CONTENT_LENGTH")
    logger = logs.configure(app.config.get("GAINCHAIN_LOG_LEVEL") or "INFO")
    logs.route_flask_logger(app)
    app.extensions["gainchain_ops"] = {
        "auth_enabled": bool(key_digests),
        "cors_origins": allowed_origins,
        "compute_budget_s": budget_s,
    }

    @app.before_request
    def _ops_before():
        g.request_started = time.perf_counter()
        g.request_id = logs.request_id_from(request.headers.get("X-Request-ID"))
        budget.start(budget_s)
        cost.start(max_cost_units, max_reply_bytes)
        if cors.is_preflight(request):
            # Exempt from auth only for an allowed origin (browsers send preflights without
            # credentials). Any other OPTIONS, CORS on or off, needs a key like every
            # request, so it cannot be used to list routes.
            origin = cors.allowed_origin(request, allowed_origins)
            if origin:
                return cors.preflight_response(origin)
        auth.check_request(request, key_digests)
        _check_declared_length(max_body)
        _buffer_unsized_body(max_body)
        return None

    @app.after_request
    def _ops_after(response):
        cors.decorate(response, request, allowed_origins)
        for name, value in SECURITY_HEADERS.items():
            response.headers.setdefault(name, value)
        response.headers.setdefault("Content-Security-Policy", DEFAULT_CSP)
        response.headers.setdefault("Cache-Control", "no-store")
        rid = getattr(g, "request_id", None) or logs.request_id_from(None)
        response.headers["X-Request-ID"] = rid
        started = getattr(g, "request_started", None)
        duration_s = time.perf_counter() - started if started is not None else 0.0
        endpoint = request.url_rule.rule if request.url_rule is not None else UNMATCHED_ENDPOINT
        metrics.observe_request(endpoint, request.method, response.status_code, duration_s)
        logs.log_request(logger, method=request.method, path=request.path, endpoint=endpoint,
                         status=response.status_code, duration_s=duration_s, request_id=rid)
        return response

    @app.errorhandler(budget.BudgetExceeded)
    def _budget_exceeded(err: budget.BudgetExceeded):
        from service.errors import problem_response

        logger.warning("compute budget exceeded", extra={"event": "budget_exceeded",
                                                         "where": err.where})
        return problem_response(
            503, "Compute budget exceeded",
            f"This request needed more than the {err.budget_s:g} s compute budget per "
            "request (GAINCHAIN_COMPUTE_BUDGET_S); ask for fewer stages, points or trials.",
            type_="compute-budget-exceeded")

    from service.ops import meta

    app.register_blueprint(meta.bp)


def _too_large(detail: str):
    from service.errors import ApiProblem

    return ApiProblem(413, "Content too large", detail, type_="content-too-large")


def _check_declared_length(max_body: int | None) -> None:
    length = request.content_length
    if max_body is not None and length is not None and length > max_body:
        raise _too_large(f"The request body has {length} bytes; this service accepts at most "
                         f"{max_body} (GAINCHAIN_MAX_BODY_BYTES).")


_READ_CHUNK_BYTES = 64 * 1024


def _buffer_unsized_body(max_body: int | None) -> None:
    """Read a body sent without Content-Length (chunked) up to the limit, or answer 413.

    Only servers that terminate the input themselves (``wsgi.input_terminated``: gunicorn,
    Werkzeug's server for chunked requests) can send such a body; without that flag
    Werkzeug reads nothing. The buffered body replaces the input, with its length set, so
    the views read it the ordinary way.
    """
    environ = request.environ
    if max_body is None or environ.get("CONTENT_LENGTH") or not environ.get(
            "wsgi.input_terminated"):
        return
    raw = environ["wsgi.input"]
    chunks, total = [], 0
    while True:
        data = raw.read(min(_READ_CHUNK_BYTES, max_body + 1 - total))
        if not data:
            break
        chunks.append(data)
        total += len(data)
        if total > max_body:
            raise _too_large(f"The request body is longer than the {max_body} bytes this "
                             "service accepts (GAINCHAIN_MAX_BODY_BYTES).")
    body = b"".join(chunks)
    environ["wsgi.input"] = io.BytesIO(body)
    environ["CONTENT_LENGTH"] = str(len(body))
