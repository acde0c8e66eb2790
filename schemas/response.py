"""Response bodies of /v1/designs and /v1/analyses (the published contract).

The service builds these bodies as plain dicts (``service.engine.report``) and writes them
with the strict JSON writer; these schemas describe them for the OpenAPI document, and the
schemathesis run checks every reply against them. Non-finite numbers are written as null,
so every float here may be null.
"""

from __future__ import annotations

from marshmallow import Schema, fields

from schemas.circuit import CircuitOutSchema
from schemas.extras import (
    NoiseBlockSchema,
    ResponseBlockSchema,
    SupplyRejectionBlockSchema,
    ToleranceBlockSchema,
)
from schemas.fields import OutFloat


def _pair():
    return fields.List(OutFloat(), metadata={"description": "[low, high]"})


class TargetOutSchema(Schema):
    gain = OutFloat()
    gain_db = OutFloat()
    f_low_hz = OutFloat()
    f_high_hz = OutFloat()
    gain_tolerance_db = OutFloat()
    f_high_max_hz = OutFloat(allow_none=True)
    f_low_min_hz = OutFloat(allow_none=True)
    min_yield = OutFloat()


class ShortfallSchema(Schema):
    quantity = fields.String(metadata={"description": "f_low_hz, f_high_hz, gain_db, "
                                                      "f_high_max_hz, f_low_min_hz, yield or "
                                                      "the name of a failed check"})
    stage = fields.Integer(allow_none=True, metadata={"description": "1-based stage of a "
                                                                     "per-stage check"})
    target = OutFloat(metadata={"description": "the target figure or the check's limit"})
    achieved = OutFloat()


class CheckSchema(Schema):
    """One build check (README "Build checks")."""

    check = fields.String(metadata={"enum": [
        "output_swing", "input_common_mode", "slew_rate", "stability", "supply_ripple",
        "part_values", "output_current", "startup_time", "input_impedance", "supply_current"]})
    stage = fields.Integer(allow_none=True)
    value = OutFloat()
    limit = OutFloat()
    unit = fields.String(metadata={"enum": ["V", "V/us", "dB", "F", "ohm", "A", "s", ""]})
    passed = fields.Boolean(allow_none=True, metadata={
        "description": "null for a figure reported without a limit"})
    detail = fields.String()


class LimitsOutSchema(Schema):
    """The limits a design was judged by (accepted as they are by /v1/analyses)."""

    ripple_rejection_db = OutFloat()
    max_capacitor_f = OutFloat()
    min_resistor_ohm = OutFloat()
    max_resistor_ohm = OutFloat()
    max_startup_s = OutFloat()
    min_input_impedance_ohm = OutFloat()
    max_current_a = OutFloat()


class WarningSchema(Schema):
    code = fields.String()
    message = fields.String()


class IdealSchema(Schema):
    stage_gain = OutFloat()
    stage_f_high_hz = OutFloat()
    stage_f_low_hz = OutFloat()
    f_high_hz = OutFloat()
    f_low_hz = OutFloat()
    bandwidth_hz = OutFloat()
    single_stage_f_high_hz = OutFloat()
    bandwidth_fraction = OutFloat()


class StageFiguresSchema(Schema):
    gain = OutFloat()
    f_low_hz = OutFloat()
    f_high_hz = OutFloat()


class AsBuiltSchema(Schema):
    gain = OutFloat()
    gain_db = OutFloat()
    f_low_hz = OutFloat(metadata={"description": "null when DC coupled"})
    f_high_hz = OutFloat()
    bandwidth_hz = OutFloat()
    peak_hz = OutFloat(metadata={"description": "frequency of the response maximum"})
    inverting = fields.Boolean()
    stages = fields.List(fields.Nested(StageFiguresSchema))


class PerformanceSchema(Schema):
    ideal = fields.Nested(IdealSchema)
    as_built = fields.Nested(AsBuiltSchema)


class AnalysisPerformanceSchema(Schema):
    as_built = fields.Nested(AsBuiltSchema)


