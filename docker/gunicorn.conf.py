"""gunicorn settings for gainchain (used by `make serve-prod` and the container).

Run as:  gunicorn -c docker/gunicorn.conf.py 'service:create_app()'
Every value comes from the environment (HOST, PORT, GAINCHAIN_WORKERS,
GAINCHAIN_WORKER_TIMEOUT_S, GAINCHAIN_LOG_LEVEL, PROMETHEUS_MULTIPROC_DIR), parsed by
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
bind = [f"{_settings['host']}:{_settings['port']}"]
# forwarded_allow_ips is deliberately left at gunicorn's default (127.0.0.1): behind the
# reverse proxy, set FORWARDED_ALLOW_IPS in the environment if X-Forwarded-* must be trusted.

# --- workers ----------------------------------------------------------------------------
# The engine is CPU-bound numpy work run with OMP_NUM_THREADS=1: one sync worker per core
# (at least 2, so one slow request never blocks the probes). See service.config.
workers = _settings["workers"]
worker_class = "sync"
threads = 1
# Kill a worker silent for this long (the hard stop behind the per-request compute budget,
# GAINCHAIN_COMPUTE_BUDGET_S, which is kept well below it).
timeout = _settings["timeout_s"]
graceful_timeout = 20
keepalive = 2
# Recycle workers now and then (bounded memory growth); the jitter spreads the restarts.
max_requests = 1000
max_requests_jitter = 100
# Import the app once in the master: workers fork from it (cheap recycling, one catalog load).
preload_app = True

# --- request limits: at or below gunicorn's defaults (4094, 100, 8190) ------------------
limit_request_line = 4094
limit_request_fields = 100
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


def child_exit(server, worker):
    """A worker ended (recycled, killed): drop its live gauges from the aggregate."""
    from prometheus_client import multiprocess

    multiprocess.mark_process_dead(worker.pid)


def on_exit(server):
    own = os.environ.get("GAINCHAIN_OWN_METRICS_DIR")
    if own and own == os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
        shutil.rmtree(own, ignore_errors=True)
