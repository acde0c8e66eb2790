"""Schemas of the analyses: request options (tolerance Monte Carlo, response curves) and the
response blocks ``noise``, ``supply_rejection``, ``tolerance`` and ``response``.

Request side: strict types (an integer field refuses 3.5, a number field refuses "40"),
unknown fields rejected (marshmallow 4's default RAISE). Response side: every float may be
null (an engine value that does not exist, e.g. the low corner of a DC-coupled cascade).
"""

from __future__ import annotations

from marshmallow import Schema, ValidationError, fields, validates_schema
from marshmallow.validate import Length, Range

from schemas.fields import OutFloat, StrictFloat, StrictInteger

MAX_TRIALS = 100_000
MAX_POINTS = 2000
#: Response curves stay inside the model's frequency range (1 mHz .. 10 GHz).
F_MIN_HZ = 1e-3
F_MAX_HZ = 1e10


class ToleranceOptionsSchema(Schema):
    """``tolerance``: Monte Carlo options. Every tolerance not given here is the request's
    ``tolerances`` (a design's: its ``components``; /v1/analyses: its ``tolerances`` block)."""

    trials = StrictInteger(load_default=2000, validate=Range(min=1, max=MAX_TRIALS))
    seed = StrictInteger(load_default=1, validate=Range(min=0, max=2**63 - 1))
    resistor_tolerance_pct = StrictFloat(validate=Range(min=0, max=50))
    c0g_tolerance_pct = StrictFloat(validate=Range(min=0, max=80))
    capacitor_tolerance_pct = StrictFloat(validate=Range(min=0, max=80))
    electrolytic_tolerance_pct = StrictFloat(validate=Range(min=0, max=80))
    gbw_tolerance_pct = StrictFloat(validate=Range(min=0, max=90))


class ResponseOptionsSchema(Schema):
    """``response``: log-spaced curves, both ends included; limits default to one decade
    beyond the as-built corners."""

    points = StrictInteger(load_default=200, validate=Range(min=2, max=MAX_POINTS))
    f_start_hz = StrictFloat(load_default=None, allow_none=True,
                             validate=Range(min=F_MIN_HZ, max=F_MAX_HZ))
    f_stop_hz = StrictFloat(load_default=None, allow_none=True,
                            validate=Range(min=F_MIN_HZ, max=F_MAX_HZ))

    @validates_schema
    def _start_below_stop(self, data, **kwargs):
        start, stop = data.get("f_start_hz"), data.get("f_stop_hz")
        if start is not None and stop is not None and not start < stop:
            raise ValidationError(f"f_start_hz ({start}) must be below f_stop_hz ({stop}).",
                                  "f_start_hz")


def _floats(**kwargs):
    return fields.List(OutFloat(), **kwargs)


class DensitySchema(Schema):
    frequency_hz = _floats()
    v_per_rthz = _floats()


class RmsSchema(Schema):
    band = OutFloat(metadata={"description": "over the as-built band [f_low, f_high] (V rms)"})
    full = OutFloat(metadata={"description": "over 1 mHz .. 10 GHz (V rms)"})


class NoiseShareSchema(Schema):
    stage = fields.Integer()
    output_rms_v = OutFloat()
    share = OutFloat(metadata={"description": "fraction of the band output noise power"})


class NoiseOtherSchema(Schema):
    output_rms_v = OutFloat()
    share = OutFloat()


class NoiseBlockSchema(Schema):
    """Output noise: 4kTR of every resistor and each op-amp unit's en and in."""

    temperature_k = OutFloat()
    band_hz = fields.List(OutFloat(), validate=Length(equal=2))
    output_density = fields.Nested(DensitySchema)
    output_rms_v = fields.Nested(RmsSchema)
    input_rms_v = OutFloat()
    snr_db = OutFloat()
    stages = fields.List(fields.Nested(NoiseShareSchema))
    other = fields.Dict(keys=fields.String(), values=fields.Nested(NoiseOtherSchema))
    model = fields.String()


class SupplyRejectionBlockSchema(Schema):
    """``20 log10 |Vout/Vcc|`` (negative = attenuation); null on a dual supply."""

    frequency_hz = _floats()
    gain_db = _floats()
    psrr_db = OutFloat()
    model = fields.String()


class FigureStatsSchema(Schema):
    min = OutFloat()
    p1 = OutFloat()
    p5 = OutFloat()
    p50 = OutFloat()
    p95 = OutFloat()
    p99 = OutFloat()
    max = OutFloat()
    nominal = OutFloat()
    worst_case_low = OutFloat()
    worst_case_high = OutFloat()
    missing = fields.Integer(metadata={"description": "trials without this figure (no corner)"})


class McModelSchema(Schema):
    name = fields.String(metadata={"description": "stage-product (stiff REF) or "
                                                  "chain-fraction-free (shared bias divider)"})
    description = fields.String()
    frequency_points = fields.Integer()
    grid_hz = fields.List(OutFloat())
    varied_parts = fields.Integer()
    nominal_max_rel_deviation = OutFloat()


class ToleranceBlockSchema(Schema):
    """Monte Carlo over independent uniform part values; quantiles, yield, worst case."""

    trials = fields.Integer()
    seed = fields.Integer()
    resistor_tolerance_pct = OutFloat()
    capacitor_tolerance_pct = OutFloat()
    c0g_tolerance_pct = OutFloat()
    electrolytic_tolerance_pct = OutFloat()
    gbw_tolerance_pct = OutFloat()
    distribution = fields.String()
    model = fields.Nested(McModelSchema)
    yield_ = OutFloat(data_key="yield", attribute="yield")
    gain_db = fields.Nested(FigureStatsSchema)
    f_low_hz = fields.Nested(FigureStatsSchema)
    f_high_hz = fields.Nested(FigureStatsSchema)


class StageCurveSchema(Schema):
    stage = fields.Integer()
    gain_db = _floats()
    phase_deg = _floats()


class ResponseBlockSchema(Schema):
    """Vout/Vs and each stage's cumulative V(O_k)/Vs (against REF): gain and unwrapped phase."""

    frequency_hz = _floats()
    gain_db = _floats()
    phase_deg = _floats()
    stages = fields.List(fields.Nested(StageCurveSchema))
