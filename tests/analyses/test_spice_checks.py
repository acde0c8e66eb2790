"""The build-check deck writers and the test-local nodal solver (tests/analyses/spice_checks.py)
on today's circuits: .op, .ac on VCC, .tran start-up and sine runs against ngspice, hand
formulas and the service's existing blocks. These hold before the engine's checks land."""

from __future__ import annotations

import math

import numpy as np
import pytest

from analyses import spice_checks as sc
from analyses.circuits import ALL, noninv_dual, noninv_single, opamp

pytestmark = pytest.mark.ngspice

SINGLE = sorted(k for k, make in ALL.items() if make().bias is not None)

#: README example body (a 40 kHz receive chain of our own), and the catalog's 10 MHz part.
README_BODY = {"target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
               "supply": {"kind": "single", "v_pos": 5},
               "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 200,
                          "load_ohm": 10000},
               "opamp": "gc-cmos-rr-10m"}


def _design(client, body):
    resp = client.post("/v1/designs", json=body)
    assert resp.status_code == 200, resp.data[:400]
    return resp.get_json()


@pytest.mark.parametrize("name", sorted(ALL))
def test_numpy_nodal_solver_matches_ngspice_ac(name):
    # Reference: ngspice `.ac` of the same element list (deck from spice_checks.deck); the
    # numpy MNA is what the verdict table's independent nodal check uses.
    circuit = ALL[name]().to_dict()
    net = sc.build(circuit)
    probes = {"out": net.out, **{o: (o, net.ref) for _, o in net.stages},
              **{x: (x, "0") for x, _ in net.stages}}
    got = sc.ac(net, None, probes, drive="signal", sweep=(5, 1e-2, 1e8))
    mine = sc.solve(net, got["frequency"], drive="signal")
    for label, (a, b) in probes.items():
        np.testing.assert_allclose(sc.vdiff(mine, a, b), got[label], rtol=1e-6, atol=1e-12)


@pytest.mark.parametrize("name", sorted(ALL))
def test_op_with_zero_offsets_sits_at_vmid(name):
    # Voltage divider (common practice): VDIV = v_pos Rb / (Rt + Rb). With the coupling
    # capacitors open at DC every stage output follows its + input, i.e. REF = VMID (GND on
    # a dual supply). Reference: ngspice `.op`, op-amps at A0 = 160 dB so the finite-gain
    # error (about NG x V+ / A0, single-pole model, README) is under 1e-6 relative; the
    # numpy solver must agree with ngspice at the circuit's own A0 as well.
    circuit = ALL[name]().to_dict()
    for a0_db in (circuit["opamp"]["a0_db"], 160.0):
        circuit["opamp"]["a0_db"] = a0_db
        net = sc.build(circuit, offsets=True)
        outs = [o for _, o in net.stages]
        extra = ["vdiv"] if circuit["bias"] else []
        nominal, _ = sc.op_sensitivities(net, {}, outs + extra)
        dc = sc.solve(net, [0.0], drive="dc")
        for node in outs + extra:
            # ngspice stops its Newton iteration at vntol = 1 uV (ngspice user manual,
            # ".options"; the default value from memory): the agreement asked is that.
            assert nominal[node] == pytest.approx(dc[node][0].real, rel=1e-7, abs=1e-6)
    vmid = sc.vdiv_v(circuit) if circuit["bias"] else 0.0
    for node in outs + extra:
        assert nominal[node] == pytest.approx(vmid, rel=1e-5, abs=1e-9)


def test_op_matches_todays_headroom_operating_point(client):
    # Today's headroom block states each stage's DC output level; ngspice `.op` of the
    # design's circuit agrees within the finite-A0 error (A0 = 110 dB here).
    d = _design(client, README_BODY)
    nominal, worst = sc.worst_dc_error(d["circuit"])
    for row, v in zip(d["headroom"]["stages"], nominal, strict=True):
        assert v == pytest.approx(row["output_dc_v"], rel=1e-4)
    assert all(w > 0 for w in worst)


def test_worst_dc_error_hand_formula_one_dc_stage():
    # Handbook formula (common practice): a DC-coupled non-inverting stage with source
    # resistance Rs at its + input and Rf/Rg feedback has an output error of
    #   (|Vos| + |Ib| Rs)(1 + Rf/Rg) + |Ib| Rf
    # with each bias current at the sign that adds (no cancellation assumed).
    vos, ib = 3e-3, 200e-9
    c = noninv_dual(n=1, dc=True, amp=opamp(vos_v=vos, ib_a=ib))
    circuit = c.to_dict()
    circuit["source_impedance_ohm"] = 5e3
    st = circuit["stages"][0]
    a0 = sc.a0_of(circuit["opamp"])
    ng = 1 + st["r_feedback_ohm"] / st["r_gain_ohm"]
    expected = (vos + ib * 5e3) * ng + ib * st["r_feedback_ohm"]
    nominal, worst = sc.worst_dc_error(circuit)
    assert abs(nominal[0]) < 1e-12
    assert worst[0] == pytest.approx(expected, rel=2 * ng / a0)


