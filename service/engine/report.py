"""JSON-ready report blocks of a design or an analysis (pure: dicts of floats and strings).

Non-finite floats may appear (a corner that does not exist); ``service.jsonout`` writes
them as null.
"""

from __future__ import annotations

import math
from dataclasses import asdict

from service.engine.judge import analysis, verdict, yield_estimate
from service.engine.model.circuit import NON_INVERTING, Circuit, Limits, Target
from service.engine.model.parts import Tolerances, tolerances_of
from service.engine.synthesis import band_limit, ideal
from service.engine.synthesis.design import Design

CAUTIONS = (
    "gainchain is a design aid: build a prototype and measure it before relying on it.",
    "Follow the safety standards, codes and licensed practice that apply where the circuit is "
    "built and used, above all for its supply.",
    "Aluminium electrolytic capacitors are polarised and have voltage ratings: fit them the "
    "right way round, within their rating, and check the DC bias across each.",
    "Check the op-amp's own datasheet limits (supply, inputs, output current, stability with "
    "the load) for the part actually fitted.",
)


#: Without ``f_high_max_hz``, an as-built f_high this many times the target draws a warning
#: (output noise grows with the square root of the noise bandwidth; common practice).
WIDE_BAND_RATIO = 4.0


def bias_block(circuit: Circuit, reason: str | None) -> dict:
    """VMID, why it sits there, the divider and bypass values and the bias node's impedance."""
    if circuit.bias is None:
        return {
            "ref": "GND", "vmid_v": 0.0, "vmid_target_v": 0.0,
            "reason": reason or "Dual supply: the stages are referred to ground; no bias "
                                "network.",
            "r_top_ohm": None, "r_bottom_ohm": None, "c_bypass_f": None, "buffered": None,
            "node_impedance_ohm": 0.0, "bypass_corner_hz": None, "divider_current_a": 0.0,
        }
    b = circuit.bias
    op = circuit.opamp
    r_par = b.r_top_ohm * b.r_bottom_ohm / (b.r_top_ohm + b.r_bottom_ohm)
    lo, hi = analysis.swing_window_v(circuit)
    vmid = analysis.vmid_v(circuit)
    why = (f"VMID = {vmid:.4g} V, the E-series divider nearest the centre "
           f"{0.5 * (lo + hi):.4g} V of the output swing window {lo:.4g}..{hi:.4g} V "
           f"(swing to the rails {op.swing_to_neg_v:g} V / {op.swing_to_pos_v:g} V). ")
    return {
        "ref": "VMID",
        "vmid_v": vmid,
        "vmid_target_v": 0.5 * (lo + hi),
        "reason": why + (reason or ("VMID buffered by a follower." if b.buffered else
                                    "VMID is the bypassed divider itself.")),
        "r_top_ohm": b.r_top_ohm,
        "r_bottom_ohm": b.r_bottom_ohm,
        "c_bypass_f": b.c_bypass_f,
        "buffered": b.buffered,
        # An ideal follower (zero output impedance in the model) makes VMID stiff.
        "node_impedance_ohm": 0.0 if b.buffered else r_par,
        "bypass_corner_hz": 1.0 / (2.0 * math.pi * r_par * b.c_bypass_f),
        "divider_current_a": circuit.supply.v_pos / (b.r_top_ohm + b.r_bottom_ohm),
    }


def _warn(code: str, message: str) -> dict:
    return {"code": code, "message": message}


