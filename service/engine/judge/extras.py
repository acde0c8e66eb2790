"""The analyses added to every design and analysis response (one entry point for the pipeline).

``extra_blocks(circuit, *, target, input_peak_v, as_built, options) -> dict`` returns the
JSON-ready blocks, whose keys go at the top level of the response:

* ``noise`` (always; :mod:`service.engine.judge.noise`);
* ``supply_rejection`` (always; null on a dual supply;
  :mod:`service.engine.judge.supply_rejection`);
* ``tolerance`` when ``options["tolerance"]`` is given (:mod:`service.engine.judge.montecarlo`);
* ``response`` when ``options["response"]`` is given (:mod:`service.engine.judge.response`).

``options`` keys: ``tolerance`` ``{trials, seed, resistor_tolerance_pct,
c0g_tolerance_pct, capacitor_tolerance_pct, electrolytic_tolerance_pct,
gbw_tolerance_pct}`` (the last three may be absent or None); ``response`` ``{points, f_start_hz,
f_stop_hz}``; ``temperature_k`` (default 300); ``supply_rejection_hz`` (optional).
Non-finite numbers may remain; the JSON layer writes them as null.
"""

from __future__ import annotations

from service.engine.judge.montecarlo import tolerance_block
from service.engine.judge.noise import DEFAULT_TEMPERATURE_K, noise_block
from service.engine.judge.response import DEFAULT_POINTS, response_block
from service.engine.judge.supply_rejection import supply_rejection_block
from service.engine.model.circuit import Circuit, Target


def extra_blocks(circuit: Circuit, *, target: Target | None, input_peak_v: float | None,
                 as_built: dict, options: dict | None, check_deadline=None) -> dict:
    """The analyses blocks; ``check_deadline`` (optional) is the web layer's compute-budget
    checker, called between Monte Carlo chunks."""
    options = options or {}
    temperature_k = options.get("temperature_k")
    blocks = {
        "noise": noise_block(circuit, as_built=as_built, input_peak_v=input_peak_v,
                             temperature_k=(DEFAULT_TEMPERATURE_K if temperature_k is None
                                            else float(temperature_k))),
        "supply_rejection": supply_rejection_block(
            circuit, extra_hz=options.get("supply_rejection_hz")),
    }
    tol = options.get("tolerance")
    if tol is not None:
        blocks["tolerance"] = tolerance_block(
            circuit, target=target, as_built=as_built,
            trials=int(tol.get("trials", 2000)), seed=int(tol.get("seed", 1)),
            resistor_tolerance_pct=float(tol["resistor_tolerance_pct"]),
            capacitor_tolerance_pct=float(tol["capacitor_tolerance_pct"]),
            gbw_tolerance_pct=float(tol.get("gbw_tolerance_pct") or 0.0),
            c0g_tolerance_pct=_pct_or_none(tol.get("c0g_tolerance_pct")),
            electrolytic_tolerance_pct=_pct_or_none(tol.get("electrolytic_tolerance_pct")),
            check_deadline=check_deadline,
        )
    resp = options.get("response")
    if resp is not None:
        blocks["response"] = response_block(
            circuit, as_built=as_built, points=int(resp.get("points") or DEFAULT_POINTS),
            f_start_hz=resp.get("f_start_hz"), f_stop_hz=resp.get("f_stop_hz"))
    return blocks


def _pct_or_none(value):
    return None if value is None else float(value)
