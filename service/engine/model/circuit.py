"""Frozen dataclasses for the circuit model and its JSON form.

The circuit object is a contract shared with the API, the exporters and downstream tools.
Its exact shape (every key present, absent parts as ``None``) is described in README.md,
section "The circuit model", and mirrored by ``schemas/circuit.py``.

Nodes of the model: GND; REF (= VMID on a single supply, GND on a dual supply); the source
node X1 fed by an ideal source Vs through ``source_impedance_ohm``; per stage k the nodes
X_k (input), P_k (non-inverting input), N_k (inverting input), G_k (ground leg), M_k
(inverting input network) and O_k (output); OUT (load side of ``c_out_f``); VCC, VDIV and
VMID of the bias network.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, fields, replace

NON_INVERTING = "non_inverting"
INVERTING = "inverting"
TOPOLOGIES = (NON_INVERTING, INVERTING)

SINGLE = "single"
DUAL = "dual"

#: Stage keys per topology, in the order the JSON form lists them.
STAGE_KEYS = {
    NON_INVERTING: ("c_couple_f", "r_bias_ohm", "r_feedback_ohm", "c_feedback_f", "r_gain_ohm",
                    "c_gain_f"),
    INVERTING: ("c_couple_f", "r_in_ohm", "r_feedback_ohm", "c_feedback_f"),
}


@dataclass(frozen=True)
class OpAmp:
    """Small-signal and limit figures of one op-amp channel (SI units).

    Open-loop model: ``A(s) = A0 / (1 + s A0 / (2 pi gbw_hz))`` with ``A0 = 10**(a0_db/20)``,
    no input current, zero output impedance.

    Defaults for the optional fields: ``a0_db`` 100, common-mode margins 0 (the input may
    reach each rail), noise densities, bias current, offset and quiescent current 0 (not
    modelled), one channel per package, minimum stable gain 1 (unity-gain stable),
    ``psrr_db`` None (ideal: the supply does not reach the signal path),
    ``output_current_max_a`` None (not checked).
    """

    gbw_hz: float
    slew_v_per_us: float
    swing_to_pos_v: float
    swing_to_neg_v: float
    supply_min_v: float
    supply_max_v: float
    id: str | None = None
    description: str = ""
    manufacturer: str = ""
    mpn: str = ""
    a0_db: float = 100.0
    cm_to_pos_v: float = 0.0
    cm_to_neg_v: float = 0.0
    en_v_per_rthz: float = 0.0
    in_a_per_rthz: float = 0.0
    ib_a: float = 0.0
    vos_v: float = 0.0
    iq_a: float = 0.0
    channels_per_package: int = 1
    min_stable_gain: float = 1.0
    psrr_db: float | None = None
    output_current_max_a: float | None = None

    @property
    def a0(self) -> float:
        """Open-loop DC gain as a ratio, ``10**(a0_db/20)``."""
        return 10.0 ** (self.a0_db / 20.0)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict) -> OpAmp:
        known = {f.name for f in fields(cls)}
        return cls(**{k: v for k, v in data.items() if k in known})


@dataclass(frozen=True)
class Supply:
    """Supply rails. ``v_neg`` is 0 on a single supply."""

    kind: str
    v_pos: float
    v_neg: float = 0.0

    @property
    def span_v(self) -> float:
        """Total supply span ``v_pos - v_neg`` in volts."""
        return self.v_pos - self.v_neg

    def to_dict(self) -> dict:
        if self.kind == SINGLE:
            return {"kind": SINGLE, "v_pos": self.v_pos}
        return {"kind": DUAL, "v_pos": self.v_pos, "v_neg": self.v_neg}

    @classmethod
    def from_dict(cls, data: dict) -> Supply:
        return cls(kind=data["kind"], v_pos=data["v_pos"], v_neg=data.get("v_neg", 0.0) or 0.0)


@dataclass(frozen=True)
class Bias:
    """Single-supply mid-rail bias: divider VCC-VDIV-GND, bypass at VDIV, optional follower."""

    r_top_ohm: float
    r_bottom_ohm: float
    c_bypass_f: float
    buffered: bool

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Stage:
    """One gain stage. Which keys apply depends on the circuit's topology (``STAGE_KEYS``).

    ``c_feedback_f`` (both topologies) sits across ``r_feedback_ohm`` (O_k-N_k): the
    feedback impedance becomes ``Rf || 1/(s Cf)``, a band-limiting pole; None = none.
    """

    r_feedback_ohm: float
    c_couple_f: float | None = None
    r_bias_ohm: float | None = None
    r_gain_ohm: float | None = None
    c_gain_f: float | None = None
    r_in_ohm: float | None = None
    c_feedback_f: float | None = None

    def to_dict(self, topology: str) -> dict:
        return {k: getattr(self, k) for k in STAGE_KEYS[topology]}


@dataclass(frozen=True)
class Circuit:
    """The complete circuit: what the engine analyses and the exporters draw."""

    topology: str
    supply: Supply
    opamp: OpAmp
    source_impedance_ohm: float
    load_ohm: float
    bias: Bias | None
    stages: tuple[Stage, ...]
    c_out_f: float | None = None

    @property
    def n_stages(self) -> int:
        return len(self.stages)

    @property
    def opamp_units(self) -> int:
        """Op-amp channels used: one per stage, plus the bias follower when buffered."""
        return self.n_stages + (1 if self.bias is not None and self.bias.buffered else 0)

    @property
    def opamp_packages(self) -> int:
        return math.ceil(self.opamp_units / self.opamp.channels_per_package)

    def to_dict(self) -> dict:
        return {
            "topology": self.topology,
            "supply": self.supply.to_dict(),
            "opamp": self.opamp.to_dict(),
            "source_impedance_ohm": self.source_impedance_ohm,
            "load_ohm": self.load_ohm,
            "bias": None if self.bias is None else self.bias.to_dict(),
            "stages": [s.to_dict(self.topology) for s in self.stages],
            "c_out_f": self.c_out_f,
        }

    @classmethod
    def from_dict(cls, data: dict) -> Circuit:
        """Build a circuit from its JSON form (already validated by ``schemas.circuit``)."""
        bias = data.get("bias")
        return cls(
            topology=data["topology"],
            supply=Supply.from_dict(data["supply"]),
            opamp=OpAmp.from_dict(data["opamp"]),
            source_impedance_ohm=float(data["source_impedance_ohm"]),
            load_ohm=float(data["load_ohm"]),
            bias=None if bias is None else Bias(**bias),
            stages=tuple(Stage(**s) for s in data["stages"]),
            c_out_f=data.get("c_out_f"),
        )

    def with_stages(self, stages) -> Circuit:
        return replace(self, stages=tuple(stages))


@dataclass(frozen=True)
class Target:
    """Normalised cascade target: overall gain (ratio and dB) and the pass band.

    ``f_high_max_hz`` / ``f_low_min_hz`` (optional) bound the as-built band from outside:
    f_high must not exceed the first, f_low must not fall below the second. ``min_yield``
    is the fraction of builds (parts independent and uniform within their tolerances) that
    must meet all of it.
    """

    gain: float
    gain_db: float
    f_low_hz: float
    f_high_hz: float
    gain_tolerance_db: float = 0.5
    f_high_max_hz: float | None = None
    f_low_min_hz: float | None = None
    min_yield: float = 0.9

    @classmethod
    def from_gain(cls, *, gain: float | None = None, gain_db: float | None = None,
                  f_low_hz: float, f_high_hz: float, gain_tolerance_db: float = 0.5,
                  f_high_max_hz: float | None = None, f_low_min_hz: float | None = None,
                  min_yield: float = 0.9) -> Target:
        """Either ``gain`` or ``gain_db`` (or both, when they agree) fixes the other."""
        if gain is None:
            gain = 10.0 ** (gain_db / 20.0)
        if gain_db is None:
            gain_db = 20.0 * math.log10(gain)
        return cls(gain=gain, gain_db=gain_db, f_low_hz=f_low_hz, f_high_hz=f_high_hz,
                   gain_tolerance_db=gain_tolerance_db, f_high_max_hz=f_high_max_hz,
                   f_low_min_hz=f_low_min_hz, min_yield=min_yield)

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Components:
    """Component-series choices of a design request, the impedance level (ohm, or "auto"),
    and each part kind's tolerance (common practice: resistors 1 %, C0G/NP0 5 %, X7R/X5R
    10 %, aluminium electrolytics 20 %; the op-amp's gain-bandwidth spread 0 unless the user
    gives it).

    ``resistor_values`` / ``capacitor_values`` (None: the whole series) restrict the
    synthesis to those values of the series, e.g. an organisation's stocked parts when the
    request asks for ``stocked_only`` (the web layer fills them from its parts library).
    """

    resistor_series: str = "E96"
    capacitor_series: str = "E12"
    resistor_tolerance_pct: float = 1.0
    capacitor_tolerance_pct: float = 10.0
    impedance_ohm: float | str = "auto"  # "auto": chosen per design (synthesis.impedance)
    c0g_tolerance_pct: float = 5.0
    electrolytic_tolerance_pct: float = 20.0
    gbw_tolerance_pct: float = 0.0
    stocked_only: bool = False
    resistor_values: tuple[float, ...] | None = None
    capacitor_values: tuple[float, ...] | None = None

    @property
    def resistor_pool(self) -> str | tuple:
        """What the synthesis picks resistors from: the series name, or (name, values)."""
        if self.resistor_values is None:
            return self.resistor_series
        return (self.resistor_series, tuple(sorted(self.resistor_values)))

    @property
    def capacitor_pool(self) -> str | tuple:
        """What the synthesis picks capacitors from: the series name, or (name, values)."""
        if self.capacitor_values is None:
            return self.capacitor_series
        return (self.capacitor_series, tuple(sorted(self.capacitor_values)))


@dataclass(frozen=True)
class Limits:
    """The limits a circuit is judged by (the response's ``limits`` block).

    Defaults (common practice): supply ripple attenuated by at least 20 dB; no capacitor
    above 220 uF (beyond it electrolytics grow large, leaky and slow to charge); resistors
    from 10 ohm (below it the op-amp drives a near short) to 1 Mohm (above it leakage, bias
    currents and stray capacitance take over). ``None`` = figure reported without a limit.
    """

    ripple_rejection_db: float = 20.0
    max_capacitor_f: float = 220e-6
    min_resistor_ohm: float = 10.0
    max_resistor_ohm: float = 1e6
    max_startup_s: float | None = None
    min_input_impedance_ohm: float | None = None
    max_current_a: float | None = None

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Signal:
    input_peak_v: float = 0.01
    source_impedance_ohm: float = 50.0
    load_ohm: float = 10_000.0


@dataclass(frozen=True)
class DesignRequest:
    """A validated design request (built by ``schemas.request``)."""

    target: Target
    supply: Supply
    opamp: OpAmp
    signal: Signal = field(default_factory=Signal)
    topology: str = NON_INVERTING
    stages: int | None = None  # None = auto
    components: Components = field(default_factory=Components)
    strict: bool = False
    name: str | None = None
    limits: Limits = field(default_factory=Limits)
    #: An extra supply-ripple frequency (Hz) judged besides the mains set.
    supply_rejection_hz: float | None = None
    gain_split: str = "equal"  # "equal" | "low_noise" (synthesis.gain_split)