def analysis_block(circuit: Circuit, *, target: Target | None, input_peak_v: float,
                   limits: Limits | None = None, supply_rejection_hz: float | None = None,
                   bias_reason: str | None = None, ab: analysis.AsBuilt | None = None,
                   judgement: verdict.Judgement | None = None,
                   tolerances: Tolerances | None = None,
                   yield_est: yield_estimate.YieldEstimate | None = None) -> dict:
    """as_built, headroom, checks, limits, bias, warnings (and, given a target, the
    predicted ``yield`` under ``tolerances``, status and shortfalls). ``judgement`` is the
    synthesis' own verdict when there is one; an analysis judges the circuit here, by the
    same function."""
    ab = ab or analysis.as_built(circuit)
    limits = limits or Limits()
    if target is not None and yield_est is None:
        yield_est = yield_estimate.predict(circuit, target, tolerances or Tolerances())
    judgement = judgement or verdict.judge(circuit, ab, target=target, input_peak_v=input_peak_v,
                                           limits=limits,
                                           supply_rejection_hz=supply_rejection_hz,
                                           yield_est=yield_est)
    checks = list(judgement.checks)
    hr = analysis.headroom(circuit, checks, input_peak_v)
    warnings = [_warn(c, m) for c, m in analysis.circuit_warnings(circuit) + hr.warnings]
    if not analysis.flat_outside_band(ab, None):
        warnings.append(_warn("response_outside_band",
                              f"The response rises to {ab.outside_max_db:.2f} dB of midband "
                              "outside its -3 dB band (peaking, e.g. from a weak bias bypass)."))
    out = {
        "performance": {"as_built": ab.to_dict()},
        "headroom": {"stages": hr.stages, "overall": hr.overall},
        "checks": [c.to_dict() for c in checks],
        "limits": limits.to_dict(),
        "bias": bias_block(circuit, bias_reason),
        "warnings": warnings,
        "cautions": list(CAUTIONS),
    }
    if (target is not None and target.f_high_max_hz is None
            and ab.f_high_hz > WIDE_BAND_RATIO * target.f_high_hz):
        warnings.append(_warn("band_wider_than_needed",
                              f"The as-built f_high of {ab.f_high_hz:.4g} Hz is "
                              f"{ab.f_high_hz / target.f_high_hz:.3g} times the target's "
                              f"{target.f_high_hz:.4g} Hz: noise bandwidth is wasted; give "
                              "target.f_high_max_hz to band-limit the stages."))
    if target is not None and target.f_high_max_hz is not None:
        move = band_limit.gbw_corner_shift(circuit, band_limit.GBW_SPREAD)
        if not move < band_limit.GBW_CORNER_MOVE:
            warnings.append(_warn(
                "upper_corner_follows_gbw",
                f"A {band_limit.GBW_SPREAD:.0%} change of the op-amp's gain-bandwidth moves "
                f"the upper corner by {move:.1%}: the op-amp, not the band-limiting "
                "capacitors, sets it (more stages, or a faster op-amp, would fix that)."))
    if target is not None:
        out["yield"] = yield_estimate.yield_block(yield_est)
        out["status"] = judgement.status
        out["shortfalls"] = [dict(s) for s in judgement.shortfalls]
        if judgement.status != "meets_target":
            warnings.append(_warn("target_not_met", "The as-built circuit misses the target: "
                                  + "; ".join(_shortfall_text(s) for s in judgement.shortfalls)))
    return out


def _shortfall_text(s: dict) -> str:
    where = "" if s.get("stage") is None else f" (stage {s['stage']})"
    achieved = "none" if s["achieved"] is None else f"{s['achieved']:.6g}"
    limit = "none" if s["target"] is None else f"{s['target']:.6g}"
    return f"{s['quantity']}{where} {achieved} vs {limit}"


#: ``tradeoff.required_gbw_hz`` looks at stage counts up to the design's own plus this many.
REQUIRED_GBW_EXTRA_STAGES = 2


