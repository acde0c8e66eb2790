"""Each part's class and tolerance: the one source the BOM and the Monte Carlo share.

A capacitor's class follows from its value and the DC voltage across it (common practice):

* C0G/NP0 ceramic up to ``C0G_MAX_F`` (10 nF): stable, no voltage coefficient;
* class-2 ceramic X7R up to ``X7R_MAX_F`` (1 uF), X5R up to ``X5R_MAX_F`` (10 uF) at ratings up
  to ``X5R_MAX_RATING_V`` (25 V). In the signal path a class-2 ceramic carries at most
  ``CLASS2_DC_FRACTION`` (25 %) of its rated voltage as DC (common practice: the DC-bias
  capacitance loss of X5R/X7R grows fast above it), so its rating is the first standard
  one of at least 4x the DC across it; off the signal path (decoupling) the general
  derating of ``DERATING`` (2x) applies. When no ceramic rating (or no X5R rating) will
  do, the part is an aluminium electrolytic;
* aluminium electrolytic above, rated at least ``DERATING`` x its DC; bipolar when the DC
  across it is under ``BIPOLAR_BELOW_V`` (its polarity would be set only by offsets).

Tolerances (the response's ``tolerances`` block; defaults are common practice): resistors
1 %, C0G/NP0 5 %, X7R/X5R 10 %, aluminium electrolytics 20 %, the op-amp's gain-bandwidth
0 % (datasheets mostly give a typical value only; users set their part's spread).

DC across the circuit-model capacitors (capacitors open, no input currents; common
practice): every stage node sits at REF (VMID on a single supply, 0 V on a dual one), the
source and load sides at 0 V. So the stage-1 coupling capacitor, every ground-leg
capacitor, the output capacitor and the bias bypass carry VMID; interstage coupling and
feedback capacitors carry 0 V.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from service.engine.model.circuit import INVERTING, Circuit, Components

C0G_MAX_F = 10e-9
X7R_MAX_F = 1e-6
X5R_MAX_F = 10e-6
X5R_MAX_RATING_V = 25.0
#: Voltage rating >= DERATING x the DC voltage across the part (common practice: 1.5-2x).
DERATING = 2.0
#: A class-2 ceramic in the signal path carries at most this fraction of its rating as DC.
CLASS2_DC_FRACTION = 0.25
CERAMIC_RATINGS_V = (10.0, 16.0, 25.0, 50.0, 100.0, 200.0)
ELECTROLYTIC_RATINGS_V = (6.3, 10.0, 16.0, 25.0, 35.0, 50.0, 63.0, 100.0, 160.0, 250.0)
BIPOLAR_BELOW_V = 0.5

#: Part kinds (keys of :meth:`Tolerances.pct`).
RESISTOR = "resistor"
C0G = "c0g"
CLASS2 = "class2"
ELECTROLYTIC = "electrolytic"
GBW = "gbw"


@dataclass(frozen=True)
class Tolerances:
    """Half-widths (percent) of each part kind's uniform spread: the ``tolerances`` block."""

    resistor_tolerance_pct: float = 1.0
    c0g_tolerance_pct: float = 5.0
    capacitor_tolerance_pct: float = 10.0
    electrolytic_tolerance_pct: float = 20.0
    gbw_tolerance_pct: float = 0.0

    def pct(self, kind: str) -> float:
        return {RESISTOR: self.resistor_tolerance_pct, C0G: self.c0g_tolerance_pct,
                CLASS2: self.capacitor_tolerance_pct,
                ELECTROLYTIC: self.electrolytic_tolerance_pct,
                GBW: self.gbw_tolerance_pct}[kind]

    def to_dict(self) -> dict:
        return asdict(self)


def tolerances_of(components: Components) -> Tolerances:
    """The ``tolerances`` block of a design request's ``components``."""
    return Tolerances(components.resistor_tolerance_pct, components.c0g_tolerance_pct,
                      components.capacitor_tolerance_pct,
                      components.electrolytic_tolerance_pct, components.gbw_tolerance_pct)


