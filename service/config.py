"""Configuration from environment variables only (12-factor).

Every setting has a default; README.md, section "Configuration", lists them all.
Tests pass overrides as a mapping to ``create_app(config)``.

Settings that only the gunicorn process reads (HOST, PORT, GAINCHAIN_WORKERS,
GAINCHAIN_WORKER_TIMEOUT_S, PROMETHEUS_MULTIPROC_DIR) are read in ``docker/gunicorn.conf.py``
through :func:`server_settings`, so both places parse them the same way.
"""

from __future__ import annotations

import os

LOG_LEVELS = ("DEBUG", "INFO", "WARNING", "ERROR", "CRITICAL")


def _int(env, name: str, default: int, *, minimum: int | None = None) -> int:
    raw = env.get(name)
    if raw is None or raw.strip() == "":
        return default
    try:
        value = int(raw)
    except ValueError as exc:
        raise RuntimeError(f"{name} must be an integer, got {raw!r}") from exc
    if minimum is not None and value < minimum:
        raise RuntimeError(f"{name} must be >= {minimum}, got {value}")
    return value


def _float(env, name: str, default: float, *, minimum: float = 0.0) -> float:
    raw = env.get(name)
    if raw is None or raw.strip() == "":
        return default
    try:
        value = float(raw)
    except ValueError as exc:
        raise RuntimeError(f"{name} must be a number, got {raw!r}") from exc
    if not value > minimum or value != value or value == float("inf"):
        raise RuntimeError(f"{name} must be a finite number > {minimum}, got {raw!r}")
    return value


def _csv(env, name: str) -> tuple[str, ...]:
    raw = env.get(name) or ""
    return tuple(part.strip() for part in raw.split(",") if part.strip())


def _choice(env, name: str, default: str, choices: tuple[str, ...]) -> str:
    raw = (env.get(name) or default).strip().upper()
    if raw not in choices:
        raise RuntimeError(f"{name} must be one of {', '.join(choices)}, got {raw!r}")
    return raw


def from_environment(env=None) -> dict:
    """Read every GAINCHAIN_* setting into a Flask config mapping."""
    env = os.environ if env is None else env
    max_body = _int(env, "GAINCHAIN_MAX_BODY_BYTES", 256 * 1024, minimum=1)
    return {
        # Path of an approved-parts JSON file that replaces or extends the built-in catalog.
        "GAINCHAIN_OPAMP_CATALOG": env.get("GAINCHAIN_OPAMP_CATALOG") or None,
        # "extend" (default) adds the file's entries to the built-in ones; "replace" uses only them.
        "GAINCHAIN_OPAMP_CATALOG_MODE": env.get("GAINCHAIN_OPAMP_CATALOG_MODE", "extend"),
        # Path of the organisation's stocked-parts JSON file (internal part numbers, prices).
        "GAINCHAIN_PARTS_LIBRARY": env.get("GAINCHAIN_PARTS_LIBRARY") or None,
        "GAINCHAIN_MAX_BODY_BYTES": max_body,
        "MAX_CONTENT_LENGTH": max_body,
        # API keys: comma-separated list and/or a file with one key per line (blank and
        # '#' lines ignored). Authentication is off when neither is set.
        "GAINCHAIN_API_KEYS": _csv(env, "GAINCHAIN_API_KEYS"),
        "GAINCHAIN_API_KEYS_FILE": env.get("GAINCHAIN_API_KEYS_FILE") or None,
        # Browser origins allowed to call the API (exact match, comma-separated); none by default.
        "GAINCHAIN_CORS_ORIGINS": _csv(env, "GAINCHAIN_CORS_ORIGINS"),
        # Wall-clock compute budget per request, in seconds (checked by the engine callers).
        "GAINCHAIN_COMPUTE_BUDGET_S": _float(env, "GAINCHAIN_COMPUTE_BUDGET_S", 10.0),
        # Estimated cost and reply size a request may have (service.ops.cost), else 422.
        "GAINCHAIN_MAX_COST_UNITS": _int(env, "GAINCHAIN_MAX_COST_UNITS", 300_000,
                                         minimum=1),
        "GAINCHAIN_MAX_REPLY_BYTES": _int(env, "GAINCHAIN_MAX_REPLY_BYTES", 8 * 1024 * 1024,
                                          minimum=1024),
        "GAINCHAIN_LOG_LEVEL": _choice(env, "GAINCHAIN_LOG_LEVEL", "INFO", LOG_LEVELS),
        # Set by the process manager (gunicorn.conf.py does it for you); when set, /metrics
        # aggregates the counters of every worker process.
        "PROMETHEUS_MULTIPROC_DIR": env.get("PROMETHEUS_MULTIPROC_DIR") or None,
        # Flask debug is never switched on from the environment.
        "DEBUG": False,
        "TESTING": False,
        "JSON_SORT_KEYS": False,
    }


def server_settings(env=None, *, cpu_count: int | None = None) -> dict:
    """Settings read by the gunicorn configuration (``docker/gunicorn.conf.py``).

    Workers default to the CPU count (at least 2): the engine is CPU-bound numpy work
    (with ``OMP_NUM_THREADS=1``), so more processes than cores only queue on the CPU;
    gunicorn's 2 x cores + 1 rule of thumb assumes workers that wait on I/O.
    """
    env = os.environ if env is None else env
    cpus = cpu_count if cpu_count is not None else (os.cpu_count() or 1)
    return {
        "host": (env.get("HOST") or "127.0.0.1").strip(),
        "port": _int(env, "PORT", 8000, minimum=1),
        "workers": _int(env, "GAINCHAIN_WORKERS", max(2, cpus), minimum=1),
        # Threads per worker (gthread): a probe or a cheap request finds a free thread while
        # long computations run in others (README, "Concurrency").
        "threads": _int(env, "GAINCHAIN_THREADS", 4, minimum=1),
        # Where gunicorn listens; the front (docker/front.py) sets a Unix socket here.
        "bind": (env.get("GAINCHAIN_BIND") or "").strip() or None,
        "timeout_s": _int(env, "GAINCHAIN_WORKER_TIMEOUT_S", 30, minimum=1),
        "log_level": _choice(env, "GAINCHAIN_LOG_LEVEL", "INFO", LOG_LEVELS),
    }
