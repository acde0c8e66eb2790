"""Request bodies: the design request and the analysis request (field names are a contract)."""

from __future__ import annotations

import math

from marshmallow import Schema, ValidationError, fields, post_load, validates_schema
from marshmallow.validate import Length, OneOf, Range

from schemas.circuit import CircuitSchema, SupplySchema
from schemas.extras import ResponseOptionsSchema, ToleranceOptionsSchema
from schemas.fields import StrictBoolean, StrictFloat, StrictInteger
from schemas.opamp import OpAmpField
from service.engine.model.circuit import TOPOLOGIES, Components, Limits, Signal, Target
from service.engine.model.eseries import CAPACITOR_SERIES, RESISTOR_SERIES
from service.engine.model.parts import Tolerances
from service.engine.synthesis.ideal import MAX_STAGES

#: Agreement asked of ``gain`` and ``gain_db`` when both are given (relative, on the ratio).
GAIN_AGREEMENT = 1e-6
#: The frequency range of the model (the corner search spans 1 mHz .. 10 GHz).
F_RANGE = Range(min=1e-3, max=1e10)


class TargetSchema(Schema):
    gain_db = StrictFloat(validate=Range(min=0, max=300, min_inclusive=False))
    gain = StrictFloat(validate=Range(min=1, max=1e15, min_inclusive=False))
    f_low_hz = StrictFloat(required=True, validate=Range(min=0, max=1e10))
    f_high_hz = StrictFloat(required=True, validate=F_RANGE)
    gain_tolerance_db = StrictFloat(load_default=0.5, validate=Range(min=0, max=60,
                                                                     min_inclusive=False))
    f_high_max_hz = StrictFloat(load_default=None, allow_none=True, validate=F_RANGE)
    f_low_min_hz = StrictFloat(load_default=None, allow_none=True, validate=F_RANGE)
    min_yield = StrictFloat(load_default=0.9, validate=Range(min=0, max=1, min_inclusive=False))

    @validates_schema
    def _consistent(self, data, **kwargs):
        has_db, has_ratio = "gain_db" in data, "gain" in data
        if not has_db and not has_ratio:
            raise ValidationError("give gain_db or gain", "gain_db")
        if has_db and has_ratio:
            from_db = 10.0 ** (data["gain_db"] / 20.0)
            if abs(from_db / data["gain"] - 1.0) > GAIN_AGREEMENT:
                raise ValidationError(
                    f"gain {data['gain']:g} and gain_db {data['gain_db']:g} disagree "
                    f"(give one, or both within {GAIN_AGREEMENT:g} relative)", "gain")
        low, high = data.get("f_low_hz"), data.get("f_high_hz")
        if low is not None and high is not None and low >= high:
            raise ValidationError(f"f_low_hz ({low:g}) must be below f_high_hz ({high:g})",
                                  "f_low_hz")
        if low is not None and 0 < low < 1e-3:
            raise ValidationError("f_low_hz must be 0 (DC coupled) or at least 1 mHz", "f_low_hz")
        high_max, low_min = data.get("f_high_max_hz"), data.get("f_low_min_hz")
        if high_max is not None and high is not None and not high_max > high:
            raise ValidationError(f"f_high_max_hz ({high_max:g}) must be above f_high_hz "
                                  f"({high:g})", "f_high_max_hz")
        if low_min is not None and low is not None and not low_min < low:
            raise ValidationError(f"f_low_min_hz ({low_min:g}) must be below f_low_hz "
                                  f"({low:g})", "f_low_min_hz")

    @post_load
    def _make(self, data, **kwargs) -> Target:
        gain = data.get("gain")
        gain_db = data.get("gain_db")
        if gain is not None:
            gain_db = 20.0 * math.log10(gain)
        return Target.from_gain(gain=gain, gain_db=gain_db, f_low_hz=data["f_low_hz"],
                                f_high_hz=data["f_high_hz"],
                                gain_tolerance_db=data["gain_tolerance_db"],
                                f_high_max_hz=data["f_high_max_hz"],
                                f_low_min_hz=data["f_low_min_hz"], min_yield=data["min_yield"])


#: Request fields that set a limit, by the block they sit in (the response echoes them all
#: in one ``limits`` block, which /v1/analyses accepts as it is).
LIMIT_FIELDS = {
    "supply": ("ripple_rejection_db", "max_current_a"),
    "components": ("max_capacitor_f", "min_resistor_ohm", "max_resistor_ohm"),
    "signal": ("max_startup_s", "min_input_impedance_ohm"),
}
_POSITIVE = Range(min=0, min_inclusive=False)