def test_worst_dc_error_sign_pattern_run_agrees_with_superposition():
    # Superposition (linear circuit): one `.op` with every offset source at the sign that
    # raised V(O_k) in its single-source run reproduces the sum of |sensitivity| x magnitude.
    circuit = noninv_single(buffered=True, amp=opamp(vos_v=2e-3, ib_a=100e-9)).to_dict()
    nominal, worst = sc.worst_dc_error(circuit)
    net = sc.build(circuit, offsets=True)
    srcs = sc.offset_sources(net, circuit["opamp"])
    outs = [o for _, o in net.stages]
    _, sens = sc.op_sensitivities(net, {k: v[0] for k, v in srcs.items()}, outs)
    last = outs[-1]
    for name, (_, mag) in srcs.items():
        net.set_dc(name, math.copysign(mag, sens[name][last]))
    high, _ = sc.op_sensitivities(net, {}, outs)
    assert high[last] - nominal[-1] == pytest.approx(worst[-1], rel=1e-6)
    # Hand check of the first stage (common practice): follower at DC with the buffered
    # VMID: Vos of the stage and of the follower, Ib through r_bias, Rf, and the divider.
    st, b = circuit["stages"][0], circuit["bias"]
    r_div = b["r_top_ohm"] * b["r_bottom_ohm"] / (b["r_top_ohm"] + b["r_bottom_ohm"])
    hand = 2 * 2e-3 + 100e-9 * (st["r_bias_ohm"] + st["r_feedback_ohm"] + r_div)
    assert worst[0] == pytest.approx(hand, rel=1e-3)


@pytest.mark.parametrize("buffered", [False, True])
def test_ripple_deck_matches_todays_supply_rejection(client, buffered):
    # Reference: ngspice `.ac` with AC 1 on VCC and AC 0 on Vs, one point per frequency of
    # the service's supply_rejection block (analysis of a fixed circuit: a bypassed divider
    # and a buffered one), plus a psrr_db part for the series-source model.
    for amp in (opamp(), opamp(psrr_db=60.0)):
        circuit = noninv_single(buffered=buffered, amp=amp).to_dict()
        resp = client.post("/v1/analyses", json={"circuit": circuit, "input_peak_v": 0.001,
                                                 "supply_rejection_hz": 1000})
        assert resp.status_code == 200, resp.data[:400]
        block = resp.get_json()["supply_rejection"]
        net = sc.build(circuit, psrr=True)
        got = sc.ac(net, block["frequency_hz"], {"out": net.out}, drive="supply")
        np.testing.assert_allclose(20 * np.log10(np.abs(got["out"])), block["gain_db"],
                                   atol=1e-3)


@pytest.mark.parametrize("buffered", [False, True])
def test_startup_deck_follows_the_divider_time_constant(buffered):
    # Dominant pole (common practice): with the bypass RC (Rt||Rb) Cbyp = 1.17 s far above
    # the coupling time constants (0.1 s), VMID settles like 1 - exp(-t/tau), so V(VMID)
    # enters the 1 % band (0.05 V of a 2.5 V step on a 5 V span) at tau ln(50); the other
    # nodes follow VMID within a few coupling time constants.
    circuit = noninv_single(buffered=buffered).to_dict()
    b = circuit["bias"]
    tau = b["c_bypass_f"] * b["r_top_ohm"] * b["r_bottom_ohm"] / (b["r_top_ohm"]
                                                                  + b["r_bottom_ohm"])
    t_settle, tail = sc.startup_time(circuit, 12 * tau)
    assert tail < 1e-3  # settled: the final 5 % of the run sits at the `.op` values
    assert tau * math.log(50) <= t_settle <= 1.1 * tau * math.log(50)


def test_sine_runs_clamp_engages_only_when_the_swing_is_exceeded(client):
    # The README chain (60 dB, 5 V, swing 0.05 V from each rail): 1 mV in gives about 1 V
    # peak at O2 (no clipping), 10 mV in about 10 V (clipped). Reference: ngspice `.tran`,
    # linear op-amps vs op-amps whose outputs a B source clamps to the swing window; the
    # linear run's steady amplitude equals input x |V(O_k) - V(REF)| / |Vs| from the nodal
    # solution at the drive frequency.
    d = _design(client, README_BODY)
    circuit = d["circuit"]
    net = sc.build(circuit)
    f = 20e3
    h = sc.solve(net, [f], drive="signal")
    dc = sc.solve(net, [0.0], drive="dc")
    op = {o: dc[o][0].real for _, o in net.stages}
    ramp = 2.0 / d["performance"]["as_built"]["f_low_hz"]
    runs = sc.sine_runs(circuit, f, 1e-3, kind="clamp", ramp_s=ramp)
    assert max(sc.relative_difference(runs, "clamp", op)) < 1e-6
    last = runs["time"] >= runs["time"][-1] - 2 / f
    for _, o in net.stages:
        amp = np.max(np.abs(runs["linear"][o][last] - op[o]))
        assert amp == pytest.approx(1e-3 * abs(h[o][0] - h[net.ref][0]), rel=0.01)
    clipped = sc.sine_runs(circuit, f, 1e-2, kind="clamp", ramp_s=ramp)
    assert sc.relative_difference(clipped, "clamp", op)[-1] > 0.01


