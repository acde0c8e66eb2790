"""Benchmark of the engine and the analyses (prints medians; not a test).

Run: ``make bench`` or ``.venv/bin/python tests/benchmarks/bench_engine.py``.

Prints, on the machine it runs on:

1. design requests per second through the Flask app (test client): a default request, and
   one with 10,000 Monte Carlo trials;
2. the Monte Carlo time for a 4-stage design at 10,000 trials and 200 frequencies (goal:
   under 100 ms on 2 cores), for each per-trial model (stage-product: stiff REF;
   chain-nodal: shared divider);
3. the ratio of one as-built evaluation in-process to one ngspice run of the same circuit.

Each section reports "unavailable" with the reason instead of failing, so the script runs
on partial builds too.
"""

from __future__ import annotations

import math
import os
import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import replace

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
sys.path.insert(0, ROOT)
sys.path.insert(0, os.path.join(ROOT, "tests"))

import numpy as np  # noqa: E402

#: A scenario of our own: 5 V single-supply receive chain, 60 dB from 2 kHz to 200 kHz.
DEFAULT_REQUEST = {
    "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
    "supply": {"kind": "single", "v_pos": 5},
    "opamp": "gc-cmos-rr-10m",
}


def median_seconds(fn, repeat: int) -> float:
    """Median wall-clock time of ``fn`` over ``repeat`` runs."""
    return median_wall_cpu(fn, repeat)[0]


def median_wall_cpu(fn, repeat: int) -> tuple[float, float]:
    """Median wall-clock and CPU (this process) times; CPU time is the steadier figure on a
    machine shared with other jobs."""
    wall, cpu = [], []
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return statistics.median(wall), statistics.median(cpu)


def section(title):
    def wrap(fn):
        def run():
            print(f"\n## {title}")
            try:
                fn()
            except Exception as exc:  # a benchmark reports, it does not fail
                print(f"unavailable: {type(exc).__name__}: {exc}")
        return run
    return wrap


def _client():
    import logging

    from service import create_app

    logging.getLogger("gainchain").setLevel(logging.WARNING)
    return create_app({"TESTING": True}).test_client()


@section("Design requests per second (Flask test client, medians)")
def bench_requests():
    client = _client()

    def post(body):
        resp = client.post("/v1/designs", json=body)
        assert resp.status_code == 200, resp.data[:300]

    post(DEFAULT_REQUEST)  # warm up
    t = median_seconds(lambda: post(DEFAULT_REQUEST), 30)
    print(f"default request:            {1 / t:8.1f} req/s  ({t * 1e3:.2f} ms)")
    mc_body = dict(DEFAULT_REQUEST, tolerance={"trials": 10_000, "seed": 1})
    post(mc_body)
    t = median_seconds(lambda: post(mc_body), 5)
    print(f"with 10,000 MC trials:      {1 / t:8.2f} req/s  ({t * 1e3:.1f} ms)")


def four_stage_circuit():
    from schemas.circuit import CircuitSchema

    client = _client()
    body = dict(DEFAULT_REQUEST, stages=4)
    resp = client.post("/v1/designs", json=body)
    assert resp.status_code == 200, resp.data[:300]
    d = resp.get_json()
    return CircuitSchema().load(d["circuit"]), d["performance"]["as_built"]


@section("Monte Carlo: 4-stage design, 10,000 trials x 200 frequencies (goal < 100 ms)")
def bench_montecarlo():
    from service.engine.judge import montecarlo as mc

    circuit, ab = four_stage_circuit()
    f_low = ab["f_low_hz"] if ab["f_low_hz"] is not None else math.nan
    grid = mc.analysis_grid(f_low, ab["f_high_hz"], 200)
    tol = mc.Tolerances(1.0, 10.0, 10.0)
    variants = {"as designed": circuit}
    if circuit.bias is not None:
        variants["buffered VMID"] = replace(circuit, bias=replace(circuit.bias, buffered=True))
        variants["shared VMID"] = replace(circuit, bias=replace(circuit.bias, buffered=False))
    for label, c in variants.items():
        model = mc.model_for(c)
        wall, cpu = median_wall_cpu(lambda c=c: mc.run(c, trials=10_000, tol=tol,
                                                        rng=np.random.default_rng(1),
                                                        grid_hz=grid), 7)
        print(f"{label:14s} model {model:20s}: {wall * 1e3:7.1f} ms wall, {cpu * 1e3:7.1f} ms "
              f"cpu  ({os.cpu_count()} cpus, load {os.getloadavg()[0]:.2f})")
    wall, cpu = median_wall_cpu(lambda: mc.run(circuit, trials=10_000, tol=tol,
                                               rng=np.random.default_rng(1), grid_hz=grid,
                                               model=mc.CHAIN_NODAL), 3)
    print(f"reference: chain-nodal solver itself: {wall * 1e3:7.1f} ms wall, "
          f"{cpu * 1e3:7.1f} ms cpu")
    t = median_seconds(lambda: mc.tolerance_block(
        circuit, target=None, as_built=ab, trials=10_000, seed=1, resistor_tolerance_pct=1.0,
        capacitor_tolerance_pct=10.0, gbw_tolerance_pct=10.0), 5)
    print(f"whole tolerance block (as designed, incl. worst case): {t * 1e3:.1f} ms")


@section("As-built evaluation in-process vs one ngspice run of the same deck")
def bench_ngspice_ratio():
    import shutil

    from analyses import spice_deck

    from service.engine.solver import chain
    from service.engine.solver.corners import find_band

    exe = shutil.which("ngspice")
    if exe is None:
        raise RuntimeError("ngspice not installed")
    circuit, _ = four_stage_circuit()

    def in_process():
        find_band(lambda f: np.abs(chain.solve(circuit, f).vout), 1)

    lines, out = spice_deck.netlist(circuit, signal_ac=1.0, supply_ac=0.0)
    deck = "\n".join(["gainchain bench", *lines, ".control", "ac dec 24 1e-3 1e10",
                      f"print vdb{out[1:]}", "quit", ".endc", ".end", ""])

    def ngspice():
        with tempfile.TemporaryDirectory() as tmp:
            with open(os.path.join(tmp, "deck.cir"), "w") as fh:
                fh.write(deck)
            subprocess.run([exe, "-b", "deck.cir"], cwd=tmp, capture_output=True,
                           timeout=120, check=True)

    t_in = median_seconds(in_process, 50)
    t_ng = median_seconds(ngspice, 7)
    print(f"in-process as-built (grid + refinement): {t_in * 1e3:.3f} ms")
    print(f"ngspice -b, .ac 24/decade 1 mHz..10 GHz: {t_ng * 1e3:.1f} ms")
    print(f"ratio in-process / ngspice: {t_in / t_ng:.4f}  (ngspice is {t_ng / t_in:.0f}x slower)")


@section("Noise and supply-rejection blocks (4-stage design)")
def bench_noise():
    from service.engine.judge import noise, supply_rejection

    circuit, ab = four_stage_circuit()
    t = median_seconds(lambda: noise.noise_block(circuit, as_built=ab, input_peak_v=0.001), 20)
    print(f"noise block: {t * 1e3:.2f} ms")
    t = median_seconds(lambda: supply_rejection.supply_rejection_block(circuit), 20)
    print(f"supply_rejection block: {t * 1e3:.2f} ms")


if __name__ == "__main__":
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    bench_requests()
    bench_montecarlo()
    bench_ngspice_ratio()
    bench_noise()
