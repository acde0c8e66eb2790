"""Configuration from the environment only; defaults; debug impossible."""

from __future__ import annotations

import pytest

from service.config import from_environment, server_settings

from .conftest import make_app


def test_defaults():
    cfg = from_environment({})
    assert cfg["GAINCHAIN_MAX_BODY_BYTES"] == 256 * 1024
    assert cfg["GAINCHAIN_API_KEYS"] == () and cfg["GAINCHAIN_API_KEYS_FILE"] is None
    assert cfg["GAINCHAIN_CORS_ORIGINS"] == ()
    assert cfg["GAINCHAIN_COMPUTE_BUDGET_S"] == 10.0
    assert cfg["GAINCHAIN_LOG_LEVEL"] == "INFO"
    assert cfg["DEBUG"] is False


def test_lists_are_trimmed():
    cfg = from_environment({"GAINCHAIN_API_KEYS": " a , ,b ",
                            "GAINCHAIN_CORS_ORIGINS": "https://x.invalid,"})
    assert cfg["GAINCHAIN_API_KEYS"] == ("a", "b")
    assert cfg["GAINCHAIN_CORS_ORIGINS"] == ("https://x.invalid",)


def test_bad_log_level_refuses_to_start():
    with pytest.raises(RuntimeError, match="GAINCHAIN_LOG_LEVEL"):
        from_environment({"GAINCHAIN_LOG_LEVEL": "chatty"})


def test_debug_cannot_be_switched_on():
    # Neither FLASK_DEBUG in the environment nor a config mapping turns debug on.
    app = make_app({"FLASK_DEBUG": "1"}, DEBUG=True)
    assert app.debug is False


def test_server_settings():
    s = server_settings({}, cpu_count=8)
    assert s == {"host": "127.0.0.1", "port": 8000, "workers": 8, "timeout_s": 30,
                 "log_level": "INFO", "threads": 4, "bind": None}
    s = server_settings({"GAINCHAIN_THREADS": "8", "GAINCHAIN_BIND": "unix:/tmp/x.sock"})
    assert (s["threads"], s["bind"]) == (8, "unix:/tmp/x.sock")
    with pytest.raises(RuntimeError, match="GAINCHAIN_THREADS"):
        server_settings({"GAINCHAIN_THREADS": "0"})
    assert server_settings({}, cpu_count=1)["workers"] == 2
    s = server_settings({"HOST": "0.0.0.0", "PORT": "9001", "GAINCHAIN_WORKERS": "3"},
                        cpu_count=8)
    assert (s["host"], s["port"], s["workers"]) == ("0.0.0.0", 9001, 3)
    with pytest.raises(RuntimeError, match="PORT"):
        server_settings({"PORT": "http"})
