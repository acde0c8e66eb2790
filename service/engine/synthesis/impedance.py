"""Automatic impedance level: the lowest-noise level whose parts stay within the limits.

The impedance level sets the resistor values of every stage (``r_feedback_ohm`` of a
non-inverting stage, ``r_in_ohm`` of an inverting one, the bias resistors) and so, for the
same corners, the capacitor values. Lower levels mean less resistor thermal noise (4kTR)
and less of the op-amp's current noise turned into voltage (``in`` times the resistance an
input sees); the op-amp's own ``en`` does not change. So noise falls with the level until
``en`` dominates, i.e. below the op-amp's optimum source resistance ``en/in`` (common
practice: keep the resistance each input sees small against both ``en^2 / 4kT`` and
``en/in``). What stops the fall: the op-amp must drive its feedback network and the next
stage (each output's own network at least ``MIN_OUTPUT_LOAD_OHM``, the load an op-amp's
swing figures are commonly specified into; common practice), capacitors grow as the level
falls (at most ``limits.max_capacitor_f``), and resistors must stay within
``limits.min_resistor_ohm..max_resistor_ohm``.

``components.impedance_ohm = "auto"``: levels of ``LEVELS_OHM`` are synthesised (first pass,
without yield centring), their parts checked against those limits, and the output noise
integrated over the target band (:func:`service.engine.judge.noise.rms_over`); a descent
over the ladder from 10 kohm finds the feasible level with the lowest noise (ties: nearer
10 kohm), skipping levels whose decade window leaves the resistor limits. When the descent
ends on a level that breaks a limit, every level is evaluated
and the one that breaks the limits by the least (the sum of ``|ln(value / limit)|``) is
taken; the reason says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from service.engine.judge.noise import rms_over
from service.engine.model.circuit import INVERTING, Circuit, DesignRequest, Limits

AUTO = "auto"
#: Levels tried (an E3-like ladder over the decades where op-amp stages live; 330k added
#: near the usual 1 Mohm ceiling, where a level's resistors reach about three times it).
LEVELS_OHM = (1e3, 2.2e3, 4.7e3, 10e3, 22e3, 47e3, 100e3, 220e3, 330e3, 470e3)
#: Smallest load an op-amp output may see from its own circuit (feedback network and next
#: stage at midband; the external load is the user's): datasheet swing figures are commonly
#: given into 2 kohm to 10 kohm (common practice).
MIN_OUTPUT_LOAD_OHM = 2e3
#: Tie-break: the classic level.
CLASSIC_OHM = 10e3


@dataclass(frozen=True)
class Choice:
    level_ohm: float
    noise_v_rms: float
    violations: tuple
    reason: str


def output_loads_ohm(circuit: Circuit) -> list[float]:
    """Midband load each stage output sees from the circuit's own parts (capacitors short,
    inverting inputs a virtual ground): its feedback network (``Rf + Rg`` non-inverting,
    ``Rf`` inverting) in parallel with the next stage's input resistor."""
    loads = []
    stages = circuit.stages
    for k, st in enumerate(stages):
        if circuit.topology == INVERTING:
            parts = [st.r_feedback_ohm]
        else:
            parts = [st.r_feedback_ohm + st.r_gain_ohm]
        if k + 1 < len(stages):
            nxt = stages[k + 1]
            r_next = nxt.r_in_ohm if circuit.topology == INVERTING else nxt.r_bias_ohm
            if r_next is not None:
                parts.append(r_next)
        loads.append(1.0 / sum(1.0 / r for r in parts))
    return loads


def violations(circuit: Circuit, limits: Limits) -> tuple[tuple[str, ...], float]:
    """The limits a circuit's parts break (empty when it fits), and by how much in all:
    the sum of ``|ln(value / limit)|`` over the broken ones."""
    out = []
    excess = 0.0
    resistors, capacitors = [], []
    for st in circuit.stages:
        resistors += [r for r in (st.r_feedback_ohm, st.r_gain_ohm, st.r_bias_ohm, st.r_in_ohm)
                      if r is not None]
        capacitors += [c for c in (st.c_couple_f, st.c_gain_f, st.c_feedback_f) if c is not None]
    if circuit.c_out_f is not None:
        capacitors.append(circuit.c_out_f)
    if circuit.bias is not None:
        resistors += [circuit.bias.r_top_ohm, circuit.bias.r_bottom_ohm]
        capacitors.append(circuit.bias.c_bypass_f)
    if min(resistors) < limits.min_resistor_ohm:
        out.append(f"a {min(resistors):.3g} ohm resistor is below {limits.min_resistor_ohm:g} ohm")
        excess += math.log(limits.min_resistor_ohm / min(resistors))
    if max(resistors) > limits.max_resistor_ohm:
        out.append(f"a {max(resistors):.3g} ohm resistor is above {limits.max_resistor_ohm:g} ohm")
        excess += math.log(max(resistors) / limits.max_resistor_ohm)
    if capacitors and max(capacitors) > limits.max_capacitor_f:
        out.append(f"a {max(capacitors):.3g} F capacitor is above {limits.max_capacitor_f:g} F")
        excess += math.log(max(capacitors) / limits.max_capacitor_f)
    low = min(output_loads_ohm(circuit))
    if low < MIN_OUTPUT_LOAD_OHM:
        out.append(f"an op-amp output is loaded by {low:.3g} ohm, under "
                   f"{MIN_OUTPUT_LOAD_OHM:g} ohm")
        excess += math.log(MIN_OUTPUT_LOAD_OHM / low)
    return tuple(out), excess