class LimitsSchema(Schema):
    """The ``limits`` block: echoed by every design, accepted by /v1/analyses."""

    ripple_rejection_db = StrictFloat(load_default=20.0, validate=Range(min=-200, max=200))
    max_capacitor_f = StrictFloat(load_default=220e-6, validate=Range(min=1e-15, max=10.0))
    min_resistor_ohm = StrictFloat(load_default=10.0, validate=Range(min=0, max=1e12))
    max_resistor_ohm = StrictFloat(load_default=1e6, validate=Range(min=1e-3, max=1e13))
    max_startup_s = StrictFloat(load_default=None, allow_none=True, validate=_POSITIVE)
    min_input_impedance_ohm = StrictFloat(load_default=None, allow_none=True,
                                          validate=_POSITIVE)
    max_current_a = StrictFloat(load_default=None, allow_none=True, validate=_POSITIVE)

    @validates_schema
    def _order(self, data, **kwargs):
        lo, hi = data.get("min_resistor_ohm"), data.get("max_resistor_ohm")
        if lo is not None and hi is not None and lo >= hi:
            raise ValidationError(f"min_resistor_ohm ({lo:g}) must be below max_resistor_ohm "
                                  f"({hi:g})", "min_resistor_ohm")

    @post_load
    def _make(self, data, **kwargs) -> Limits:
        return Limits(**data)


class TolerancesSchema(Schema):
    """The ``tolerances`` block: echoed by every design, accepted by /v1/analyses (each part
    kind's tolerance in percent; defaults as in a design request's ``components``)."""

    resistor_tolerance_pct = StrictFloat(load_default=1.0, validate=Range(min=0, max=50))
    c0g_tolerance_pct = StrictFloat(load_default=5.0, validate=Range(min=0, max=80))
    capacitor_tolerance_pct = StrictFloat(load_default=10.0, validate=Range(min=0, max=80))
    electrolytic_tolerance_pct = StrictFloat(load_default=20.0, validate=Range(min=0, max=80))
    gbw_tolerance_pct = StrictFloat(load_default=0.0, validate=Range(min=0, max=90))

    @post_load
    def _make(self, data, **kwargs) -> Tolerances:
        return Tolerances(**data)


class SignalSchema(Schema):
    input_peak_v = StrictFloat(load_default=0.01, validate=Range(min=0, max=1000,
                                                                 min_inclusive=False))
    source_impedance_ohm = StrictFloat(load_default=50.0, validate=Range(min=0, max=1e9))
    load_ohm = StrictFloat(load_default=10_000.0, validate=Range(min=1, max=1e12))
    max_startup_s = LimitsSchema._declared_fields["max_startup_s"]
    min_input_impedance_ohm = LimitsSchema._declared_fields["min_input_impedance_ohm"]

    @post_load
    def _make(self, data, **kwargs) -> Signal:
        return _split(Signal, data, "signal")


class ImpedanceField(fields.Field):
    """``"auto"`` or a number of ohms, 10 .. 1e7 (booleans and numeric strings refused)."""

    default_error_messages = {"invalid": 'Give "auto" or a number of ohms from 10 to 1e7.'}

    def _deserialize(self, value, attr, data, **kwargs):
        if value == "auto":
            return value
        if isinstance(value, bool) or not isinstance(value, (int, float)) \
                or not math.isfinite(value) or not 10 <= value <= 1e7:
            raise self.make_error("invalid")
        return float(value)


class ComponentsSchema(Schema):
    resistor_series = fields.String(load_default="E96", validate=OneOf(RESISTOR_SERIES))
    capacitor_series = fields.String(load_default="E12", validate=OneOf(CAPACITOR_SERIES))
    resistor_tolerance_pct = StrictFloat(load_default=1.0, validate=Range(min=0, max=50))
    capacitor_tolerance_pct = StrictFloat(load_default=10.0, validate=Range(min=0, max=80))
    impedance_ohm = ImpedanceField(load_default="auto")
    c0g_tolerance_pct = StrictFloat(load_default=5.0, validate=Range(min=0, max=80))
    electrolytic_tolerance_pct = StrictFloat(load_default=20.0, validate=Range(min=0, max=80))
    gbw_tolerance_pct = StrictFloat(load_default=0.0, validate=Range(min=0, max=90))
    max_capacitor_f = LimitsSchema._declared_fields["max_capacitor_f"]
    min_resistor_ohm = LimitsSchema._declared_fields["min_resistor_ohm"]
    max_resistor_ohm = LimitsSchema._declared_fields["max_resistor_ohm"]
    stocked_only = StrictBoolean(load_default=False, metadata={
        "description": "Use only the parts library's values of the series "
                       "(GAINCHAIN_PARTS_LIBRARY, GET /v1/parts)."})

    @post_load
    def _make(self, data, **kwargs) -> Components:
        return _split(Components, data, "components")


class RequestSupplySchema(SupplySchema):
    """The request's supply: the rails plus the limits that belong to the supply."""

    ripple_rejection_db = LimitsSchema._declared_fields["ripple_rejection_db"]
    max_current_a = LimitsSchema._declared_fields["max_current_a"]

    @post_load
    def _make(self, data, **kwargs):
        supply = super()._make({k: v for k, v in data.items()
                                if k not in LIMIT_FIELDS["supply"]}, **kwargs)
        return supply, {k: data[k] for k in LIMIT_FIELDS["supply"] if k in data}


