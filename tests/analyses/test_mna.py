"""The general MNA solver against the chain solver: two independent constructions of the
same circuit model (issue 2, "The circuit object and its model") must agree."""

from __future__ import annotations

import numpy as np
import pytest

from analyses.circuits import ALL
from service.engine.solver import chain, mna

F_HZ = np.logspace(-3, 10, 131)  # the model's search range, 1 mHz .. 10 GHz


@pytest.fixture(params=sorted(ALL))
def circuit(request):
    return ALL[request.param]()


def test_vout_matches_chain(circuit):
    ref = chain.solve(circuit, F_HZ).vout
    got = mna.signal_gain(circuit, F_HZ)
    # Where the response is within 60 dB of its maximum both solvers keep ~1e-12 relative;
    # 1e-9 leaves room for the conditioning of either. Far down the skirts (|H| < 1e-3 max)
    # the chain's closed forms cancel, so compare there against the maximum instead.
    big = np.abs(ref) > 1e-3 * np.abs(ref).max()
    np.testing.assert_allclose(got[big], ref[big], rtol=1e-9)
    np.testing.assert_allclose(got[~big], ref[~big], rtol=0, atol=1e-12 * np.abs(ref).max())


def test_stage_outputs_and_reference_match_chain(circuit):
    sol = chain.solve(circuit, F_HZ[::5])
    names = [f"O{k}" for k in range(1, circuit.n_stages + 1)]
    ref_node = None
    if circuit.bias is not None:
        ref_node = "VMID" if circuit.bias.buffered else "VDIV"
        names.append(ref_node)
    v = mna.node_voltages(circuit, F_HZ[::5], names)
    for k in range(circuit.n_stages):
        expected = sol.stage_out_abs[k]
        scale = np.abs(expected).max()
        np.testing.assert_allclose(v[f"O{k + 1}"], expected, rtol=1e-9, atol=1e-12 * scale)
    if ref_node is not None:
        # Buffered: the follower's input VDIV carries no signal, so VMID has none (chain
        # treats it as an AC ground); shared: VMID moves and both solvers must agree.
        np.testing.assert_allclose(v[ref_node], sol.vref, rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("name", sorted(k for k, make in ALL.items() if make().bias is not None))
def test_vcc_is_an_ac_ground_for_the_signal(name):
    system = mna.build(ALL[name]())
    x = system.solve([1e3], system.signal_rhs())
    assert system.voltage(x, "VCC")[0] == 0.0


def test_dual_supply_has_no_supply_rhs():
    system = mna.build(ALL["noninv_dual"]())
    with pytest.raises(ValueError, match="dual supply"):
        system.supply_rhs()
