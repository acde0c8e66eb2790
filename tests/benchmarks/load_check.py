"""Bounded, loopback-only load check of the service under gunicorn (issue 5, "Proof").

Starts the production command (``gunicorn -c docker/gunicorn.conf.py 'service:create_app()'``)
with 2 sync workers on a free 127.0.0.1 port, then runs fixed-duration phases with N client
connections (threads + http.client, standard library only):

1. ``GET /healthz``                              - the trivial endpoint;
2. ``POST /v1/designs``, the README example family, the target gain drawn afresh for every
   request (``varied_examples``: no cache can answer a repeat) - for the design/healthz ratio;
3. ``POST /v1/designs``, a mix of valid and invalid requests (400, 415, 422 expected).

Reports requests/s, p50/p99 latency, unexpected statuses (must be 0) and each worker's RSS
before and after. Workers are not recycled during the run (``--max-requests 0``) so that the
RSS before/after belongs to the same processes. Speed goals live here, never in tests.

    .venv/bin/python tests/benchmarks/load_check.py [--seconds 10] [--connections 4]
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
HOST = "127.0.0.1"  # loopback only, by design
START_TIMEOUT_S = 60

README_EXAMPLE = {
    "name": "ultrasonic-rx-40k",
    "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
    "supply": {"kind": "single", "v_pos": 5},
    "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 200, "load_ohm": 10000},
    "opamp": None,  # filled from GET /v1/opamps
}


#: Designs in the varied plan: more than a phase sends (about 100-200 per 10 s on 2 cores),
#: so no request repeats; each connection starts a quarter of the plan further on.
VARIED_DESIGNS = 4000


def varied_examples(opamp_id: str, count: int = VARIED_DESIGNS, seed: int = 11) -> list[bytes]:
    """``count`` README example bodies, each with its own target gain (54..64 dB, distinct)."""
    import random

    rng = random.Random(seed)
    gains = rng.sample(range(54_000, 64_000), count)  # millidecibels, all different
    out = []
    for g in gains:
        target = dict(README_EXAMPLE["target"], gain_db=g / 1000)
        out.append(_json(dict(README_EXAMPLE, opamp=opamp_id, target=target)))
    return out


def _json(doc) -> bytes:
    return json.dumps(doc).encode()


def request_mix(opamp_id: str) -> list[tuple[str, str, bytes, str, int]]:
    """(name, path, body, content type, expected status); 7 valid : 5 invalid, in a cycle."""
    valid = dict(README_EXAMPLE, opamp=opamp_id)
    variants = [
        dict(valid, target={"gain_db": 40, "f_low_hz": 20, "f_high_hz": 20000}),
        dict(valid, topology="inverting"),
        dict(valid, supply={"kind": "dual", "v_pos": 2.5, "v_neg": -2.5}),
    ]
    mix = [("valid", "/v1/designs", _json(valid), "application/json", 200)] * 4
    mix += [("valid-variant", "/v1/designs", _json(v), "application/json", 200) for v in variants]
    mix += [
        ("malformed-json", "/v1/designs", b'{"target": ', "application/json", 400),
        ("wrong-content-type", "/v1/designs", _json(valid), "text/plain", 415),
        ("zero-gain", "/v1/designs",
         _json(dict(valid, target={"gain_db": 0, "f_low_hz": 2000, "f_high_hz": 200000})),
         "application/json", 422),
        ("unknown-field", "/v1/designs", _json(dict(valid, gian_db=60)), "application/json",
         422),
        ("unknown-opamp", "/v1/designs", _json(dict(valid, opamp="no-such-part")),
         "application/json", 422),
    ]
    return mix


def free_port() -> int:
    with socket.socket() as s:
        s.bind((HOST, 0))
        return s.getsockname()[1]


def worker_pids(master_pid: int) -> list[int]:
    pids = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        ppid = int(stat.rsplit(")", 1)[1].split()[1])
        if ppid == master_pid:
            pids.append(int(entry.name))
    return sorted(pids)


def rss_kib(pid: int) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1])
    return -1


class Phase:
    def __init__(self, name: str):
        self.name = name
        self.latencies_s: list[float] = []
        self.statuses: dict[int, int] = {}
        self.unexpected: dict[str, int] = {}
        self.errors = 0
        self.elapsed_s = 0.0
        self.lock = threading.Lock()

    def summary(self) -> dict:
        lat = sorted(self.latencies_s)
        n = len(lat)

        def pct(p):
            return lat[min(n - 1, int(round(p / 100 * (n - 1))))] * 1e3 if n else float("nan")

        return {"phase": self.name, "requests": n, "seconds": round(self.elapsed_s, 2),
                "req_per_s": round(n / self.elapsed_s, 1) if self.elapsed_s else 0.0,
                "p50_ms": round(pct(50), 2), "p99_ms": round(pct(99), 2),
                "statuses": dict(sorted(self.statuses.items())),
                "unexpected": sum(self.unexpected.values()) + self.errors,
                "unexpected_detail": self.unexpected, "connection_errors": self.errors}


def drive(port: int, phase: Phase, plan, seconds: float, connections: int) -> dict:
    """Run `plan` (a list of requests, cycled) on `connections` threads for `seconds`."""
    stop_at = time.monotonic() + seconds

    def client(offset: int):
        conn = http.client.HTTPConnection(HOST, port, timeout=30)
        i = offset
        local_lat, local_status, local_bad, local_err = [], {}, {}, 0
        while time.monotonic() < stop_at:
            name, method, path, body, ctype, expected = plan[i % len(plan)]
            i += 1
            headers = {"Content-Type": ctype} if body is not None else {}
            t0 = time.perf_counter()
            try:
                conn.request(method, path, body=body, headers=headers)
                resp = conn.getresponse()
                resp.read()
                status = resp.status
            except (OSError, http.client.HTTPException):
                local_err += 1
                conn.close()
                continue
            local_lat.append(time.perf_counter() - t0)
            local_status[status] = local_status.get(status, 0) + 1
            if status != expected:
                key = f"{name}: {status} (expected {expected})"
                local_bad[key] = local_bad.get(key, 0) + 1
        conn.close()
        with phase.lock:
            phase.latencies_s.extend(local_lat)
            for k, v in local_status.items():
                phase.statuses[k] = phase.statuses.get(k, 0) + v
            for k, v in local_bad.items():
                phase.unexpected[k] = phase.unexpected.get(k, 0) + v
            phase.errors += local_err

    spread = max(1, len(plan) // connections)  # connections start apart in the plan
    threads = [threading.Thread(target=client, args=(k * spread,))
               for k in range(connections)]
    started = time.monotonic()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    phase.elapsed_s = time.monotonic() - started
    return phase.summary()


def get_json(port: int, path: str):
    conn = http.client.HTTPConnection(HOST, port, timeout=10)
    try:
        conn.request("GET", path)
        resp = conn.getresponse()
        return resp.status, json.loads(resp.read() or b"null")
    finally:
        conn.close()


def start_server(port: int, workers: int) -> subprocess.Popen:
    env = {k: v for k, v in os.environ.items()
           if not k.startswith("GAINCHAIN_") and k != "PROMETHEUS_MULTIPROC_DIR"}
    env.update({"HOST": HOST, "PORT": str(port), "GAINCHAIN_WORKERS": str(workers),
                "GAINCHAIN_LOG_LEVEL": "WARNING", "OMP_NUM_THREADS": "1"})
    gunicorn = Path(sys.executable).parent / "gunicorn"
    argv = [str(gunicorn), "-c", "docker/gunicorn.conf.py", "--max-requests", "0",
            "service:create_app()"]
    return subprocess.Popen(argv, cwd=ROOT, env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)


def wait_ready(proc: subprocess.Popen, port: int) -> None:
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise SystemExit(f"gunicorn exited with {proc.returncode}")
        try:
            if get_json(port, "/healthz")[0] == 200:
                return
        except OSError:
            pass
        time.sleep(0.2)
    raise SystemExit("gunicorn did not become ready")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=10.0, help="duration of each phase")
    parser.add_argument("--connections", type=int, default=4)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)

    port = free_port()
    proc = start_server(port, args.workers)
    try:
        wait_ready(proc, port)
        status, catalog = get_json(port, "/v1/opamps")
        assert status == 200, status
        ids = [o["id"] for o in catalog["opamps"]]
        opamp_id = "gc-cmos-rr-10m" if "gc-cmos-rr-10m" in ids else ids[0]
        healthz_plan = [("healthz", "GET", "/healthz", None, "", 200)]
        design_plan = [("readme-example-varied", "POST", "/v1/designs", body,
                        "application/json", 200) for body in varied_examples(opamp_id)]
        warm_plan = [("readme-example-warm", "POST", "/v1/designs", body, "application/json",
                      200) for body in varied_examples(opamp_id, 40, seed=12)]
        mix_plan = [(n, "POST", p, b, c, e) for n, p, b, c, e in request_mix(opamp_id)]

        # Warm-up (imports, caches, first allocations) before the RSS baseline.
        drive(port, Phase("warm-up"), healthz_plan + warm_plan + mix_plan,
              min(3.0, args.seconds), args.connections)
        workers = worker_pids(proc.pid)
        rss_before = {pid: rss_kib(pid) for pid in workers}

        results = []
        for name, plan in (("healthz", healthz_plan), ("design-readme", design_plan),
                           ("design-mix", mix_plan)):
            summary = drive(port, Phase(name), plan, args.seconds, args.connections)
            summary["rss_kib_after_phase"] = {pid: rss_kib(pid) for pid in workers}
            results.append(summary)
        workers_after = worker_pids(proc.pid)
        rss_after = {pid: rss_kib(pid) for pid in workers_after}
    finally:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()

    by_name = {r["phase"]: r for r in results}
    ratio = by_name["design-readme"]["req_per_s"] / by_name["healthz"]["req_per_s"]
    total = sum(r["requests"] for r in results)
    unexpected = sum(r["unexpected"] for r in results)
    print(f"gunicorn: {args.workers} gthread workers, {args.connections} connections, "
          f"{args.seconds:g} s per phase, {total} requests measured, loopback {HOST}:{port}")
    print(f"{'phase':<15}{'requests':>9}{'req/s':>9}{'p50 ms':>9}{'p99 ms':>9}"
          f"{'unexpected':>12}  statuses")
    for r in results:
        print(f"{r['phase']:<15}{r['requests']:>9}{r['req_per_s']:>9}{r['p50_ms']:>9}"
              f"{r['p99_ms']:>9}{r['unexpected']:>12}  {r['statuses']}")
        print(f"    worker RSS after this phase (KiB): {r['rss_kib_after_phase']}")
        for key, count in r["unexpected_detail"].items():
            print(f"    unexpected: {key} x{count}")
    print(f"design (README example, gain drawn per request) / healthz requests/s ratio: "
          f"{ratio:.3f} (goal >= 0.5)")
    same = sorted(rss_before) == sorted(rss_after)
    for pid in sorted(set(rss_before) | set(rss_after)):
        before, after = rss_before.get(pid), rss_after.get(pid)
        drift = f"{after - before:+d} KiB" if before and after else "n/a"
        print(f"worker {pid}: RSS before {before} KiB, after {after} KiB, drift {drift}")
    if not same:
        print("note: the worker set changed during the run (a worker was restarted)")
    print(json.dumps({"results": results, "ratio_design_to_healthz": round(ratio, 4),
                      "rss_kib_before": rss_before, "rss_kib_after": rss_after,
                      "unexpected_total": unexpected}))
    return 1 if unexpected else 0


if __name__ == "__main__":
    sys.exit(main())
