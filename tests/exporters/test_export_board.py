"""The complete board: references, packing, spares, decoupling, connectors, capacitor choice.

Rules are common practice (stated in ``exporters/board.py``): one 100 nF decoupling capacitor
per supply pin per package, a bulk capacitor per rail, spare op-amp units as followers of
REF, voltage rating at least twice the DC across a capacitor, polarised parts with + on the
higher DC potential. Pinouts: the industry-standard 8/14-pin tables (common practice, from memory).
"""

from __future__ import annotations

import dataclasses
import math
import re

import pytest
from export_circuits import CIRCUITS, dual_dc, dual_inv, single_ni

from exporters.board import SIZES, build_board
from exporters.values import natural_key


def test_references_are_unique_and_in_signal_order(circuit):
    board = build_board(circuit)
    refs = [p.ref for p in board.parts]
    assert len(refs) == len(set(refs)) and refs == sorted(refs, key=natural_key)
    for prefix in "RC":
        stage_of = [int(re.match(r"stage (\d+)", p.role).group(1)) for p in board.parts
                    if p.prefix == prefix and p.role.startswith("stage")]
        numbers = [int(p.ref[1:]) for p in board.parts
                   if p.prefix == prefix and p.role.startswith("stage")]
        order = [s for _, s in sorted(zip(numbers, stage_of, strict=True))]
        assert order == sorted(order)  # stage 1's parts get the lowest numbers
    assert [p.ref for p in board.parts if p.prefix == "J"] == ["J1", "J2", "J3"]


def test_packing_and_spare_units(circuit):
    board = build_board(circuit)
    channels = circuit.opamp.channels_per_package
    packages = [p for p in board.parts if p.prefix == "U"]
    assert len(packages) == math.ceil(circuit.opamp_units / channels)
    assert len(board.units) == len(packages) * channels
    spares = [u for u in board.units if u.role.startswith("unused")]
    assert len(spares) == len(board.units) - circuit.opamp_units
    for u in spares:
        own_pins = {(u.ref, pin.number) for pin in board.part(u.ref).pins if pin.net == u.out}
        assert u.inp == board.ref_net
        if circuit.opamp.min_stable_gain <= 1.0:
            # follower of REF: +in on REF, -in tied to the output, nothing else
            assert u.inn == u.out and set(board.nets[u.out]) == own_pins
            continue
        # a part stable only at a higher noise gain: a non-inverting amplifier of REF,
        # Rf from the output to -in and Rg from -in to REF; noise gain 1 + Rf/Rg
        # (common practice) at least min_stable_gain
        resistors = {p.ref: p for p in board.parts if p.prefix == "R"}
        out_refs = {ref for ref, _ in board.nets[u.out] if ref in resistors}
        inn_refs = {ref for ref, _ in board.nets[u.inn] if ref in resistors}
        (rf,) = out_refs & inn_refs
        (rg,) = inn_refs - out_refs
        assert board.ref_net in {pin.net for pin in resistors[rg].pins}
        gain = 1 + resistors[rf].value_si / resistors[rg].value_si
        assert gain >= circuit.opamp.min_stable_gain
    letters = [u.unit for u in board.units]
    assert letters == list("ABCD"[:channels]) * len(packages)
    stage_units = [u for u in board.units if u.role.startswith("stage")]
    assert [u.role for u in stage_units] == [f"stage {k}" for k in range(1, circuit.n_stages + 1)]


def test_decoupling_bulk_and_power_connector(circuit):
    board = build_board(circuit)
    packages = sum(1 for p in board.parts if p.prefix == "U")
    rails = ["VCC"] + (["VEE"] if circuit.supply.kind == "dual" else [])

    for rail in rails:
        decoupling = [p for p in board.parts if p.role.endswith(f"{rail} decoupling")]
        assert len(decoupling) == packages  # one per supply pin per package
        for p in decoupling:
            assert p.value == "100n" and {pin.net for pin in p.pins} == {rail, "GND"}
        bulk = [p for p in board.parts if p.role == f"{rail} bulk"]
        assert len(bulk) == 1 and {pin.net for pin in bulk[0].pins} == {rail, "GND"}
    j3 = [pin.net for pin in board.part("J3").pins]
    assert j3 == (["VCC", "GND", "VEE"] if len(rails) == 2 else ["VCC", "GND"])
    assert [pin.net for pin in board.part("J1").pins] == ["IN", "GND"]
    assert [pin.net for pin in board.part("J2").pins] == ["OUT", board.load_return_net]


def test_no_single_pin_nets_and_no_pin_twice(circuit):
    board = build_board(circuit)
    pins = [t for nodes in board.nets.values() for t in nodes]
    assert len(pins) == len(set(pins))
    assert all(len(nodes) >= 2 for nodes in board.nets.values())
    assert {"GND", "VCC", "IN", "OUT"} <= set(board.nets)


def test_capacitor_ratings_and_polarity(circuit):
    board = build_board(circuit)
    for p in board.parts:
        if p.prefix != "C":
            continue
        v1, v2 = (board.dc_v[pin.net] for pin in p.pins)
        rating = float(p.field("Voltage").rstrip("V"))
        assert rating >= 2 * abs(v1 - v2)  # common practice: rated >= 1.5-2x the DC across
        if p.polarised:
            assert v1 > v2 and p.symbol == "C_Polarized"
        if p.field("Dielectric") == "C0G/NP0":
            assert p.value_si <= 10e-9
        if p.electrolytic:
            assert p.footprint.startswith("Capacitor_SMD:CP_Elec_") and p.value_si > 1e-6


def test_single_supply_polarised_parts_point_to_vmid():
    board = build_board(single_ni(3))
    gain_leg = [p for p in board.parts if p.role.endswith("gain leg")]
    assert all(p.polarised and p.pins[0].net.endswith("_G") and p.pins[1].net == "GND"
               for p in gain_leg)
    interstage = [p for p in board.parts if p.role in ("stage 2 coupling", "stage 3 coupling")]
    assert all(not p.polarised for p in interstage)  # both sides at VMID: never polarised


def test_dc_coupled_board_has_no_coupling_parts():
    board = build_board(dual_dc(2))
    assert not any(p.role.startswith(("stage", "output")) and p.role.endswith("coupling")
                   or "bias" in p.role for p in board.parts)
    assert board.part("J2").pins[1].net == "GND" and "OUT" in board.nets


@pytest.mark.parametrize("size", SIZES)
def test_size_option_picks_chip_footprints(size):
    board = build_board(dual_inv(2), size=size)
    metric = {"0603": "1608", "0805": "2012", "1206": "3216"}[size]
    for p in board.parts:
        if p.prefix == "R":
            assert p.footprint == f"Resistor_SMD:R_{size}_{metric}Metric"
        elif p.prefix == "C" and not p.electrolytic:
            assert p.footprint == f"Capacitor_SMD:C_{size}_{metric}Metric"


def test_bad_options_are_refused():
    with pytest.raises(ValueError, match="size"):
        build_board(dual_inv(1), size="0402")
    bad = dataclasses.replace(dual_inv(1), opamp=dataclasses.replace(dual_inv(1).opamp,
                                                                     channels_per_package=3))
    with pytest.raises(ValueError, match="channels_per_package"):
        build_board(bad)


def test_same_input_same_board():
    for key, make in CIRCUITS.items():
        assert build_board(make(), name=key) == build_board(make(), name=key)