class StageHeadroomSchema(Schema):
    stage = fields.Integer()
    output_dc_v = OutFloat()
    dc_error_v = OutFloat(metadata={"description": "worst-case DC error at the output from "
                                                   "vos_v and ib_a"})
    offset_worst_v = OutFloat(metadata={"description": "same as dc_error_v (kept for "
                                                       "existing callers)"})
    swing_window_v = _pair()
    output_peak_v = OutFloat()
    available_peak_v = OutFloat()
    swing_headroom_db = OutFloat()
    max_input_peak_v = OutFloat()
    required_slew_v_per_us = OutFloat()
    opamp_slew_v_per_us = OutFloat()
    slew_ok = fields.Boolean()
    full_power_bandwidth_hz = OutFloat()
    input_cm_v = _pair()
    cm_window_v = _pair()
    cm_ok = fields.Boolean()


class OverallHeadroomSchema(Schema):
    min_swing_headroom_db = OutFloat()
    limiting_stage = fields.Integer()
    max_input_peak_v = OutFloat()
    output_peak_v = OutFloat()
    slew_ok = fields.Boolean()
    cm_ok = fields.Boolean()


class HeadroomSchema(Schema):
    stages = fields.List(fields.Nested(StageHeadroomSchema))
    overall = fields.Nested(OverallHeadroomSchema)


class BiasReportSchema(Schema):
    ref = fields.String(metadata={"description": "VMID (single supply) or GND (dual)"})
    vmid_v = OutFloat()
    vmid_target_v = OutFloat()
    reason = fields.String()
    r_top_ohm = OutFloat()
    r_bottom_ohm = OutFloat()
    c_bypass_f = OutFloat()
    buffered = fields.Boolean(allow_none=True)
    node_impedance_ohm = OutFloat()
    bypass_corner_hz = OutFloat()
    divider_current_a = OutFloat()


class TradeoffRowSchema(Schema):
    stages = fields.Integer()
    stage_gain = OutFloat()
    stage_gain_db = OutFloat()
    stage_f_high_hz = OutFloat()
    f_high_hz = OutFloat()
    stage_f_low_hz = OutFloat()
    stable = fields.Boolean()
    meets_target = fields.Boolean()
    opamp_packages = fields.Integer()
    part_count = fields.Integer()


class TradeoffSchema(Schema):
    rows = fields.List(fields.Nested(TradeoffRowSchema))
    optimal_stages = OutFloat(metadata={"description": "real n maximising ideal bandwidth"})
    best_stages = fields.Integer()
    required_gbw_hz = OutFloat(metadata={"description": "null when some n reaches the target"})
    required_gbw_stages = fields.Integer(allow_none=True)


class TolerancesOutSchema(Schema):
    """Each part kind's tolerance (percent): the one its BOM line states and the Monte
    Carlo and yield use; /v1/analyses accepts the block as it is."""

    resistor_tolerance_pct = fields.Float()
    c0g_tolerance_pct = fields.Float()
    capacitor_tolerance_pct = fields.Float()
    electrolytic_tolerance_pct = fields.Float()
    gbw_tolerance_pct = fields.Float()


class YieldFigureSchema(Schema):
    nominal = OutFloat()
    spread = OutFloat(allow_none=True, metadata={
        "description": "standard deviation of the modelled figure under the tolerances"})
    limit = fields.List(OutFloat(allow_none=True), metadata={
        "description": "[low, high] the target allows (null: open side)"})


class YieldBlockSchema(Schema):
    """Predicted fraction of builds meeting the target under the ``tolerances``."""

    predicted = OutFloat()
    min_yield = OutFloat()
    method = fields.String()
    description = fields.String()
    peaking_fraction = OutFloat(metadata={
        "description": "builds whose shared bias node rings (0 with a stiff VMID)"})
    figures = fields.Dict(keys=fields.String(), values=fields.Nested(YieldFigureSchema))


class ComponentsOutSchema(Schema):
    """The request's components as used: the impedance level resolved, and why."""

    resistor_series = fields.String()
    capacitor_series = fields.String()
    resistor_tolerance_pct = fields.Float()
    capacitor_tolerance_pct = fields.Float()
    impedance_ohm = fields.Float()
    c0g_tolerance_pct = fields.Float()
    electrolytic_tolerance_pct = fields.Float()
    gbw_tolerance_pct = fields.Float()
    stocked_only = fields.Boolean()
    impedance_reason = fields.String()


class _AnalysesBlocks(Schema):
    noise = fields.Nested(NoiseBlockSchema)
    supply_rejection = fields.Nested(SupplyRejectionBlockSchema, allow_none=True)
    tolerance = fields.Nested(ToleranceBlockSchema)
    response = fields.Nested(ResponseBlockSchema)