def _split(cls, data: dict, block: str):
    """``(cls(non-limit fields), {limit fields given})`` of one request block."""
    limits = {k: data[k] for k in LIMIT_FIELDS[block] if k in data}
    return cls(**{k: v for k, v in data.items() if k not in limits}), limits


def limits_of(data: dict) -> Limits:
    """The request's ``Limits``: the limit fields of supply, components and signal (loaded
    as ``(value, limits)`` pairs by their schemas); defaults fill the rest."""
    given = {}
    for block in LIMIT_FIELDS:
        given.update(data[block][1])
    return Limits(**given)


class StagesField(fields.Field):
    """``"auto"`` or an integer 1..12."""

    default_error_messages = {"invalid": f'Give "auto" or an integer from 1 to {MAX_STAGES}.'}

    def _deserialize(self, value, attr, data, **kwargs):
        if value == "auto":
            return None
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= MAX_STAGES:
            raise self.make_error("invalid")
        return value




class DesignRequestSchema(Schema):
    name = fields.String(validate=Length(max=80), allow_none=True)
    target = fields.Nested(TargetSchema, required=True)
    supply = fields.Nested(RequestSupplySchema, required=True)
    signal = fields.Nested(SignalSchema, load_default=lambda: (Signal(), {}))
    opamp = OpAmpField(required=True)
    topology = fields.String(load_default="non_inverting", validate=OneOf(TOPOLOGIES))
    stages = StagesField(load_default=None)
    components = fields.Nested(ComponentsSchema, load_default=lambda: (Components(), {}))
    strict = StrictBoolean(load_default=False)
    gain_split = fields.String(load_default="equal", validate=OneOf(("equal", "low_noise")))
    tolerance = fields.Nested(ToleranceOptionsSchema)
    response = fields.Nested(ResponseOptionsSchema)
    temperature_k = StrictFloat(load_default=300.0, validate=Range(min=1, max=1000))
    supply_rejection_hz = StrictFloat(validate=F_RANGE)


#: Most op-amps one exploration may name.
MAX_EXPLORATION_OPAMPS = 200


class OpAmpChoicesField(fields.Field):
    """A list of 1..``MAX_EXPLORATION_OPAMPS`` catalog ids and/or op-amp objects."""

    default_error_messages = {
        "invalid": "Give a list of catalog ids and/or op-amp objects.",
        "length": f"Give 1 to {MAX_EXPLORATION_OPAMPS} op-amps.",
    }

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, list):
            raise self.make_error("invalid")
        if not 1 <= len(value) <= MAX_EXPLORATION_OPAMPS:
            raise self.make_error("length")
        out, errors = [], {}
        item_field = OpAmpField()
        for i, item in enumerate(value):
            try:
                out.append(item_field.deserialize(item))
            except ValidationError as err:
                errors[i] = err.messages
        if errors:
            raise ValidationError(errors)
        return out


class StageCountsField(fields.Field):
    """``"auto"`` or a list of distinct integers 1..12."""

    default_error_messages = {"invalid": f'Give "auto" or a list of distinct integers from 1 '
                                         f'to {MAX_STAGES}.'}

    def _deserialize(self, value, attr, data, **kwargs):
        if value == "auto":
            return None
        if not isinstance(value, list) or not value or len(set(map(repr, value))) != len(value):
            raise self.make_error("invalid")
        for n in value:
            if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= MAX_STAGES:
                raise self.make_error("invalid")
        return sorted(value)


class ExplorationRequestSchema(DesignRequestSchema):
    """A design request whose ``opamp`` may be omitted (the whole catalog) or a list, and
    whose ``stages`` is "auto" or a list of counts. ``strict`` may only be false: every
    candidate carries its own status."""

    opamp = OpAmpChoicesField(load_default=None)
    stages = StageCountsField(load_default=None)
    strict = StrictBoolean(load_default=False, validate=OneOf(
        [False], error="explorations list unmet candidates with their status; give false"))


class AnalysisRequestSchema(Schema):
    name = fields.String(validate=Length(max=80), allow_none=True)
    circuit = fields.Nested(CircuitSchema, required=True)
    input_peak_v = StrictFloat(load_default=0.01, validate=Range(min=0, max=1000,
                                                                 min_inclusive=False))
    target = fields.Nested(TargetSchema, allow_none=True, load_default=None)
    limits = fields.Nested(LimitsSchema, load_default=lambda: Limits())
    tolerances = fields.Nested(TolerancesSchema, load_default=lambda: Tolerances())
    tolerance = fields.Nested(ToleranceOptionsSchema)
    response = fields.Nested(ResponseOptionsSchema)
    temperature_k = StrictFloat(load_default=300.0, validate=Range(min=1, max=1000))
    supply_rejection_hz = StrictFloat(validate=F_RANGE)


__all__ = ["DesignRequestSchema", "AnalysisRequestSchema", "TargetSchema", "StrictInteger",
           "LimitsSchema", "TolerancesSchema", "limits_of"]
