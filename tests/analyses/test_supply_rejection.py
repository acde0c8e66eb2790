"""Supply ripple Vout/Vcc against an ngspice AC analysis driving the supply source."""

from __future__ import annotations

import numpy as np
import pytest

from analyses import spice_deck
from analyses.circuits import ALL, inv_single, noninv_single, opamp
from service.engine.judge import supply_rejection

SINGLE = sorted(k for k, make in ALL.items() if make().bias is not None)


@pytest.mark.parametrize("psrr_db", [None, 60.0])
@pytest.mark.parametrize("name", SINGLE)
def test_ripple_matches_ngspice(name, psrr_db):
    # Reference: ngspice `.ac` with AC 1 on the VCC source and AC 0 on Vs (test-local deck,
    # tests/analyses/spice_deck.py; PSRR as an E source from VCC in series with each + input).
    # Issue 4 asks for 0.5 dB; the two solve the same linear model, so the residual is
    # ngspice's 6-digit print.
    spice_deck.require_ngspice()
    circuit = ALL[name]()
    if psrr_db is not None:
        from dataclasses import replace

        circuit = replace(circuit, opamp=opamp(psrr_db=psrr_db))
    rows = np.array(spice_deck.parse_table(
        spice_deck.run(spice_deck.ripple_deck(circuit, 10.0, 1e5)), 2))
    assert rows.shape == (81, 2)
    ours = 20 * np.log10(np.abs(supply_rejection.supply_gain(circuit, rows[:, 0])))
    np.testing.assert_allclose(ours, rows[:, 1], atol=0.5)
    assert np.max(np.abs(ours - rows[:, 1])) < 1e-3  # what we actually see


def test_divider_closed_form_at_dc_limit():
    # Hand calculation (common practice): at DC the coupling capacitors block, so each
    # inverting stage is a follower of its + input (REF) and every O_k sits at V(REF); with
    # the load returned to REF, Vout = V(O_n) - V(REF) -> 0 as f -> 0.
    circuit = inv_single(buffered=False, c_out=False)
    h = supply_rejection.supply_gain(circuit, [1e-3])
    assert abs(h[0]) < 1e-3


def test_block_frequencies_and_dual_supply():
    circuit = noninv_single(buffered=False)
    block = supply_rejection.supply_rejection_block(circuit, extra_hz=1000.0)
    assert block["frequency_hz"] == [50.0, 60.0, 100.0, 120.0, 1000.0]
    assert len(block["gain_db"]) == 5
    h = supply_rejection.supply_gain(circuit, block["frequency_hz"])
    np.testing.assert_allclose(block["gain_db"], 20 * np.log10(np.abs(h)))
    assert supply_rejection.supply_rejection_block(ALL["noninv_dual"]()) is None


def test_buffering_and_bypass_reduce_ripple():
    # Common practice: a larger bypass capacitor attenuates ripple at VMID more.
    small = noninv_single(buffered=False, c_bypass_f=1e-6)
    large = noninv_single(buffered=False, c_bypass_f=100e-6)
    g_small = np.abs(supply_rejection.supply_gain(small, [100.0]))[0]
    g_large = np.abs(supply_rejection.supply_gain(large, [100.0]))[0]
    assert g_large < g_small
