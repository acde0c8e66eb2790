"""Start the exact command the container runs (the Dockerfile's CMD, which equals
`make serve-prod`: the nginx front before gunicorn) on free loopback ports and talk HTTP to
it: /healthz, refusals before the body is read, the chunked body limit, and Prometheus
counts summed across two worker processes. Needs nginx (skipped locally without it,
required under CI=true)."""

from __future__ import annotations

import http.client
import json
import socket
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest
from prometheus_client.parser import text_string_to_metric_families

from .front_support import Front, get
from .test_docker import DOCKERFILE, dockerfile_instructions, stages

ROOT = Path(__file__).resolve().parents[2]
#: serial: a live server's latency and worker counts, run alone after the parallel part
#: (Makefile).
pytestmark = [pytest.mark.slow, pytest.mark.serial]


def _container_argv() -> list[str]:
    final = stages(dockerfile_instructions(DOCKERFILE.read_text(encoding="utf-8")))[-1]
    argv = json.loads([args for kw, args in final if kw == "CMD"][0])
    # The image puts the venv's bin first on PATH; here that is this interpreter.
    assert argv[0] == "python"
    return [sys.executable, *argv[1:]]


def _get(port: int, path: str, headers=None, timeout=5.0):
    return get(port, path, headers=headers, timeout=timeout)


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("front")
    front = Front(tmp, {"GAINCHAIN_API_KEYS": "serve-test-key",
                        "GAINCHAIN_MAX_BODY_BYTES": "4096", "GAINCHAIN_LOG_LEVEL": "INFO"},
                  argv=_container_argv())
    try:
        front.wait_ready()
        yield {"port": front.port, "metrics_port": front.metrics_port,
               "healthz_polls": front.healthz_polls, "metrics_dir": tmp / "prom",
               "proc": front.proc, "log_path": front.log_path}
    finally:
        front.stop()


def test_healthz_200_with_security_headers(server):
    status, headers, body = _get(server["port"], "/healthz")
    assert status == 200
    assert json.loads(body)
    assert headers["X-Content-Type-Options"] == "nosniff"
    assert headers["Cache-Control"] == "no-store"


def test_oversized_body_is_refused_before_it_is_sent(server):
    # The front refuses a declared 10 MB body at once (client_max_body_size, from
    # GAINCHAIN_MAX_BODY_BYTES), as problem+json, without reading it.
    with socket.create_connection(("127.0.0.1", server["port"]), timeout=10) as sock:
        sock.sendall(b"POST /v1/designs HTTP/1.1\r\nHost: t\r\n"
                     b"Content-Type: application/json\r\nContent-Length: 10485760\r\n\r\n{")
        data = b""
        while b"\r\n\r\n" not in data:
            chunk = sock.recv(65536)
            if not chunk:
                break
            data += chunk
    assert data.startswith(b"HTTP/1.1 413"), data[:200]
    assert b"application/problem+json" in data


def test_body_without_key_is_401(server):
    status, headers, body = get(server["port"], "/v1/designs", method="POST", body=b"{}",
                                headers={"Content-Type": "application/json"})
    assert status == 401 and headers["Content-Type"] == "application/problem+json"


def test_chunked_body_over_the_limit_is_413(server):
    conn = http.client.HTTPConnection("127.0.0.1", server["port"], timeout=10)
    try:
        conn.putrequest("POST", "/v1/designs")
        conn.putheader("Authorization", "Bearer serve-test-key")
        conn.putheader("Content-Type", "application/json")
        conn.putheader("Transfer-Encoding", "chunked")
        conn.endheaders()
        payload = b'{"name":"' + b"x" * 6000 + b'"}'
        for i in range(0, len(payload), 1000):
            part = payload[i:i + 1000]
            conn.send(b"%x\r\n%s\r\n" % (len(part), part))
        conn.send(b"0\r\n\r\n")
        resp = conn.getresponse()
        body = resp.read()
    finally:
        conn.close()
    assert resp.status == 413, body
    assert resp.getheader("Content-Type") == "application/problem+json"


def _worker_pids(metrics_dir: Path) -> set[str]:
    """Processes that have written a counter file (prometheus_client multiprocess mode
    names them ``counter_<pid>.db``)."""
    return {p.stem.rsplit("_", 1)[-1] for p in metrics_dir.glob("counter_*.db")}


def test_metrics_add_up_across_workers(server):
    # The kernel may hand every short request to the same sync worker, so keep sending
    # rounds of concurrent requests until both workers have counted some (bounded), then
    # check that /metrics sums exactly what was sent.
    port, metrics_dir = server["port"], Path(server["metrics_dir"])

    def hit(_):
        return _get(port, "/healthz")[0]

    sent, deadline = 0, time.monotonic() + 30.0
    with ThreadPoolExecutor(max_workers=8) as pool:
        while True:
            statuses = list(pool.map(hit, range(40)))
            assert statuses == [200] * 40
            sent += 40
            if len(_worker_pids(metrics_dir)) >= 2 or time.monotonic() > deadline:
                break
    pids = _worker_pids(metrics_dir)
    assert len(pids) == 2, (pids, sent)  # both workers counted requests
    assert _get(port, "/metrics")[0] == 404  # not on the API port
    status, headers, body = _get(server["metrics_port"], "/metrics")
    assert status == 200 and headers["Content-Type"].startswith("text/plain")
    total = 0.0
    for family in text_string_to_metric_families(body.decode()):
        for sample in family.samples:
            if (sample.name == "gainchain_http_requests_total"
                    and sample.labels.get("endpoint") == "/healthz"):
                total += sample.value
    # Earlier tests in this module hit /healthz once; the fixture polled until ready.
    assert total == sent + 1 + server["healthz_polls"]  # /metrics summed both workers


def test_stderr_is_one_json_object_per_line(server):
    _get(server["port"], "/healthz", headers={"X-Request-ID": "serve-log-check"})
    time.sleep(0.3)
    lines = [line for line in server["log_path"].read_text().splitlines() if line.strip()]
    docs = [json.loads(line) for line in lines]  # raises on any non-JSON line
    assert any(d.get("logger", "").startswith("gunicorn") for d in docs)  # gunicorn's own
    assert all(isinstance(d, dict) and d.get("msg") is not None for d in docs)
    assert any(d.get("request_id") == "serve-log-check" and d.get("event") == "request"
               for d in docs)
