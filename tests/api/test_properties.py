"""Property tests (hypothesis) over random valid design requests: never a 5xx, every reply
strict JSON (RFC 8259: no NaN/Infinity), finite as-built figures when the target is met,
and a status that agrees with the figures and the shortfalls (issue 2's definition:
meets = f_low <= target, f_high >= target, |gain_db - target| <= tolerance).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from service.engine.model.catalog import BUILTIN_OPAMPS


@pytest.fixture(scope="module")
def module_client():
    from service import create_app

    # The properties are about the answers, not the compute budget (tests/ops has its own
    # budget tests): a generous budget keeps a slow corner of the request space from
    # turning into a 503 when the suite shares the machine's cores.
    return create_app({"TESTING": True, "GAINCHAIN_COMPUTE_BUDGET_S": 120.0}).test_client()


@st.composite
def design_requests(draw):
    op = draw(st.sampled_from(BUILTIN_OPAMPS))
    kind = draw(st.sampled_from(["single", "dual"]))
    span = draw(st.floats(op.supply_min_v, op.supply_max_v))
    supply = ({"kind": "single", "v_pos": span} if kind == "single"
              else {"kind": "dual", "v_pos": span / 2, "v_neg": -span / 2})
    log_f_low = draw(st.floats(0.0, 4.0))
    f_low = 10.0 ** log_f_low
    f_high = 10.0 ** draw(st.floats(log_f_low + math.log10(5.0), 7.0))
    if kind == "dual" and draw(st.booleans()):
        f_low = 0  # DC coupled
    gain_db = draw(st.floats(1.0, 100.0))
    return {
        "target": {"gain_db": gain_db, "f_low_hz": f_low, "f_high_hz": f_high},
        "supply": supply,
        "opamp": op.id,
        "topology": draw(st.sampled_from(["non_inverting", "inverting"])),
        "signal": {"input_peak_v": draw(st.sampled_from([1e-4, 1e-3, 1e-2])),
                   # 0 ohm is left out here: it has its own strict xfail test below.
                   "source_impedance_ohm": draw(st.sampled_from([10, 50, 600])),
                   "load_ohm": draw(st.sampled_from([2e3, 1e4, 1e5]))},
    }


def _finite(x):
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


#: Found by the fuzzing: one stage of 1 + Rf/Rg = 70001 on a part whose A0 is 56234 (95 dB),
#: whose loop crosses unity where 1/beta = A0 (auto mode now designs 2 stages for it, so the
#: example fixes the count).
A0_LIMITED = {"target": {"gain_db": 90.0, "f_low_hz": 1.0, "f_high_hz": 10.0},
              "supply": {"kind": "single", "v_pos": 5.0}, "opamp": "gc-fast-50m-g5",
              "topology": "non_inverting", "stages": 1,
              "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 10, "load_ohm": 2000.0}}


@settings(max_examples=40, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(req=design_requests())
@example(req=A0_LIMITED)
def test_random_valid_targets(module_client, strict_json, req):
    resp = module_client.post("/v1/designs", json=req)
    assert resp.status_code < 500, (req, resp.data[:600])
    assert resp.status_code == 200, resp.data[:600]
    body = strict_json(resp.data)  # strict JSON, every reply
    ab = body["performance"]["as_built"]
    t = body["target"]
    if body["status"] == "meets_target":
        for key in ("gain", "gain_db", "f_high_hz", "bandwidth_hz"):
            assert _finite(ab[key]), (key, ab[key])
        assert _finite(ab["f_low_hz"]) or (ab["f_low_hz"] is None and t["f_low_hz"] == 0)
        for stage in ab["stages"]:
            assert _finite(stage["gain"]) and _finite(stage["f_high_hz"])
    # Status consistent with the figures (issue 2's definition), shortfalls included.
    expected = []
    f_low = 0.0 if ab["f_low_hz"] is None else ab["f_low_hz"]
    if f_low > t["f_low_hz"]:
        expected.append("f_low_hz")
    if ab["f_high_hz"] is None or not ab["f_high_hz"] >= t["f_high_hz"]:
        expected.append("f_high_hz")
    if ab["gain_db"] is None or abs(ab["gain_db"] - t["gain_db"]) > t["gain_tolerance_db"]:
        expected.append("gain_db")
    # Every failed build check follows the target figures, in the checks' order (issue 8).
    failed = [c for c in body["checks"] if c["passed"] is False]
    expected += [c["check"] for c in failed]
    # A circuit that may oscillate meets no target: every signal stage's noise gain 1/beta
    # at the loop crossover is, with the ground leg and coupling capacitors short there,
    # 1 + Rf/Rg (non-inverting) or 1 + Rf/(Rin + Rs) (inverting, Rs in front of stage 1
    # only): common practice, checked against the stability entries independently.
    circuit = body["circuit"]
    for k, stage in enumerate(circuit["stages"]):
        if circuit["topology"] == "inverting":
            front = circuit["source_impedance_ohm"] if k == 0 else 0.0
            ng = 1.0 + stage["r_feedback_ohm"] / (stage["r_in_ohm"] + front)
        else:
            ng = 1.0 + stage["r_feedback_ohm"] / stage["r_gain_ohm"]
        entry = [c for c in body["checks"] if c["check"] == "stability" and c["stage"] == k + 1]
        # A flat-band noise gain above the op-amp's A0 leaves the loop gain under 1 there:
        # it crosses unity below the ground-leg corner, where |A| = A0 and 1/beta has risen
        # to A0 (loop gain A0 beta; common practice). Within 10 % of A0 the crossing sits
        # low enough for the capacitors to matter, and neither figure is exact.
        a0 = 10.0 ** (circuit["opamp"]["a0_db"] / 20.0)
        if ng < 0.9 * a0:
            assert entry[0]["value"] == pytest.approx(ng, rel=0.02)
        elif ng > 1.1 * a0:
            assert entry[0]["value"] == pytest.approx(a0, rel=0.02)
    # Issue 9: the predicted yield under the echoed tolerances counts last.
    has_yield = body["yield"]["predicted"] < t["min_yield"]
    if has_yield:
        expected.append("yield")
    assert [s["quantity"] for s in body["shortfalls"]] == expected
    assert body["status"] == ("meets_target" if not expected else "target_not_met")
    n_target = len(expected) - len(failed) - has_yield
    if has_yield:
        s = body["shortfalls"][-1]
        assert s["target"] == t["min_yield"] and s["achieved"] == body["yield"]["predicted"]
    for s, c in zip(body["shortfalls"][n_target:n_target + len(failed)], failed, strict=True):
        assert (s["stage"], s["target"], s["achieved"]) == (c["stage"], c["limit"], c["value"])
    for s in body["shortfalls"][:n_target]:
        assert s["target"] == t[s["quantity"]]
        assert s["achieved"] == (f_low if s["quantity"] == "f_low_hz" else ab[s["quantity"]])
    assert body["stage_count"] == len(body["circuit"]["stages"]) == len(ab["stages"])


def test_zero_source_impedance_is_not_a_500(module_client, strict_json):
    req = {"target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
           "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-cmos-rr-10m",
           "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 0, "load_ohm": 10000}}
    resp = module_client.post("/v1/designs", json=req)
    assert resp.status_code == 200, resp.data[:300]
    assert strict_json(resp.data)["status"] == "meets_target"