def noise_band_hz(req: DesignRequest) -> tuple[float, float]:
    """The band the levels are compared over: the target's (a DC-coupled chain from four
    decades below f_high)."""
    t = req.target
    low = t.f_low_hz if t.f_low_hz > 0 else t.f_high_hz * 1e-4
    return low, t.f_high_hz


def choose(req: DesignRequest, build) -> Choice:
    """The level for ``req`` (``build(request) -> Synthesis`` makes one first pass)."""
    lo, hi = noise_band_hz(req)
    rows: dict = {}

    def row(i: int):
        if i not in rows:
            level = LEVELS_OHM[i]
            c = build(with_level(req, level)).circuit
            broken, excess = violations(c, req.limits)
            rows[i] = (level, broken, rms_over(c, lo, hi), excess)
        return rows[i]

    def key(r):
        return (round(r[3], 9), round(r[2], 15), abs(math.log(r[0] / CLASSIC_OHM)))

    # Levels whose decade window (the level resistor ranges over level/sqrt(10) ..
    # level*sqrt(10)) leaves the resistor limits are not tried, unless no level is left.
    window = math.sqrt(10.0)
    lim = req.limits
    allowed = [j for j, v in enumerate(LEVELS_OHM)
               if lim.min_resistor_ohm <= v / window and v * window <= lim.max_resistor_ohm]
    first, last = (allowed[0], allowed[-1]) if allowed else (0, len(LEVELS_OHM) - 1)
    # Descent over the ladder from the classic level: each step moves to the neighbour that
    # breaks the limits by less, or keeps them with less noise; it ends where neither
    # neighbour is better (noise against level has one minimum between the resistor-noise
    # side and the limits' side; the tests compare with a sweep of every level).
    i = min(max(LEVELS_OHM.index(CLASSIC_OHM), first), last)
    while True:
        near = [j for j in (i - 1, i + 1) if first <= j <= last]
        if not near:
            break
        j = min(near, key=lambda j: key(row(j)))
        if key(row(j)) >= key(row(i)):
            break
        i = j
    if row(i)[1]:  # nothing feasible on the way: look at every level (rare, and slower)
        i = min(range(first, last + 1), key=lambda j: key(row(j)))
    level, broken, noise, _ = row(i)
    feasible = not broken
    band = f"{lo:.3g}..{hi:.3g} Hz"
    if feasible:
        reason = (f"Impedance level {level:g} ohm: the lowest output noise "
                  f"({noise:.3g} V rms over {band}) of the levels {LEVELS_OHM[first]:g}.."
                  f"{LEVELS_OHM[last]:g} ohm that keep every resistor within "
                  f"{req.limits.min_resistor_ohm:g}..{req.limits.max_resistor_ohm:g} ohm, every "
                  f"capacitor at or below {req.limits.max_capacitor_f:g} F and every op-amp "
                  f"output loaded by at least {MIN_OUTPUT_LOAD_OHM:g} ohm.")
    else:
        reason = (f"Impedance level {level:g} ohm: no level of {LEVELS_OHM[first]:g}.."
                  f"{LEVELS_OHM[last]:g} ohm keeps every part within the limits; this one breaks "
                  f"them least ({'; '.join(broken)}).")
    return Choice(level_ohm=level, noise_v_rms=noise, violations=broken, reason=reason)


def with_level(req: DesignRequest, level_ohm: float) -> DesignRequest:
    return replace(req, components=replace(req.components, impedance_ohm=float(level_ohm)))


def resolve(req: DesignRequest, build) -> tuple[DesignRequest, str | None]:
    """``(request with a numeric impedance level, reason)``; the reason is None when the
    request gave the level itself."""
    if req.components.impedance_ohm != AUTO:
        return req, None
    choice = choose(req, build)
    return with_level(req, choice.level_ohm), choice.reason
