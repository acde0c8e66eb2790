"""gunicorn settings for gainchain (used by `make serve-prod` and the container).

Run as:  gunicorn -c docker/gunicorn.conf.py 'service:create_app()'
(in production through the front: ``python docker/front.py`` starts nginx and this).
Every value comes from the environment (HOST, PORT, GAINCHAIN_BIND, GAINCHAIN_WORKERS,
GAINCHAIN_THREADS, GAINCHAIN_WORKER_TIMEOUT_S, GAINCHAIN_LOG_LEVEL,
PROMETHEUS_MULTIPROC_DIR), parsed by
``service.config.server_settings`` so the app and the server agree. A file read with -c
is plain Python executed by gunicorn; module-level names are its settings.
"""

import os
import shutil
import sys
import tempfile

# The config file is executed from its own path; make the project importable for the
# settings parser (the app itself is imported by gunicorn after this file runs).
_ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if _ROOT not in sys.path:
    sys.path.insert(0, _ROOT)

from service.config import server_settings  # noqa: E402

_settings = server_settings()

# One BLAS/OpenMP thread per worker (workers x threads must not oversubscribe the cores).
# Set before the app (numpy) is imported, which preload_app does after this file runs.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

# --- socket -----------------------------------------------------------------------------
# GAINCHAIN_BIND (set by docker/front.py to a Unix socket only the front can reach) wins
# over HOST:PORT.
bind = [_settings["bind"] or f"{_settings['host']}:{_settings['port']}"]
# forwarded_allow_ips is deliberately left at gunicorn's default (127.0.0.1): behind the
# reverse proxy, set FORWARDED_ALLOW_IPS in the environment if X-Forwarded-* must be trusted.

# --- workers ----------------------------------------------------------------------------
# The engine is CPU-bound numpy work run with OMP_NUM_THREADS=1: one worker process per core
# (at least 2). Each has GAINCHAIN_THREADS threads (default 4): while long computations run
# in some, /healthz and cheap requests are answered by another (Python switches threads
# every 5 ms and numpy releases the GIL in its array loops). Slow clients never reach these
# threads: the front (nginx) reads whole requests and buffers whole replies first.
workers = _settings["workers"]
worker_class = "gthread"
threads = _settings["threads"]
# Kill a worker silent for this long (the hard stop behind the per-request compute budget,
# GAINCHAIN_COMPUTE_BUDGET_S, which is kept well below it).
timeout = _settings["timeout_s"]
graceful_timeout = 20
keepalive = 2
# Recycle workers now and then, as a safety net only: measured under load, a worker's
# memory grows about 1.7 MB and then levels off, and 1000 requests recycled each worker
# about once a second (59 restarts in 24 s, /healthz p99 140 ms). 100,000 +- 10,000 is
# tens of minutes per worker at full load.
max_requests = 100_000
max_requests_jitter = 10_000
# Import the app once in the master: workers fork from it (cheap recycling, one catalog load).
preload_app = True

# --- request limits ----------------------------------------------------------------------
# The front refuses first (nginx: 4 KiB request line, 4 KiB per header line, 16 KiB of
# headers in all; docker/nginx/gainchain-http.conf), with problem+json. gunicorn's own
# limits sit above what the front lets through, so nothing the front forwards is refused
# here: the longest line gunicorn takes (8190) and a field count above 16 KiB / 4 bytes.
limit_request_line = 8190
limit_request_fields = 4096
limit_request_field_size = 8190


# --- control ----------------------------------------------------------------------------
# gunicorn >= 25.1 opens a control socket (gunicornc) by default; this service never needs it.
control_socket_disable = True

# --- logs -------------------------------------------------------------------------------
# The app writes one JSON object per request on stderr (service.ops.logs), so gunicorn's
# own access log is off; gunicorn's error log (start-up, worker deaths) goes to stderr.
accesslog = None
errorlog = "-"
loglevel = _settings["log_level"].lower()
capture_output = False
# gunicorn's own lines (start-up, worker boots and deaths) as JSON objects too, so stderr
# holds one JSON object per line from every source (merged into gunicorn's logging defaults).
# The loggers do not propagate to the root logger (whose handler writes to stdout), so each
# line is written once.
logconfig_dict = {
    "formatters": {"generic": {"()": "service.ops.logs.JsonFormatter"}},
    # gunicorn's default sends the root logger to stdout; any library record that reaches
    # it goes to stderr with the rest.
    "root": {"level": "INFO", "handlers": ["error_console"]},
    "loggers": {
        "gunicorn.error": {"level": _settings["log_level"], "handlers": ["error_console"],
                           "propagate": False, "qualname": "gunicorn.error"},
        # Off: the app writes the per-request line (with its request id) itself.
        "gunicorn.access": {"level": "CRITICAL", "handlers": [],
                            "propagate": False, "qualname": "gunicorn.access"},
    },
}
proc_name = "gainchain"

# --- Prometheus multiprocess mode -------------------------------------------------------
# prometheus-client picks multiprocess mode when this variable is set before it is first
# imported (with preload_app, the app is imported after this file runs). Each worker writes
# its counters to files in the directory; /metrics adds them up.
# A directory we create is marked so that on_exit removes it (the marker survives a HUP
# reload, which executes this file again).
if not os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
    os.environ["PROMETHEUS_MULTIPROC_DIR"] = tempfile.mkdtemp(prefix="gainchain-metrics-")
    os.environ["GAINCHAIN_OWN_METRICS_DIR"] = os.environ["PROMETHEUS_MULTIPROC_DIR"]
os.makedirs(os.environ["PROMETHEUS_MULTIPROC_DIR"], exist_ok=True)
if "_GAINCHAIN_METRICS_WIPED" not in os.environ:
    # Start from an empty directory (once per server, before the app is preloaded):
    # files left by an earlier run would add old counts.
    for _name in os.listdir(os.environ["PROMETHEUS_MULTIPROC_DIR"]):
        if _name.endswith(".db"):
            os.remove(os.path.join(os.environ["PROMETHEUS_MULTIPROC_DIR"], _name))
    os.environ["_GAINCHAIN_METRICS_WIPED"] = "1"


# Anything gunicorn still refuses itself (a client that reaches it directly) is answered
# as problem+json with the security headers, not gunicorn's HTML page. Imported last: the
# service.ops package imports prometheus-client, which must see the directory set above.
from service.ops import gunicorn_errors  # noqa: E402

gunicorn_errors.install()


def child_exit(server, worker):
    """A worker ended (recycled, killed): drop its live gauges from the aggregate."""
    from prometheus_client import multiprocess

    multiprocess.mark_process_dead(worker.pid)


def on_exit(server):
    own = os.environ.get("GAINCHAIN_OWN_METRICS_DIR")
    if own and own == os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
        shutil.rmtree(own, ignore_errors=True)