def tradeoff_block(design: Design) -> dict:
    """Ideal figures for n = 1..12 and the stage count that maximises ideal bandwidth."""
    req = design.request
    t = req.target
    op = req.opamp
    rows = []
    for n in range(1, ideal.MAX_STAGES + 1):
        ic = ideal.ideal_cascade(t.gain, t.f_low_hz, op.gbw_hz, n, req.topology)
        stable = ideal.noise_gain(ic.stage_gain, req.topology) >= op.min_stable_gain
        units = n + (1 if req.supply.kind == "single" and n % op.channels_per_package else 0)
        rows.append({
            "stages": n,
            "stage_gain": ic.stage_gain,
            "stage_gain_db": 20.0 * math.log10(ic.stage_gain),
            "stage_f_high_hz": ic.stage_f_high_hz,
            "f_high_hz": ic.f_high_hz,
            "stage_f_low_hz": ic.stage_f_low_hz,
            "stable": stable,
            "meets_target": stable and ic.f_high_hz >= t.f_high_hz,
            "opamp_packages": math.ceil(units / op.channels_per_package),
            "part_count": _part_count(req, n, units),
        })
    stable_rows = [r for r in rows if r["stable"]] or rows
    best = max(stable_rows, key=lambda r: (r["f_high_hz"], -r["stages"]))
    # Quoted for the stage counts someone would build instead: at most two more than the
    # design has (a 27-stage figure helps nobody), with that n stated.
    most = min(ideal.MAX_STAGES, design.synthesis.circuit.n_stages + REQUIRED_GBW_EXTRA_STAGES)
    need_gbw, need_n = ideal.required_gbw_hz(t.gain, t.f_high_hz, req.topology,
                                             max_stages=most)
    reachable = any(r["meets_target"] for r in rows if r["stages"] <= most)
    return {
        "rows": rows,
        "optimal_stages": ideal.optimal_stage_count(t.gain, req.topology),
        "best_stages": best["stages"],
        "required_gbw_hz": None if reachable else need_gbw,
        "required_gbw_stages": None if reachable else need_n,
    }


def _part_count(req, n: int, units: int) -> int:
    """Resistors and capacitors of the signal path and bias, plus op-amp packages."""
    ac = req.target.f_low_hz > 0
    per_stage = (5 if req.topology == NON_INVERTING else 3) if ac else 2
    single = req.supply.kind == "single"
    passives = n * per_stage + (4 if single else 0)  # divider (2), bypass, output capacitor
    return passives + math.ceil(units / req.opamp.channels_per_package)


def components_block(components, impedance_reason: str | None) -> dict:
    """The resolved ``components`` (impedance level as chosen) and why that level."""
    out = dict(asdict(components))
    # the stocked values are the parts library's, not a request field (GET /v1/parts)
    out.pop("resistor_values", None)
    out.pop("capacitor_values", None)
    out["impedance_reason"] = impedance_reason or (
        f"Impedance level {components.impedance_ohm:g} ohm, as requested.")
    return out


def design_block(design: Design) -> dict:
    """The complete design response (without the optional analyses blocks)."""
    req = design.request
    syn = design.synthesis
    circuit = syn.circuit
    body = analysis_block(circuit, target=req.target, input_peak_v=req.signal.input_peak_v,
                          limits=req.limits, supply_rejection_hz=req.supply_rejection_hz,
                          bias_reason=syn.bias_reason, ab=syn.as_built,
                          judgement=design.judgement,
                          tolerances=tolerances_of(req.components),
                          yield_est=syn.yield_estimate)
    return {
        "name": req.name,
        "status": body.pop("status"),
        "shortfalls": body.pop("shortfalls"),
        "target": req.target.to_dict(),
        "stage_count": circuit.n_stages,
        "topology": circuit.topology,
        "circuit": circuit.to_dict(),
        "performance": {"ideal": design.ideal.to_dict(),
                        "as_built": body["performance"]["as_built"]},
        "headroom": body["headroom"],
        "checks": body["checks"],
        "limits": body["limits"],
        "bias": body["bias"],
        "tradeoff": tradeoff_block(design),
        "components": components_block(syn.components or req.components,
                                       syn.impedance_reason),
        "tolerances": tolerances_of(req.components).to_dict(),
        "yield": body["yield"],
        "warnings": body["warnings"] + [_warn(code, text) for code, text in design.notes],
        "cautions": body["cautions"],
    }

