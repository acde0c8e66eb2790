"""Hand-built circuits in the shape of the circuit model (issue 2, "The circuit object").

Values are invented for these tests (E96 resistors, E12 capacitors); they exercise every
branch of the model: single/dual supply, both topologies, buffered and unbuffered bias,
DC coupling (every optional part null), and 1-, 2- and 4-channel packages.
"""

from __future__ import annotations

from service.engine.model.circuit import Bias, Circuit, OpAmp, Stage, Supply

HOSTILE_NAMES = [
    "=cmd|' /C calc'!A0",
    "+1",
    "-1",
    "@SUM(A1:A2)",
    "\tleading tab",
    "\rleading cr",
    "amp\n.control\nshell touch pwned\n.endc",
    'quote " and \\ backslash',
    "paren (a) ) (",
    "<tag> & ]]> end",
]


def opamp(channels: int = 2, **kw) -> OpAmp:
    base = dict(gbw_hz=10e6, slew_v_per_us=5.0, swing_to_pos_v=0.05, swing_to_neg_v=0.05,
                supply_min_v=2.7, supply_max_v=36.0, id="generic-rr-10m", a0_db=100.0,
                channels_per_package=channels)
    base.update(kw)
    return OpAmp(**base)


def single_ni(n: int = 3, *, buffered: bool = False, channels: int = 2, v_pos: float = 5.0,
              **amp) -> Circuit:
    stages = tuple(Stage(c_couple_f=1e-6, r_bias_ohm=100e3, r_feedback_ohm=9.09e3,
                         r_gain_ohm=1e3, c_gain_f=47e-6) for _ in range(n))
    return Circuit(topology="non_inverting", supply=Supply("single", v_pos),
                   opamp=opamp(channels, **amp), source_impedance_ohm=50.0, load_ohm=10e3,
                   bias=Bias(r_top_ohm=100e3, r_bottom_ohm=100e3, c_bypass_f=100e-6,
                             buffered=buffered),
                   stages=stages, c_out_f=10e-6)


def single_ni_mixed() -> Circuit:
    """Stage 1 returns its gain leg to REF (c_gain null), stage 2 through c_gain."""
    c = single_ni(2, buffered=True, channels=4)
    s1 = Stage(c_couple_f=2.2e-6, r_bias_ohm=47.5e3, r_feedback_ohm=19.1e3, r_gain_ohm=2e3,
               c_gain_f=None)
    return c.with_stages([s1, c.stages[1]])


def dual_inv(n: int = 2, *, channels: int = 1) -> Circuit:
    stages = tuple(Stage(c_couple_f=4.7e-6, r_in_ohm=1e3, r_feedback_ohm=10e3)
                   for _ in range(n))
    return Circuit(topology="inverting", supply=Supply("dual", 12.0, -12.0),
                   opamp=opamp(channels, gbw_hz=4e6), source_impedance_ohm=50.0,
                   load_ohm=2e3, bias=None, stages=stages, c_out_f=22e-6)


def single_inv(n: int = 2) -> Circuit:
    stages = tuple(Stage(c_couple_f=10e-6, r_in_ohm=1.5e3, r_feedback_ohm=15e3)
                   for _ in range(n))
    return Circuit(topology="inverting", supply=Supply("single", 12.0),
                   opamp=opamp(4), source_impedance_ohm=600.0, load_ohm=10e3,
                   bias=Bias(r_top_ohm=47.5e3, r_bottom_ohm=47.5e3, c_bypass_f=220e-6,
                             buffered=False),
                   stages=stages, c_out_f=4.7e-6)


def dual_dc(n: int = 2, *, channels: int = 4) -> Circuit:
    stages = tuple(Stage(c_couple_f=None, r_bias_ohm=None, r_feedback_ohm=4.99e3,
                         r_gain_ohm=1.1e3, c_gain_f=None) for _ in range(n))
    return Circuit(topology="non_inverting", supply=Supply("dual", 15.0, -15.0),
                   opamp=opamp(channels, gbw_hz=50e6, min_stable_gain=5.0),
                   source_impedance_ohm=50.0, load_ohm=10e3, bias=None, stages=stages,
                   c_out_f=None)


CIRCUITS = {
    "single_ni_3_unbuffered": lambda: single_ni(3),
    "single_ni_3_buffered": lambda: single_ni(3, buffered=True),
    "single_ni_mixed_quad": single_ni_mixed,
    "single_ni_1_single_pkg": lambda: single_ni(1, channels=1),
    "single_inv_2_quad": lambda: single_inv(2),
    "dual_inv_2": lambda: dual_inv(2),
    "dual_inv_5_dual_pkg": lambda: dual_inv(5, channels=2),
    "dual_dc_2_quad": lambda: dual_dc(2),
    "dual_dc_6_single_pkg": lambda: dual_dc(6, channels=1),
}