def test_sine_runs_slew_model_limits_the_rate(client):
    # The slew-limited op-amp (pole capacitor charged by a bounded B current source) is the
    # linear model below its limit and caps |dV/dt| at slew_v_per_us (definition of slew
    # rate, common practice). 1 V peak at 20 kHz needs 2 pi f V = 0.126 V/us.
    d = _design(client, README_BODY)
    circuit = d["circuit"]
    net = sc.build(circuit)
    dc = sc.solve(net, [0.0], drive="dc")
    op = {o: dc[o][0].real for _, o in net.stages}
    ramp = 2.0 / d["performance"]["as_built"]["f_low_hz"]
    fast = sc.sine_runs(circuit, 20e3, 1e-3, kind="slew", ramp_s=ramp)
    assert max(sc.relative_difference(fast, "slew", op)) < 1e-3
    slow_circuit = dict(circuit, opamp=dict(circuit["opamp"], slew_v_per_us=0.05))
    slow = sc.sine_runs(slow_circuit, 20e3, 1e-3, kind="slew", ramp_s=ramp)
    assert sc.relative_difference(slow, "slew", op)[-1] > 0.01
    o_last = net.stages[-1][1]
    rate = np.max(np.abs(np.diff(slow["slew"][o_last]) / np.diff(slow["time"]))) / 1e6
    assert rate <= 0.05 * 1.05


def test_loop_noise_gain_textbook_and_exported_spare_units(client):
    # Textbook noise gains (common practice): 1 + Rf/Rg for a non-inverting stage (its
    # ground-leg capacitor a short where the loop gain crosses 1), 1 for a follower.
    # The exported deck (netlist.cir) lists every unit of every package, spares included.
    circuit = noninv_single(buffered=True).to_dict()
    net = sc.build(circuit)
    for u in net.units:
        if u.role == "stage":
            st = circuit["stages"][u.stage - 1]
            expected = 1 + st["r_feedback_ohm"] / st["r_gain_ohm"]
        else:
            expected = 1.0
        assert sc.loop_noise_gain(net, u) == pytest.approx(expected, rel=0.01)
    body = {"target": {"gain_db": 40, "f_low_hz": 100, "f_high_hz": 20000},
            "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-micro-1m"}
    resp = client.post("/v1/exports/netlist.cir", json=body)
    assert resp.status_code == 200
    d = _design(client, body)
    exported = sc.net_from_export(resp.data.decode(), d["circuit"]["opamp"])
    packages = math.ceil(len(sc.build(d["circuit"]).units)
                         / d["circuit"]["opamp"]["channels_per_package"])
    assert len(exported.units) == packages * d["circuit"]["opamp"]["channels_per_package"]
    gains = {u.name: sc.loop_noise_gain(exported, u) for u in exported.units}
    for u in exported.units:
        if u.role == "stage":
            st = d["circuit"]["stages"][u.stage - 1]
            assert gains[u.name] == pytest.approx(1 + st["r_feedback_ohm"] / st["r_gain_ohm"],
                                                  rel=0.01)
        assert gains[u.name] >= 1.0 - 1e-6


def test_natural_frequencies_flag_the_oscillating_shared_bias():
    # A shared unbuffered bias node closes a loop through every stage's bias resistor: with
    # a 1 uF bypass this 3-stage, 60 dB chain oscillates (ngspice `.tran` from rest grows
    # without bound), with 47 uF it settles. The natural frequencies of the nodal model
    # (generalised eigenvalues, common practice) must say the same.
    soft = noninv_single(buffered=False, c_bypass_f=1e-6).to_dict()
    stiff = noninv_single(buffered=False, c_bypass_f=47e-6).to_dict()
    assert np.max(sc.natural_frequencies(sc.build(soft)).real) > 0
    assert np.max(sc.natural_frequencies(sc.build(stiff)).real) < 0
    _, tail_soft = sc.startup_time(soft, 20.0)
    _, tail_stiff = sc.startup_time(stiff, 20.0)
    assert tail_soft > 1.0 and tail_stiff < 1e-3
    # One RC (hand formula): the only natural frequency is -1/(R C).
    one = {"topology": "non_inverting", "supply": {"kind": "dual", "v_pos": 5, "v_neg": -5},
           "opamp": {"gbw_hz": 1e6, "a0_db": 100}, "source_impedance_ohm": 1e3,
           "load_ohm": 1e4, "bias": None, "c_out_f": None,
           "stages": [{"c_couple_f": 1e-6, "r_bias_ohm": 1e4, "r_feedback_ohm": 1e4,
                       "r_gain_ohm": 1e4, "c_gain_f": None}]}
    s = np.sort(sc.natural_frequencies(sc.build(one)).real)
    assert any(abs(v + 1 / (11e3 * 1e-6)) < 1e-6 / (11e3 * 1e-6) for v in s)
    assert np.max(s) < 0
