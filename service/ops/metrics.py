"""Prometheus metrics: request counts, request latency, design compute time.

Under gunicorn, ``PROMETHEUS_MULTIPROC_DIR`` names a directory shared by every worker
(``docker/gunicorn.conf.py`` creates one when it is not set). prometheus-client then keeps
each worker's values in files there, and :func:`render_latest` adds them up across
workers, so ``/metrics`` answers for the whole server whichever worker serves it.
The mode is fixed when prometheus-client is first imported (that is how the library
works), so the variable must be in the environment before the app is imported.

Other code records the engine's time with :func:`observe_design_seconds` (or the
:func:`time_design` context manager); label values are route templates, never raw
paths, so the number of series stays bounded.
"""

from __future__ import annotations

import os
import time
from contextlib import contextmanager

from prometheus_client import (
    CONTENT_TYPE_LATEST,
    CollectorRegistry,
    Counter,
    Histogram,
    generate_latest,
)
from prometheus_client import multiprocess as _multiprocess
from prometheus_client import values as _values

# Our own registry, not the library's global one: the app factory may run many times in
# one process (tests) and nothing else in the process registers here.
REGISTRY = CollectorRegistry(auto_describe=True)

# Latency buckets in seconds: a design takes about a millisecond, Monte Carlo and plots
# up to seconds; the budget (GAINCHAIN_COMPUTE_BUDGET_S, default 10 s) bounds the top.
_LATENCY_BUCKETS_S = (0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5,
                      1.0, 2.5, 5.0, 10.0, 30.0)

REQUESTS = Counter(
    "gainchain_http_requests",
    "HTTP requests answered, by route template, method and status code.",
    ("endpoint", "method", "status"),
    registry=REGISTRY,
)
LATENCY = Histogram(
    "gainchain_http_request_duration_seconds",
    "Time from the start of request handling to the response, by route, method and status.",
    ("endpoint", "method", "status"),
    buckets=_LATENCY_BUCKETS_S,
    registry=REGISTRY,
)
DESIGN_COMPUTE = Histogram(
    "gainchain_design_compute_seconds",
    "Time spent in the design engine per design computed (batch items count one each).",
    buckets=_LATENCY_BUCKETS_S,
    registry=REGISTRY,
)

CONTENT_TYPE = CONTENT_TYPE_LATEST


# Decided once, the way prometheus-client decided it when it was imported.
_MULTIPROCESS = _values.ValueClass is not _values.MutexValue
_MULTIPROC_DIR = os.environ.get("PROMETHEUS_MULTIPROC_DIR") if _MULTIPROCESS else None


def multiprocess_dir() -> str | None:
    """The shared metrics directory when running in multiprocess mode, else None."""
    return _MULTIPROC_DIR


#: Methods counted under their own name (RFC 9110 section 9 and RFC 5789's PATCH); any
#: other method string a client sends is counted as ``OTHER``, so a client cannot grow the
#: number of series (OWASP API4).
KNOWN_METHODS = frozenset({"GET", "HEAD", "POST", "PUT", "DELETE", "CONNECT", "OPTIONS",
                           "TRACE", "PATCH"})
OTHER_METHOD = "OTHER"


def method_label(method: str) -> str:
    return method if method in KNOWN_METHODS else OTHER_METHOD


def observe_request(endpoint: str, method: str, status: int, seconds: float) -> None:
    """Count one answered request. ``endpoint`` must be a route template from the URL map
    (or the one "unmatched" value), never a raw path; methods are folded by
    :func:`method_label`."""
    labels = (endpoint, method_label(method), str(int(status)))
    REQUESTS.labels(*labels).inc()
    LATENCY.labels(*labels).observe(max(seconds, 0.0))


def observe_design_seconds(seconds: float) -> None:
    """Record the engine time of one design (call it from the blueprint around the engine)."""
    DESIGN_COMPUTE.observe(max(float(seconds), 0.0))


@contextmanager
def time_design():
    """``with time_design(): engine.design(...)`` records the block's wall time."""
    start = time.perf_counter()
    try:
        yield
    finally:
        observe_design_seconds(time.perf_counter() - start)


def render_latest() -> bytes:
    """The Prometheus text exposition for this process, or for all workers in multiprocess mode."""
    path = multiprocess_dir()
    if path and os.path.isdir(path):
        registry = CollectorRegistry()
        _multiprocess.MultiProcessCollector(registry, path=path)
        return generate_latest(registry)
    return generate_latest(REGISTRY)
