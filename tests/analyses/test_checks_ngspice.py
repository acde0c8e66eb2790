"""Issue 8's build checks against ngspice and hand formulas, through the HTTP API.

Every figure here is read from a /v1/designs or /v1/analyses response (``checks``,
``headroom.stages[k].dc_error_v``, ``performance.as_built``, ``limits``) and recomputed
from the response's circuit JSON alone with ngspice (decks in spice_checks.py) or the
test-local numpy nodal solver, which test_spice_checks.py ties to ngspice. Scenarios and
op-amp figures are our own inventions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from analyses import spice_checks as sc
from analyses.circuits import inv_single, noninv_single, opamp

pytestmark = pytest.mark.ngspice

#: Invented op-amp objects (typical rounded figures, not real parts).
CMOS_DUAL = {"gbw_hz": 10e6, "slew_v_per_us": 8, "swing_to_pos_v": 0.05,
             "swing_to_neg_v": 0.05, "supply_min_v": 2.7, "supply_max_v": 6, "a0_db": 110,
             "vos_v": 1e-3, "ib_a": 10e-9, "iq_a": 1e-3, "channels_per_package": 2}
CMOS_SINGLE = {"gbw_hz": 3e6, "slew_v_per_us": 2, "swing_to_pos_v": 0.1,
               "swing_to_neg_v": 0.1, "supply_min_v": 2.7, "supply_max_v": 16, "a0_db": 100,
               "vos_v": 0.5e-3, "ib_a": 20e-9, "iq_a": 0.5e-3, "channels_per_package": 1}
BIPOLAR_DUAL = {"gbw_hz": 5e6, "slew_v_per_us": 5, "swing_to_pos_v": 1.2,
                "swing_to_neg_v": 1.2, "supply_min_v": 8, "supply_max_v": 36, "a0_db": 110,
                "cm_to_pos_v": 1.5, "cm_to_neg_v": 1.5, "vos_v": 2e-3, "ib_a": 50e-9,
                "iq_a": 1.5e-3, "channels_per_package": 2, "output_current_max_a": 0.02}

#: Design requests of our own (five shapes of the circuit model).
DESIGNS = {
    "sonar-rx-5v": {
        "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
        "supply": {"kind": "single", "v_pos": 5},
        "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 1000, "load_ohm": 10000},
        "opamp": CMOS_DUAL},
    "geophone-5v": {
        "target": {"gain_db": 40, "f_low_hz": 10, "f_high_hz": 10000},
        "supply": {"kind": "single", "v_pos": 5},
        "signal": {"input_peak_v": 0.005, "source_impedance_ohm": 2000, "load_ohm": 20000},
        "opamp": CMOS_SINGLE},
    "strain-12v": {
        "target": {"gain_db": 26, "f_low_hz": 100, "f_high_hz": 50000},
        "supply": {"kind": "single", "v_pos": 12},
        "signal": {"input_peak_v": 0.05, "source_impedance_ohm": 600, "load_ohm": 10000},
        "opamp": dict(CMOS_SINGLE, channels_per_package=2, supply_max_v=16)},
    "line-inv-dual": {
        "target": {"gain_db": 40, "f_low_hz": 20, "f_high_hz": 50000},
        "supply": {"kind": "dual", "v_pos": 15, "v_neg": -15},
        "signal": {"input_peak_v": 0.01, "source_impedance_ohm": 600, "load_ohm": 10000},
        "topology": "inverting", "opamp": "gc-jfet-4m"},
    "seismic-dc-dual": {
        "target": {"gain_db": 46, "f_low_hz": 0, "f_high_hz": 5000},
        "supply": {"kind": "dual", "v_pos": 12, "v_neg": -12},
        "signal": {"input_peak_v": 0.005, "source_impedance_ohm": 1000, "load_ohm": 10000},
        "opamp": BIPOLAR_DUAL},
}

#: Fixed circuits through /v1/analyses, so both bias kinds are certain to be exercised.
_OFFSET_AMP = opamp(vos_v=1.5e-3, ib_a=40e-9, iq_a=0.8e-3)
ANALYSES = {
    "fixed-bypassed": noninv_single(buffered=False, amp=_OFFSET_AMP),
    "fixed-buffered": noninv_single(buffered=True, amp=_OFFSET_AMP),
    "fixed-inv-bypassed": inv_single(buffered=False, amp=_OFFSET_AMP),
    # A small bypass leaves the shared bias node soft: stage 1's |V(O1)/V(X1)| peaks at
    # 14.6 near 4 Hz against 10.09 in band, the low-frequency artefact of issue 8 (4.7 uF
    # keeps the circuit stable; 2.2 uF and below it oscillates, test_spice_checks.py).
    "fixed-soft-bias": noninv_single(buffered=False, amp=_OFFSET_AMP, c_bypass_f=4.7e-6),
}
#: Fields the dataclass op-amp does not carry, added to an analysis circuit's op-amp JSON.
ANALYSIS_OPAMP_EXTRA = {"fixed-inv-bypassed": {"output_current_max_a": 0.002}}
ANALYSIS_TARGET = {"gain_db": 60, "f_low_hz": 20, "f_high_hz": 20000}
ANALYSIS_INPUT_V = 0.001
ALL_CASES = sorted(DESIGNS) + sorted(ANALYSES)
SINGLE_CASES = [n for n in ALL_CASES
                if n in ANALYSES or DESIGNS[n]["supply"]["kind"] == "single"]

CHECK_ORDER = ["output_swing", "input_common_mode", "slew_rate", "stability", "supply_ripple",
               "part_values", "output_current", "startup_time", "input_impedance",
               "supply_current"]
UNITS = {"output_swing": "V", "input_common_mode": "V", "slew_rate": "V/us",
         "stability": "", "supply_ripple": "dB", "output_current": "A",
         "startup_time": "s", "input_impedance": "ohm", "supply_current": "A"}
ENTRY_KEYS = {"check", "stage", "value", "limit", "unit", "passed", "detail"}
LIMIT_DEFAULTS = {"ripple_rejection_db": 20.0, "max_capacitor_f": 220e-6,
                  "min_resistor_ohm": 10.0, "max_resistor_ohm": 1e6, "max_startup_s": None,
                  "min_input_impedance_ohm": None, "max_current_a": None}


@pytest.fixture(scope="module")
def api():
    from service import create_app

    return create_app({"TESTING": True}).test_client()


_CACHE: dict = {}


def case(api, name: str) -> dict:
    """The response of a case (cached: same request, same bytes), with ``_input_peak_v``
    and ``_body`` added for the checks below (and ``circuit`` for an analysis)."""
    if name not in _CACHE:
        if name in DESIGNS:
            body = DESIGNS[name]
            resp = api.post("/v1/designs", json=body)
            peak = body["signal"]["input_peak_v"]
        else:
            circuit = ANALYSES[name].to_dict()
            circuit["opamp"].update(ANALYSIS_OPAMP_EXTRA.get(name, {}))
            body = {"circuit": circuit, "input_peak_v": ANALYSIS_INPUT_V,
                    "target": ANALYSIS_TARGET}
            resp = api.post("/v1/analyses", json=body)
            peak = ANALYSIS_INPUT_V
        assert resp.status_code == 200, resp.data[:500]
        d = resp.get_json()
        if name in ANALYSES:
            d["circuit"] = body["circuit"]
        d["_input_peak_v"], d["_body"] = peak, body
        _CACHE[name] = d
    return _CACHE[name]


def entries(d: dict, check: str) -> list:
    if "checks" not in d:
        pytest.fail("no top-level `checks` block in the response (issue 8)")
    return [e for e in d["checks"] if e["check"] == check]


def limits_of(d: dict) -> dict:
    """The limits a response was judged by: a design echoes them (item 5); an analysis
    given no ``limits`` is judged by the defaults (echoed too, if it echoes them)."""
    if "limits" in d or "circuit" not in d["_body"]:
        return d["limits"]
    return LIMIT_DEFAULTS


def units_in_packages(circuit: dict) -> tuple[int, int]:
    """(units used: stages + VMID follower, units fitted: packages x channels)."""
    used = len(circuit["stages"]) + (1 if circuit["bias"] and circuit["bias"]["buffered"]
                                     else 0)
    ch = circuit["opamp"].get("channels_per_package", 1)
    return used, math.ceil(used / ch) * ch


# ------------------------------------------------------------------------------ shape


@pytest.mark.parametrize("name", ALL_CASES)
def test_checks_block_shape_and_order(api, name):
    # Contract of issue 8, item 1: entry keys, check order, per-stage entries in signal
    # order, stability per unit (stages, VMID follower, spares), supply_ripple per
    # frequency of the supply_rejection block plus the band maximum, three part_values.
    d = case(api, name)
    circuit = d["circuit"]
    n = len(circuit["stages"])
    entries(d, "output_swing")
    checks = d["checks"]
    for e in checks:
        assert set(e) == ENTRY_KEYS, e
        assert isinstance(e["detail"], str) and e["detail"].strip()
        assert (e["passed"] is None) == (e["limit"] is None), e
        if e["check"] in UNITS:
            assert e["unit"] == UNITS[e["check"]], e
    names = [e["check"] for e in checks]
    runs = [c for i, c in enumerate(names) if i == 0 or names[i - 1] != c]
    assert runs == [c for c in CHECK_ORDER if c in runs], runs  # contiguous, in order
    for c in ("output_swing", "input_common_mode", "slew_rate"):
        assert [e["stage"] for e in entries(d, c)] == list(range(1, n + 1))
    used, fitted = units_in_packages(circuit)
    stab = [e["stage"] for e in entries(d, "stability")]
    # per unit (stages, then follower and spares), then the whole circuit's growth rate
    assert stab == list(range(1, n + 1)) + [None] * (fitted - n) + [None]
    ripple = entries(d, "supply_ripple")
    if circuit["bias"] is not None:
        assert len(ripple) == len(d["supply_rejection"]["frequency_hz"]) + 1
        assert all(e["unit"] == "dB" and e["stage"] is None for e in ripple)
    elif circuit["opamp"].get("psrr_db") is None:
        assert ripple == []
    parts = entries(d, "part_values")
    assert [e["unit"] for e in parts] == ["F", "ohm", "ohm"]
    has_io = circuit["opamp"].get("output_current_max_a") is not None
    assert bool(entries(d, "output_current")) == has_io
    for c in ("startup_time", "input_impedance", "supply_current"):
        assert len(entries(d, c)) == 1 and entries(d, c)[0]["stage"] is None


@pytest.mark.parametrize("name", ALL_CASES)
def test_status_and_shortfalls_count_every_check(api, name):
    # Item 3: meets_target iff the target is met and every check with a limit passes; each
    # failing check is a shortfall {"quantity", "stage", "target": limit, "achieved": value}.
    d = case(api, name)
    entries(d, "output_swing")
    failing = [e for e in d["checks"] if e["passed"] is False]
    listed = [s for s in d["shortfalls"] if s["quantity"] in CHECK_ORDER]
    expected = [{"quantity": e["check"], "stage": e["stage"], "target": e["limit"],
                 "achieved": e["value"]} for e in failing]
    assert len(listed) == len(expected)
    assert all(s in listed for s in expected), (listed, expected)
    target_short = [s for s in d["shortfalls"] if s["quantity"] not in CHECK_ORDER]
    assert (d["status"] == "meets_target") == (not failing and not target_short)


@pytest.mark.parametrize("name", ALL_CASES)
def test_limits_block_echo_and_analysis_round_trip(api, name):
    # Item 5: the limits a design was judged by, defaults filled in; analysing
    # {circuit, input_peak_v, target, limits} reproduces its checks and status exactly.
    d = case(api, name)
    entries(d, "output_swing")
    if name in DESIGNS:
        assert d["limits"] == LIMIT_DEFAULTS
    else:
        assert d.get("limits", LIMIT_DEFAULTS) == LIMIT_DEFAULTS
    body = {"circuit": d["circuit"], "input_peak_v": d["_input_peak_v"],
            "target": d["target"] if name in DESIGNS else ANALYSIS_TARGET,
            "limits": limits_of(d)}
    resp = api.post("/v1/analyses", json=body)
    assert resp.status_code == 200, resp.data[:400]
    a = resp.get_json()
    assert a["checks"] == d["checks"]
    assert a["status"] == d["status"] and a["shortfalls"] == d["shortfalls"]
    assert a.get("limits", LIMIT_DEFAULTS) == limits_of(d)


def test_limits_given_in_the_request_are_echoed_and_applied(api):
    # Item 5 and 1: request fields (supply.ripple_rejection_db, components.*,
    # signal.max_startup_s / min_input_impedance_ohm, supply.max_current_a) set the limits.
    body = {**DESIGNS["geophone-5v"],
            "supply": {"kind": "single", "v_pos": 5, "ripple_rejection_db": 6,
                       "max_current_a": 0.5},
            "components": {"max_capacitor_f": 1e-3, "min_resistor_ohm": 1,
                           "max_resistor_ohm": 2e6},
            "signal": {**DESIGNS["geophone-5v"]["signal"], "max_startup_s": 100,
                       "min_input_impedance_ohm": 1e3}}
    resp = api.post("/v1/designs", json=body)
    assert resp.status_code == 200, resp.data[:400]
    d = resp.get_json()
    assert d["limits"] == {"ripple_rejection_db": 6.0, "max_capacitor_f": 1e-3,
                           "min_resistor_ohm": 1.0, "max_resistor_ohm": 2e6,
                           "max_startup_s": 100.0, "min_input_impedance_ohm": 1e3,
                           "max_current_a": 0.5}
    assert all(e["limit"] == -6.0 for e in entries(d, "supply_ripple"))
    assert [e["limit"] for e in entries(d, "part_values")] == [1e-3, 1.0, 2e6]
    assert entries(d, "startup_time")[0]["limit"] == 100.0
    assert entries(d, "input_impedance")[0]["limit"] == 1e3
    assert entries(d, "supply_current")[0]["limit"] == 0.5
    for c in ("startup_time", "input_impedance", "supply_current"):
        assert entries(d, c)[0]["passed"] in (True, False)


# ------------------------------------------------------------------------------ DC errors


@pytest.mark.parametrize("name", ALL_CASES)
def test_dc_error_and_operating_point_vs_ngspice_op(api, name):
    # Item 2. Reference: ngspice `.op` with every op-amp unit (stages and VMID follower)
    # given a DC source vos_v in series with its + input and DC current sources |ib_a| into
    # both inputs; one run per source (superposition, exact for the linear model) and the
    # worst case is the sum of |change of V(O_k)| x magnitude. 1 % + 1 uV, as asked.
    d = case(api, name)
    nominal, worst = sc.worst_dc_error(d["circuit"])
    rows = d["headroom"]["stages"]
    assert len(rows) == len(worst)
    for row, v_op, w in zip(rows, nominal, worst, strict=True):
        assert abs(row["dc_error_v"] - w) <= 0.01 * w + 1e-6, (row["stage"], row, w)
        assert row["output_dc_v"] == pytest.approx(v_op, rel=1e-3, abs=1e-4)


# ------------------------------------------------------------------ swing, slew, corners

F_GRID = (100, 1e-3, 1e10)  # ngspice .ac: 100 points per decade, 1 mHz .. 10 GHz


def _stage_sweep(d: dict, sweep=F_GRID) -> tuple[sc.Net, dict]:
    net = sc.build(d["circuit"])
    probes = {"out": net.out}
    for k, (x, o) in enumerate(net.stages, start=1):
        probes[f"o{k}"] = (o, net.ref)
        probes[f"ox{k}"] = (o, "0")
        probes[f"x{k}"] = (x, "0")
    return net, sc.ac(net, None, probes, drive="signal", sweep=sweep)


def signal_band(d: dict) -> tuple[float, float]:
    """The frequencies the stated input may occupy (README "Build checks"): from the lower
    of the target's and the as-built low corner to the higher of their high corners; 1 mHz
    when DC coupled. Beyond it a single-pole op-amp makes 2 pi f |H| of a first stage tend
    to 2 pi GBW, a slope no in-band input reaches."""
    ab = d["performance"]["as_built"]
    target = d.get("target") or d["_body"].get("target")
    lows = [f for f in (ab["f_low_hz"], target and target["f_low_hz"]) if f]
    highs = [f for f in (ab["f_high_hz"], target and target["f_high_hz"]) if f]
    return (min(lows) if lows else 1e-3), max(highs)


@pytest.mark.parametrize("name", ALL_CASES)
def test_output_swing_and_slew_values_vs_ngspice(api, name):
    # Item 1. output_swing: required = dc_error_v (ngspice .op, as above) + input_peak_v x
    # max over f of |V(O_k) - V(REF)| / |Vs| (ngspice .ac); limit = min(hi - Vop, Vop - lo)
    # with [lo, hi] the swing window from the rails. slew_rate: max over f of
    # 2 pi f x input_peak_v x |V(O_k) - V(REF)| / |Vs| in V/us, limit slew_v_per_us. "Over
    # f" is the signal band (signal_band above), swept by ngspice at 400 points per decade.
    d = case(api, name)
    circuit, peak = d["circuit"], d["_input_peak_v"]
    amp, supply = circuit["opamp"], circuit["supply"]
    lo = (supply.get("v_neg") or 0.0) + amp["swing_to_neg_v"]
    hi = supply["v_pos"] - amp["swing_to_pos_v"]
    nominal, worst = sc.worst_dc_error(circuit)
    _, sw = _stage_sweep(d, sweep=(400, *signal_band(d)))  # the band's ends included
    f = sw["frequency"]
    swing, slew = entries(d, "output_swing"), entries(d, "slew_rate")
    for k in range(len(circuit["stages"])):
        h = np.abs(sw[f"o{k + 1}"])
        required = worst[k] + peak * h.max()
        assert swing[k]["value"] == pytest.approx(required, rel=0.01)
        assert swing[k]["limit"] == pytest.approx(min(hi - nominal[k], nominal[k] - lo),
                                                  rel=1e-3, abs=1e-4)
        assert swing[k]["passed"] == (swing[k]["value"] <= swing[k]["limit"])
        rate = np.max(2 * np.pi * f * peak * h) / 1e6
        assert slew[k]["value"] == pytest.approx(rate, rel=0.01)
        assert slew[k]["limit"] == amp["slew_v_per_us"]
        assert slew[k]["passed"] == (slew[k]["value"] <= slew[k]["limit"])


@pytest.mark.parametrize("name", ALL_CASES)
def test_input_common_mode_verdict_vs_nodal_levels(api, name):
    # Item 1, input_common_mode: the + input's DC level (ngspice `.op`) +- its AC peak
    # (input_peak_v x max over f of |V(+)/Vs|, ngspice `.ac`) must stay inside
    # [v_neg + cm_to_neg_v, v_pos - cm_to_pos_v]. Where the verdict hangs on whether the DC
    # offset error is counted (a margin under that error), either verdict is accepted.
    d = case(api, name)
    circuit, peak = d["circuit"], d["_input_peak_v"]
    amp, supply = circuit["opamp"], circuit["supply"]
    v_neg = supply.get("v_neg") or 0.0
    cm_lo = v_neg + amp.get("cm_to_neg_v", 0.0)
    cm_hi = supply["v_pos"] - amp.get("cm_to_pos_v", 0.0)
    net = sc.build(circuit)
    plus = net.plus_nodes
    live = sorted({p for p in plus if p != "0"})  # + inputs at GND (dual, inverting): 0 V
    nominal, sw = {"0": 0.0}, {"0": np.zeros(1)}
    if live:
        nominal.update(sc.op_sensitivities(sc.build(circuit, offsets=True), {}, live)[0])
        sw.update(sc.ac(net, None, {p: (p, "0") for p in live}, drive="signal",
                        sweep=F_GRID))
    _, worst = sc.worst_dc_error(circuit)
    cm = entries(d, "input_common_mode")
    for k, p in enumerate(plus):
        level = nominal[p]
        ac_peak = peak * float(np.max(np.abs(sw[p])))
        margin = min(level - ac_peak - cm_lo, cm_hi - level - ac_peak)
        slack = abs(amp.get("vos_v", 0.0)) + max(worst) + 1e-6
        if abs(margin) > slack:
            assert cm[k]["passed"] == (margin >= 0), (k + 1, cm[k], margin)
        assert cm[k]["unit"] == "V"


def _crossing(f, db, i0, ref_db, step):
    """First crossing of ref_db - 3 walking from index i0 by step; log-f/dB interpolation."""
    i = i0
    while 0 <= i + step < f.size:
        j = i + step
        if db[j] <= ref_db - 3.0:
            t = (db[i] - (ref_db - 3.0)) / (db[i] - db[j])
            return float(np.exp(np.log(f[i]) + t * (np.log(f[j]) - np.log(f[i]))))
        i = j
    return None


@pytest.mark.parametrize("name", ALL_CASES)
def test_peak_and_per_stage_figures_vs_ngspice_ac(api, name):
    # Item 6. Reference: ngspice `.ac` of the circuit. The cascade's peak frequency is where
    # |Vout/Vs| peaks (its value is the as-built gain); each stage's gain is
    # |V(O_k)/V(X_k)| at that frequency (0.1 %), its corners the -3 dB points of that ratio
    # nearest the peak frequency (1 %; log-f/dB interpolation on a 100 per decade sweep).
    d = case(api, name)
    ab = d["performance"]["as_built"]
    f_peak = ab["peak_hz"]
    net = sc.build(d["circuit"])
    probes = {"out": net.out}
    for k, (x, o) in enumerate(net.stages, start=1):
        probes[f"ox{k}"], probes[f"x{k}"] = (o, "0"), (x, "0")
    at = sc.ac(net, [f_peak], probes, drive="signal")
    assert abs(at["out"][0]) == pytest.approx(ab["gain"], rel=1e-3)
    _, sw = _stage_sweep(d)
    assert np.max(np.abs(sw["out"])) <= ab["gain"] * 1.001
    f = sw["frequency"]
    i0 = int(np.argmin(np.abs(np.log(f / f_peak))))
    for k, st in enumerate(ab["stages"], start=1):
        g_peak = abs(at[f"ox{k}"][0] / at[f"x{k}"][0])
        assert st["gain"] == pytest.approx(g_peak, rel=1e-3)
        db = 20 * np.log10(np.abs(sw[f"ox{k}"] / sw[f"x{k}"]))
        ref_db = 20 * math.log10(g_peak)
        for key, step in (("f_low_hz", -1), ("f_high_hz", 1)):
            want = _crossing(f, db, i0, ref_db, step)
            if want is None:
                assert st[key] is None
            else:
                assert st[key] == pytest.approx(want, rel=0.01), (k, key)


# ------------------------------------------------------------------------------ ripple


@pytest.mark.parametrize("name", SINGLE_CASES)
def test_supply_ripple_entries_vs_ngspice_ac_on_vcc(api, name):
    # Item 1, supply_ripple. Reference: ngspice `.ac` with AC 1 on VCC and AC 0 on Vs: one
    # point per frequency of the supply_rejection block (0.01 dB), then the maximum of
    # 20 log10 |Vout/Vcc| over the target band on a 200 per decade sweep (0.05 dB).
    # Limit: -ripple_rejection_db (default 20 dB, common practice per the issue).
    d = case(api, name)
    ripple = entries(d, "supply_ripple")
    freqs = d["supply_rejection"]["frequency_hz"]
    net = sc.build(d["circuit"], psrr=True)
    at = sc.ac(net, freqs, {"out": net.out}, drive="supply")
    want = 20 * np.log10(np.abs(at["out"]))
    for e, w in zip(ripple[:-1], want, strict=True):
        assert e["value"] == pytest.approx(w, abs=0.01)
        assert e["limit"] == -limits_of(d)["ripple_rejection_db"]
        assert e["passed"] == (e["value"] <= e["limit"])
    target = d["target"] if name in DESIGNS else ANALYSIS_TARGET
    band = sc.ac(net, None, {"out": net.out}, drive="supply",
                 sweep=(200, target["f_low_hz"], target["f_high_hz"]))
    worst = float(np.max(20 * np.log10(np.abs(band["out"]))))
    assert ripple[-1]["value"] == pytest.approx(worst, abs=0.05)
    assert ripple[-1]["limit"] == -limits_of(d)["ripple_rejection_db"]


def test_both_bias_kinds_are_covered():
    # The ripple cross-check must see a bypassed divider and a buffered one.
    kinds = {ANALYSES[n].bias.buffered for n in ANALYSES if ANALYSES[n].bias is not None}
    assert kinds == {False, True}


# ------------------------------------------------------------------ start-up, impedance


@pytest.mark.parametrize("name", SINGLE_CASES)
def test_startup_time_vs_ngspice_tran(api, name):
    # Item 1, startup_time. Reference: ngspice `.tran ... uic`, VCC stepped 0 -> v_pos at
    # t = 0 (PWL), every capacitor discharged, linear op-amps; the last time any node is
    # outside +-1 % of the supply span around its `.op` value. Within 25 %, as asked.
    d = case(api, name)
    e = entries(d, "startup_time")[0]
    assert e["unit"] == "s" and e["value"] > 0
    t_ng, tail = sc.startup_time(d["circuit"], 4.0 * e["value"])
    assert tail < 0.01, "the run did not settle within 4x the service's figure"
    assert e["value"] == pytest.approx(t_ng, rel=0.25)


@pytest.mark.parametrize("name", ALL_CASES)
def test_input_impedance_vs_ngspice_ac(api, name):
    # Item 1, input_impedance: |V(X1) / I(source)| at the peak frequency, I(source) from the
    # drop across the source resistor (Ohm's law). Reference: ngspice `.ac`. 1 %.
    d = case(api, name)
    e = entries(d, "input_impedance")[0]
    circuit = d["circuit"]
    net = sc.build(circuit)
    at = sc.ac(net, [d["performance"]["as_built"]["peak_hz"]],
               {"x1": ("x1", "0"), "drop": ("vs", "x1")}, drive="signal")
    current = abs(at["drop"][0]) / circuit["source_impedance_ohm"]
    if current < 1e-15 * abs(at["x1"][0]):
        # A DC-coupled non-inverting input draws no current in the model (README: no input
        # current): the impedance is unbounded, reported as null or as a huge figure.
        assert e["value"] is None or e["value"] > 1e12
        return
    assert e["value"] == pytest.approx(abs(at["x1"][0]) / current, rel=0.01)


# ------------------------------------------------------------ stability, parts, currents


@pytest.mark.parametrize("name", ALL_CASES)
def test_stability_entries_vs_loop_gain_of_the_exported_netlist(api, name):
    # Item 1, stability: noise gain 1/|beta| where |A beta| crosses 1, for every unit the
    # exporters place (netlist.cir: stages, VMID follower, spares), against the test's own
    # nodal solution of the exported deck (loop broken at each unit's output). 1 %.
    d = case(api, name)
    body = DESIGNS[name] if name in DESIGNS else {"name": name, "circuit": d["circuit"]}
    resp = api.post("/v1/exports/netlist.cir", json=body)
    assert resp.status_code == 200, resp.data[:400]
    exported = sc.net_from_export(resp.data.decode(), d["circuit"]["opamp"])
    order = ([u for u in exported.units if u.role == "stage"]
             + [u for u in exported.units if u.role == "follower"]
             + [u for u in exported.units if u.role == "spare"])
    stab = entries(d, "stability")
    # the last entry is the whole circuit: its largest growth rate (1/s) against 0, checked
    # against the natural frequencies of the test's own nodal model (scipy.linalg.eigvals)
    whole = stab.pop()
    rates = sc.natural_frequencies(sc.build(d["circuit"])).real
    assert whole["stage"] is None and whole["limit"] == 0.0
    assert whole["passed"] == (rates.max() <= 1e-9 * np.abs(rates).max())
    assert len(stab) == len(order)
    min_gain = d["circuit"]["opamp"].get("min_stable_gain", 1.0)
    for e, u in zip(stab, order, strict=True):
        assert e["stage"] == u.stage
        assert e["value"] == pytest.approx(sc.loop_noise_gain(exported, u), rel=0.01)
        assert e["limit"] == min_gain
        assert e["passed"] == (e["value"] >= min_gain * (1 - 1e-9))


def _parts(circuit: dict) -> tuple[list, list]:
    caps, res = [], []
    for st in circuit["stages"]:
        caps += [st.get(k) for k in ("c_couple_f", "c_gain_f")]
        res += [st.get(k) for k in ("r_bias_ohm", "r_feedback_ohm", "r_gain_ohm", "r_in_ohm")]
    if circuit["bias"]:
        caps.append(circuit["bias"]["c_bypass_f"])
        res += [circuit["bias"]["r_top_ohm"], circuit["bias"]["r_bottom_ohm"]]
    caps.append(circuit.get("c_out_f"))
    return [c for c in caps if c is not None], [r for r in res if r is not None]


@pytest.mark.parametrize("name", ALL_CASES)
def test_part_values_entries(api, name):
    # Item 1, part_values: largest capacitor, smallest and largest resistor of the circuit
    # (source and load are not parts), against the limits block.
    d = case(api, name)
    caps, res = _parts(d["circuit"])
    big_c, small_r, big_r = entries(d, "part_values")
    lim = limits_of(d)
    assert big_c["limit"] == lim["max_capacitor_f"]
    if not caps:  # a DC-coupled chain may have none: nothing can exceed the limit
        assert big_c["value"] in (None, 0, 0.0) and big_c["passed"] is not False
        caps = [0.0]
    else:
        assert big_c["value"] == max(caps)
        assert big_c["passed"] == (max(caps) <= lim["max_capacitor_f"])
    assert (small_r["value"], small_r["limit"]) == (min(res), lim["min_resistor_ohm"])
    assert (big_r["value"], big_r["limit"]) == (max(res), lim["max_resistor_ohm"])
    assert small_r["passed"] == (min(res) >= lim["min_resistor_ohm"])
    assert big_r["passed"] == (max(res) <= lim["max_resistor_ohm"])


@pytest.mark.parametrize("name", ALL_CASES)
def test_supply_current_entry(api, name):
    # Item 1, supply_current: every fitted unit's iq_a (spares draw their quiescent current
    # too) + the divider current v_pos / (Rt + Rb) (Ohm's law) + the DC load current (none
    # through an output capacitor; with the load returned to REF, the worst-case DC error
    # at O_n over the load).
    d = case(api, name)
    circuit = d["circuit"]
    _, fitted = units_in_packages(circuit)
    want = fitted * circuit["opamp"].get("iq_a", 0.0)
    if circuit["bias"]:
        want += circuit["supply"]["v_pos"] / (circuit["bias"]["r_top_ohm"]
                                              + circuit["bias"]["r_bottom_ohm"])
    e = entries(d, "supply_current")[0]
    if circuit.get("c_out_f") is None:
        dc_err = d["headroom"]["stages"][-1]["dc_error_v"]
        assert want * 0.99 <= e["value"] <= 1.01 * (want + dc_err / circuit["load_ohm"])
    else:
        assert e["value"] == pytest.approx(want, rel=0.01)


@pytest.mark.parametrize("name", [n for n in sorted(DESIGNS)
                                  if isinstance(DESIGNS[n]["opamp"], dict)
                                  and "output_current_max_a" in DESIGNS[n]["opamp"]]
                         + sorted(ANALYSIS_OPAMP_EXTRA))
def test_output_current_vs_nodal_currents(api, name):
    # Item 1, output_current: the peak current out of each stage's op-amp output at the
    # stated input (feedback network, next stage and load together). Bounds from the test's
    # nodal solution (tied to ngspice in test_spice_checks.py): at least the AC current at
    # the peak frequency, at most the largest AC current over frequency plus the DC current
    # the worst-case DC error drives into the output's DC paths.
    d = case(api, name)
    circuit, peak = d["circuit"], d["_input_peak_v"]
    net = sc.build(circuit)
    f = np.logspace(-3, 10, 1301)
    sol = sc.solve(net, f, drive="signal")
    at = sc.solve(net, [d["performance"]["as_built"]["peak_hz"]], drive="signal")
    limit = circuit["opamp"]["output_current_max_a"]
    stage_entries = [e for e in entries(d, "output_current") if e["stage"] is not None]
    assert [e["stage"] for e in stage_entries] == list(range(1, len(net.stages) + 1))
    for e, u in zip(stage_entries, [u for u in net.units if u.role == "stage"], strict=True):
        i_at = peak * abs(at["i:" + u.name][0])
        i_max = peak * np.max(np.abs(sol["i:" + u.name]))
        r_dc = [el[4] for el in net.elements if el[0] == "R" and u.out in el[2:4]]
        dc = d["headroom"]["stages"][u.stage - 1]["dc_error_v"] / min(r_dc)
        assert 0.99 * i_at <= e["value"] <= 1.01 * i_max + dc, (e, i_at, i_max, dc)
        assert e["limit"] == limit and e["unit"] == "A"


# ------------------------------------------------------------- clipping and slew in .tran


def _sine_check(api, body, kind):
    resp = api.post("/v1/designs", json=body)
    assert resp.status_code == 200, resp.data[:400]
    d = resp.get_json()
    circuit = d["circuit"]
    ab = d["performance"]["as_built"]
    net = sc.build(circuit)
    dc = sc.solve(net, [0.0], drive="dc")
    op = {o: dc[o][0].real for _, o in net.stages}
    f = ab["peak_hz"]
    ramp = max(5.0 / f, 2.0 / ab["f_low_hz"]) if ab["f_low_hz"] else 5.0 / f
    runs = sc.sine_runs(circuit, f, body["signal"]["input_peak_v"], kind=kind, ramp_s=ramp)
    return d, sc.relative_difference(runs, kind, op)


CLIP_OK = {"target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
           "supply": {"kind": "single", "v_pos": 5},
           "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 200, "load_ohm": 10000},
           "opamp": "gc-cmos-rr-10m"}
# 10 mV x 1000 = 10 V peak on a 5 V supply: clipping is intrinsic to the request.
CLIP_BAD = {**CLIP_OK, "signal": {**CLIP_OK["signal"], "input_peak_v": 0.01}}
# 1 V peak at 20..200 kHz needs at least 2 pi 20 kHz x 1 V = 0.13 V/us: 0.05 V/us cannot.
SLEW_BAD = {**CLIP_OK, "opamp": dict(CMOS_DUAL, slew_v_per_us=0.05)}


@pytest.mark.slow
@pytest.mark.parametrize("body, passes", [(CLIP_OK, True), (CLIP_BAD, False)])
def test_output_swing_verdict_vs_clamped_tran(api, body, passes):
    # Item 1 + issue's clipping test. Reference: ngspice `.tran`, a sine at the peak
    # frequency of amplitude input_peak_v, linear op-amps vs op-amps whose outputs a B
    # source clamps to the swing window: within 1 % when output_swing passes for every
    # stage, more than 1 % apart (the clamp engaged) when it fails.
    d, diff = _sine_check(api, body, "clamp")
    verdicts = [e["passed"] for e in entries(d, "output_swing")]
    assert all(verdicts) == passes
    if passes:
        assert max(diff) <= 0.01
    else:
        assert max(diff) > 0.01
        assert d["status"] == "target_not_met"
        assert "output_swing" in {s["quantity"] for s in d["shortfalls"]}


@pytest.mark.slow
@pytest.mark.parametrize("body, passes", [(CLIP_OK, True), (SLEW_BAD, False)])
def test_slew_rate_verdict_vs_slew_limited_tran(api, body, passes):
    # As above with a slew-limited op-amp (pole capacitor fed by a bounded B current source,
    # |dV/dt| <= slew_v_per_us) in place of the clamp.
    d, diff = _sine_check(api, body, "slew")
    verdicts = [e["passed"] for e in entries(d, "slew_rate")]
    assert all(verdicts) == passes
    if passes:
        assert max(diff) <= 0.01
    else:
        assert max(diff) > 0.01
        assert "slew_rate" in {s["quantity"] for s in d["shortfalls"]}


def test_soft_bias_artefact_is_not_reported_as_stage_gain(api):
    # Issue 8, "Also found": with a soft shared bias the stage ratio |V(O1)/V(X1)| peaks at
    # about 14.6 near 4 Hz (numpy nodal solution of this circuit), far below the band; the
    # as-built stage gain must be the in-band one, about 1 + Rf/Rg (textbook non-inverting
    # gain, common practice), here 10.09, and its band the real one around the peak.
    d = case(api, "fixed-soft-bias")
    st = d["circuit"]["stages"][0]
    textbook = 1 + st["r_feedback_ohm"] / st["r_gain_ohm"]
    first = d["performance"]["as_built"]["stages"][0]
    assert first["gain"] == pytest.approx(textbook, rel=0.01)
    assert first["f_low_hz"] < ANALYSIS_TARGET["f_low_hz"]
    assert first["f_high_hz"] > ANALYSIS_TARGET["f_high_hz"]


@pytest.mark.parametrize("rejection_db, passes", [(-100.0, True), (200.0, False)])
def test_analysis_limits_block_sets_the_ripple_verdict(api, rejection_db, passes):
    # Item 5: /v1/analyses takes the limits block. Asking for no rejection at all (ripple
    # may rise 100 dB) passes every supply_ripple entry; asking for 200 dB fails all of
    # them, and the status then names supply_ripple.
    circuit = ANALYSES["fixed-bypassed"].to_dict()
    body = {"circuit": circuit, "input_peak_v": ANALYSIS_INPUT_V, "target": ANALYSIS_TARGET,
            "limits": {"ripple_rejection_db": rejection_db}}
    resp = api.post("/v1/analyses", json=body)
    assert resp.status_code == 200, resp.data[:400]
    a = resp.get_json()
    ripple = entries(a, "supply_ripple")
    assert ripple and all(e["passed"] is passes for e in ripple)
    assert all(e["limit"] == -rejection_db for e in ripple)
    named = {s["quantity"] for s in a["shortfalls"]}
    assert ("supply_ripple" in named) is not passes
    if not passes:
        assert a["status"] == "target_not_met"