@dataclass(frozen=True)
class CapacitorClass:
    """What the BOM lists for one capacitor: kind, dielectric text, rating, bipolar."""

    kind: str  # C0G | CLASS2 | ELECTROLYTIC
    dielectric: str  # "C0G/NP0", "X7R", "X5R", "Al electrolytic", "Al electrolytic bipolar"
    rating_v: float | None
    bipolar: bool = False


def _rating(need_v: float, ratings) -> float | None:
    return next((r for r in ratings if r >= need_v), None)


def capacitor_class(value_f: float, v_dc_v: float, *, signal_path: bool = True) -> CapacitorClass:
    """Class, dielectric and voltage rating of a capacitor (module docstring).

    ``rating_v`` is None when no standard rating reaches the DC across the part.
    """
    v = abs(v_dc_v)
    general = DERATING * v
    class2_need = max(general, v / CLASS2_DC_FRACTION) if signal_path else general
    if value_f <= C0G_MAX_F:
        rating = _rating(general, CERAMIC_RATINGS_V)
        if rating is not None:
            return CapacitorClass(C0G, "C0G/NP0", rating)
    elif value_f <= X5R_MAX_F:
        rating = _rating(class2_need, CERAMIC_RATINGS_V)
        if rating is not None and value_f <= X7R_MAX_F:
            return CapacitorClass(CLASS2, "X7R", rating)
        if rating is not None and rating <= X5R_MAX_RATING_V:
            return CapacitorClass(CLASS2, "X5R", rating)
    rating = _rating(general, ELECTROLYTIC_RATINGS_V)
    if v < BIPOLAR_BELOW_V:
        return CapacitorClass(ELECTROLYTIC, "Al electrolytic bipolar", rating, bipolar=True)
    return CapacitorClass(ELECTROLYTIC, "Al electrolytic", rating)


def ref_dc_v(circuit: Circuit) -> float:
    """DC voltage of REF: ``v_pos r_bottom / (r_top + r_bottom)`` on a single supply, else 0."""
    b = circuit.bias
    if b is None:
        return 0.0
    return circuit.supply.v_pos * b.r_bottom_ohm / (b.r_top_ohm + b.r_bottom_ohm)


def circuit_capacitors(circuit: Circuit) -> list[tuple[str, int | None, float, float]]:
    """``(field, stage index | None, value_f, dc_across_v)`` of every capacitor of the model."""
    vref = ref_dc_v(circuit)
    out = []
    for k, st in enumerate(circuit.stages):
        if st.c_couple_f is not None:
            out.append(("c_couple_f", k, st.c_couple_f, vref if k == 0 else 0.0))
        if circuit.topology != INVERTING and st.c_gain_f is not None:
            out.append(("c_gain_f", k, st.c_gain_f, vref))
        c_fb = getattr(st, "c_feedback_f", None)
        if c_fb is not None:
            out.append(("c_feedback_f", k, c_fb, 0.0))
    if circuit.c_out_f is not None:
        out.append(("c_out_f", None, circuit.c_out_f, vref))
    if circuit.bias is not None:
        out.append(("c_bypass_f", None, circuit.bias.c_bypass_f, vref))
    return out


def capacitor_kinds(circuit: Circuit) -> dict:
    """``{(field, stage index | None): kind}`` of every capacitor of the model."""
    return {(f, k): capacitor_class(c, v).kind for f, k, c, v in circuit_capacitors(circuit)}


def part_tolerance_pct(circuit: Circuit, field: str, index: int | None,
                       tolerances: Tolerances) -> float:
    """The tolerance (percent) of one part of the circuit model: its BOM line's."""
    if field.startswith("r_"):
        return tolerances.resistor_tolerance_pct
    if field == "gbw_hz":
        return tolerances.gbw_tolerance_pct
    return tolerances.pct(capacitor_kinds(circuit)[(field, index)])