_DESIGN_ID = {"description": "SHA-256 (hex) of the canonical circuit JSON and the service's "
                             "major version: same circuit, same id (README \"Design identity\")"}


class BomCostSchema(Schema):
    currency = fields.String(metadata={"description": "ISO 4217 code of the parts library"})
    total = OutFloat(metadata={"description": "sum of the priced BOM lines; null when none is "
                                              "priced"})
    unpriced_lines = fields.Integer()


class DesignResponseSchema(_AnalysesBlocks):
    name = fields.String(allow_none=True)
    design_id = fields.String(metadata=_DESIGN_ID)
    bom_cost = fields.Nested(BomCostSchema, allow_none=True, metadata={
        "description": "null without a parts library (GAINCHAIN_PARTS_LIBRARY)"})
    status = fields.String(metadata={"enum": ["meets_target", "target_not_met"]})
    shortfalls = fields.List(fields.Nested(ShortfallSchema))
    target = fields.Nested(TargetOutSchema)
    stage_count = fields.Integer()
    topology = fields.String()
    circuit = fields.Nested(CircuitOutSchema)
    performance = fields.Nested(PerformanceSchema)
    headroom = fields.Nested(HeadroomSchema)
    checks = fields.List(fields.Nested(CheckSchema))
    limits = fields.Nested(LimitsOutSchema)
    bias = fields.Nested(BiasReportSchema)
    tradeoff = fields.Nested(TradeoffSchema)
    components = fields.Nested(ComponentsOutSchema)
    tolerances = fields.Nested(TolerancesOutSchema)
    yield_ = fields.Nested(YieldBlockSchema, data_key="yield", attribute="yield")
    warnings = fields.List(fields.Nested(WarningSchema))
    cautions = fields.List(fields.String())


class AnalysisResponseSchema(_AnalysesBlocks):
    tolerances = fields.Nested(TolerancesOutSchema)
    yield_ = fields.Nested(YieldBlockSchema, data_key="yield", attribute="yield")
    name = fields.String(allow_none=True)
    design_id = fields.String(metadata=_DESIGN_ID)
    status = fields.String(metadata={"enum": ["meets_target", "target_not_met"]})
    shortfalls = fields.List(fields.Nested(ShortfallSchema))
    performance = fields.Nested(AnalysisPerformanceSchema)
    headroom = fields.Nested(HeadroomSchema)
    checks = fields.List(fields.Nested(CheckSchema))
    limits = fields.Nested(LimitsOutSchema)
    bias = fields.Nested(BiasReportSchema)
    warnings = fields.List(fields.Nested(WarningSchema))
    cautions = fields.List(fields.String())


class ExplorationCandidateSchema(Schema):
    opamp_id = fields.String(allow_none=True, metadata={
        "description": "catalog id, or the op-amp object's id (null when it has none)"})
    stage_count = fields.Integer()
    status = fields.String(metadata={"enum": ["meets_target", "target_not_met"]})
    shortfalls = fields.List(fields.Nested(ShortfallSchema))
    design_id = fields.String(metadata=_DESIGN_ID)
    part_count = fields.Integer(metadata={"description": "placed parts of the board as "
                                                         "exported (every BOM reference)"})
    opamp_packages = fields.Integer()
    output_noise_rms_v = OutFloat(metadata={"description": "noise.output_rms_v.band"})
    input_noise_rms_v = OutFloat(metadata={"description": "noise.input_rms_v"})
    supply_current_a = OutFloat(metadata={"description": "DC current from the positive rail"})
    yield_ = fields.Raw(data_key="yield", allow_none=True, metadata={
        "description": "the design's yield block (null when the design has none)"})
    bom_cost = fields.Nested(BomCostSchema, allow_none=True)
    pareto = fields.Boolean()
    rank = fields.Integer(metadata={"description": "1 = best; the list is in rank order"})


class ExplorationSkippedSchema(Schema):
    opamp_id = fields.String(allow_none=True)
    stage_count = fields.Integer(allow_none=True)
    detail = fields.String()


class ExplorationResponseSchema(Schema):
    target = fields.Nested(TargetOutSchema)
    candidates = fields.List(fields.Nested(ExplorationCandidateSchema))
    skipped = fields.List(fields.Nested(ExplorationSkippedSchema), metadata={
        "description": "op-amps (and stage counts) the request cannot be designed with, "
                       "and why"})
