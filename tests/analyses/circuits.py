"""Hand-built circuits for the analyses tests (scenarios of our own, values invented).

Each factory returns a :class:`service.engine.model.circuit.Circuit` covering one corner of the
model: topology, supply kind, buffered or shared bias, ground-leg capacitor, output capacitor.
"""

from __future__ import annotations

from service.engine.judge.analysis import as_built
from service.engine.model.circuit import Bias, Circuit, OpAmp, Stage, Supply

#: A generic op-amp archetype (invented figures): 10 MHz GBW, 100 dB open-loop gain.
OPAMP = OpAmp(gbw_hz=10e6, slew_v_per_us=8.0, swing_to_pos_v=0.05, swing_to_neg_v=0.05,
              supply_min_v=2.7, supply_max_v=36.0, id="test-10m", a0_db=100.0)


def opamp(**changes) -> OpAmp:
    from dataclasses import replace

    return replace(OPAMP, **changes)


def noninv_single(*, buffered: bool, n: int = 3, c_gain: bool = True, c_out: bool = True,
                  amp: OpAmp = OPAMP, c_bypass_f: float = 47e-6) -> Circuit:
    """Single 5 V supply, non-inverting stages of gain 1 + 9.09k/1k, coupled with 1 uF."""
    stages = [Stage(c_couple_f=1e-6 * (1 + 0.1 * k), r_bias_ohm=100e3 - 5e3 * k,
                    r_feedback_ohm=9.09e3, r_gain_ohm=1.0e3 + 10 * k,
                    c_gain_f=22e-6 if c_gain else None) for k in range(n)]
    return Circuit(topology="non_inverting", supply=Supply("single", 5.0), opamp=amp,
                   source_impedance_ohm=50.0, load_ohm=10e3,
                   bias=Bias(r_top_ohm=49.9e3, r_bottom_ohm=49.9e3, c_bypass_f=c_bypass_f,
                             buffered=buffered),
                   stages=tuple(stages), c_out_f=10e-6 if c_out else None)


def inv_single(*, buffered: bool, n: int = 2, c_out: bool = True, amp: OpAmp = OPAMP,
               c_bypass_f: float = 47e-6) -> Circuit:
    """Single 12 V supply, inverting stages of gain -10 (10k/100k), coupled with 2.2 uF."""
    stages = [Stage(c_couple_f=2.2e-6, r_in_ohm=10e3 + 100 * k, r_feedback_ohm=100e3)
              for k in range(n)]
    return Circuit(topology="inverting", supply=Supply("single", 12.0), opamp=amp,
                   source_impedance_ohm=600.0, load_ohm=2e3,
                   bias=Bias(r_top_ohm=10e3, r_bottom_ohm=10e3, c_bypass_f=c_bypass_f,
                             buffered=buffered),
                   stages=tuple(stages), c_out_f=4.7e-6 if c_out else None)


def noninv_dual(*, n: int = 2, dc: bool = False, amp: OpAmp = OPAMP) -> Circuit:
    """+-15 V supply, non-inverting; ``dc=True`` gives a DC-coupled cascade."""
    if dc:
        stages = [Stage(c_couple_f=None, r_bias_ohm=None, r_feedback_ohm=20e3,
                        r_gain_ohm=2.2e3, c_gain_f=None) for _ in range(n)]
    else:
        stages = [Stage(c_couple_f=470e-9, r_bias_ohm=47e3, r_feedback_ohm=20e3,
                        r_gain_ohm=2.2e3, c_gain_f=47e-6) for _ in range(n)]
    return Circuit(topology="non_inverting", supply=Supply("dual", 15.0, -15.0), opamp=amp,
                   source_impedance_ohm=50.0, load_ohm=10e3, bias=None,
                   stages=tuple(stages), c_out_f=None if dc else 10e-6)


def inv_dual(*, n: int = 3, amp: OpAmp = OPAMP) -> Circuit:
    stages = [Stage(c_couple_f=1e-6, r_in_ohm=4.99e3, r_feedback_ohm=49.9e3) for _ in range(n)]
    return Circuit(topology="inverting", supply=Supply("dual", 12.0, -12.0), opamp=amp,
                   source_impedance_ohm=50.0, load_ohm=10e3, bias=None,
                   stages=tuple(stages), c_out_f=None)


def one_stage_coupling(*, c_couple_f: float = 100e-9, r_bias_ohm: float = 10e3) -> Circuit:
    """One dual-supply follower-like stage where only the coupling network sets f_low.

    Ideal-ish op-amp (GBW 10 GHz, A0 200 dB), zero source impedance... (50 ohm is kept small
    against r_bias), no ground-leg capacitor and no output capacitor: f_low = 1/(2 pi (Rb+Rs) C).
    """
    amp = opamp(gbw_hz=1e10, a0_db=200.0)
    st = Stage(c_couple_f=c_couple_f, r_bias_ohm=r_bias_ohm, r_feedback_ohm=1e3,
               r_gain_ohm=1e3, c_gain_f=None)
    return Circuit(topology="non_inverting", supply=Supply("dual", 15.0, -15.0), opamp=amp,
                   source_impedance_ohm=1e-3, load_ohm=10e3, bias=None, stages=(st,),
                   c_out_f=None)


def with_c_feedback(circuit: Circuit, c_feedback_f: float) -> Circuit:
    """The circuit with a capacitor across every stage's feedback resistor (issue 9)."""
    from dataclasses import replace

    return replace(circuit, stages=tuple(replace(st, c_feedback_f=c_feedback_f)
                                         for st in circuit.stages))


ALL = {
    "noninv_single_buffered": lambda: noninv_single(buffered=True),
    "noninv_single_shared": lambda: noninv_single(buffered=False),
    "noninv_single_shared_no_cg_no_cout": lambda: noninv_single(buffered=False, c_gain=False,
                                                                c_out=False),
    "noninv_single_buffered_no_cout": lambda: noninv_single(buffered=True, c_out=False),
    "inv_single_buffered": lambda: inv_single(buffered=True),
    "inv_single_shared": lambda: inv_single(buffered=False),
    "inv_single_shared_no_cout": lambda: inv_single(buffered=False, c_out=False),
    "noninv_dual": lambda: noninv_dual(),
    "noninv_dual_dc": lambda: noninv_dual(dc=True),
    "inv_dual": lambda: inv_dual(),
    # feedback capacitors: RC poles at ~16-37 kHz, below the op-amp's closed-loop poles
    "noninv_single_buffered_cf": lambda: with_c_feedback(noninv_single(buffered=True), 470e-12),
    "noninv_single_shared_cf": lambda: with_c_feedback(noninv_single(buffered=False), 470e-12),
    "noninv_single_shared_no_cg_no_cout_cf": lambda: with_c_feedback(
        noninv_single(buffered=False, c_gain=False, c_out=False), 470e-12),
    "inv_single_buffered_cf": lambda: with_c_feedback(inv_single(buffered=True), 100e-12),
    "inv_single_shared_cf": lambda: with_c_feedback(inv_single(buffered=False), 100e-12),
    "noninv_dual_dc_cf": lambda: with_c_feedback(noninv_dual(dc=True), 220e-12),
    "inv_dual_cf": lambda: with_c_feedback(inv_dual(), 100e-12),
}


def as_built_of(circuit: Circuit) -> dict:
    """The circuit's as-built block, as the pipeline hands it to the analyses."""
    return as_built(circuit, per_stage=False).to_dict()
