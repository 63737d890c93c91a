"""JSON evidence (``schema = "loopwarden-review/1"``; keys as DESIGN.md §5, and more).

Conventions: frequencies in rad/s whatever the design's unit; infinities as the strings
``"inf"``/``"-inf"``; not-applicable as ``null``; complex numbers as ``{"re": …, "im": …}``;
keys sorted and no clock read here, so the same review gives byte-identical output.
Plot data (``LoopAnalysis.curves``) is not part of the JSON.

The keys are a contract, written down in one place: the builders below (``to_dict`` and
its helpers) name every top-level, design, rule-set, variant and finding key, and
:data:`OBJECT_KEYS` names the keys of every result object nested in them.  Nothing is
found by reflection: a Python field renamed without updating the table stops the render
(``AttributeError``), it never renames a key; a new field stays out of the JSON until it is
added here, to ``src/loopwarden/schema/review.schema.json`` and to the README.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import enum
import json
import math
from collections.abc import Mapping
from pathlib import PurePath
from typing import Any

import numpy as np

from ..analysis.results import (
    Boost,
    Cancellation,
    DisturbanceResponse,
    Effort,
    FrequencyCoverage,
    GainCrossing,
    IntegralAlternative,
    InternalStability,
    LoopAnalysis,
    Margins,
    PhaseCrossing,
    RequirementCheck,
    SampledInfo,
    SaturatedLoad,
    SaturatedStep,
    Sensitivity,
    SlowPair,
    SlowTail,
    Stability,
    StageCrossoverCost,
    StepMetrics,
    Tracking,
)
from ..design.model import Actuator, Design, Sampling, Waiver
from ..ruleset.model import Finding, RuleSet, Status
from . import CAUTIONS
from .review import Review

__all__ = ["OBJECT_KEYS", "SCHEMA", "SUFFIX", "plain", "render", "to_dict"]

SCHEMA = "loopwarden-review/1"
SUFFIX = ".json"

KeyMap = tuple[tuple[str, str], ...]


def _same(*names: str) -> KeyMap:
    """JSON keys that read the attribute of the same name (``(key, attribute)`` pairs)."""
    return tuple((name, name) for name in names)


#: The contract of the nested result objects: type → ((JSON key, attribute), ...).
#: The first string of each pair is the key in the JSON (never change it: extend); the
#: second the attribute it is read from.  A field of one of these classes that is not
#: listed is not in the JSON (tests/test_schema.py insists that each field is listed).
OBJECT_KEYS: dict[type, KeyMap] = {
    Stability: _same(
        "closed_loop_stable", "method", "closed_loop_poles", "open_loop_rhp_poles",
        "open_loop_imag_axis_poles", "rhp_closed_loop_poles", "clockwise_encirclements",
        "marginal", "note", "domain", "certified", "unstable_roots_counted",
        "search_abscissa_rad_s", "roots_right_of_search_counted", "slow_abscissa_rad_s",
        "slow_roots_found", "slow_roots_counted", "polish_iterations"),
    InternalStability: _same("internally_stable", "cancellations", "note"),
    Cancellation: _same("pole", "zero", "pole_block", "zero_block", "distance"),
    Margins: _same(
        "gain_margin_db", "gain_margin_lower_db", "phase_margin_deg", "gain_crossover_rad_s",
        "phase_crossover_rad_s", "delay_margin_s", "gain_crossings", "phase_crossings",
        "delay_margin_samples", "stable_gain_found", "stable_gain_range_db"),
    GainCrossing: _same("frequency_rad_s", "phase_margin_deg", "delay_margin_s"),
    PhaseCrossing: _same("frequency_rad_s", "magnitude", "gain_margin_db"),
    Sensitivity: _same(
        "peak_sensitivity", "peak_sensitivity_rad_s", "peak_complementary",
        "peak_complementary_rad_s", "disk_margin", "disk_gain_low", "disk_gain_high",
        "disk_phase_deg"),
    Tracking: _same("system_type", "kp", "kv", "ka", "step_error", "ramp_error",
                    "parabola_error", "unknown"),
    StepMetrics: _same(
        "final_value", "overshoot_pct", "peak_time_s", "rise_time_s", "settling_time_s",
        "settling_band", "horizon_s", "ramp_error_final", "exact_delay", "u_peak"),
    SlowPair: _same("pole", "zero", "residue", "time_constant_s", "tail_time_s",
                    "ramp_residue", "ramp_tail_time_s", "tail_samples", "domain"),
    SlowTail: _same("pairs", "settling_time_s", "settling_time_without_tail_s", "criteria"),
    Boost: _same("stage", "stage_name", "zero_rad_s", "pole_rad_s", "dc_boost",
                 "band_2x_rad_s", "band_3db_rad_s", "improvement_at_reference_band", "costs"),
    StageCrossoverCost: _same("crossover_rad_s", "phase_cost_deg", "zero_ratio"),
    IntegralAlternative: _same(
        "stage", "gain_factor", "closed_loop_stable", "margins", "sensitivity", "tracking",
        "step", "slow_pairs", "snippet_toml", "target_phase_margin_deg", "meets_target",
        "requirements", "meets", "fails", "slow_pairs_error", "sizing_variant",
        "disturbance_ie", "disturbance_iae", "current_disturbance_ie",
        "current_disturbance_iae", "disturbance_error"),
    RequirementCheck: _same("rule", "figure", "bound", "limit", "value", "unit", "met"),
    SampledInfo: _same(
        "period_s", "method", "prewarp_rad_s", "compute_delay_samples",
        "plant_delay_samples", "nyquist_rad_s", "sample_rate_rad_s",
        "closed_loop_bandwidth_rad_s", "sample_rate_ratio", "note"),
    FrequencyCoverage: _same(
        "file", "sha256", "frequency_min_rad_s", "frequency_max_rad_s", "points",
        "unstable_poles", "integrators", "loop_gain_at_min", "loop_gain_at_max",
        "assumptions", "uncovered", "bounded"),
    DisturbanceResponse: _same(
        "at", "size", "peak", "peak_time_s", "static_deviation", "ie", "iae",
        "recovery_time_s", "recovery_level", "settling_band", "gain_peak", "gain_peak_rad_s",
        "band_rad_s", "horizon_s", "u_peak", "exact_delay", "sampled"),
    Effort: _same("ks_peak", "ks_peak_rad_s", "controller_hf_gain", "u_peak_step",
                  "u_peak_disturbance"),
    Sampling: _same("period_s", "method", "prewarp_rad_s", "compute_delay_samples"),
    Actuator: (("min", "min_value"), ("max", "max_value"),
               ("rate_limit_per_s", "rate_limit_per_s"), ("anti_windup", "anti_windup"),
               ("tracking_time_s", "tracking_time_s"), ("step", "step")),
    SaturatedStep: _same(
        "step", "settling_time_s", "overshoot_pct", "linear_settling_time_s",
        "linear_overshoot_pct", "windup_cost_s", "u_peak", "saturated_time_s", "horizon_s"),
    SaturatedLoad: _same("peak", "linear_peak", "recovery_time_s", "linear_recovery_time_s",
                         "u_peak", "saturated_time_s"),
    Waiver: _same("rule", "reason", "approved_by", "expires", "variant"),
}


def _object(x: Any) -> dict[str, Any]:
    keys = OBJECT_KEYS.get(type(x))
    if keys is None:
        raise TypeError(f"{type(x).__name__} has no entry in json_out.OBJECT_KEYS: add its "
                        "keys there and to the JSON schema")
    return {key: plain(getattr(x, attribute)) for key, attribute in keys}


def plain(x: Any) -> Any:
    """Convert result objects to JSON-ready values (see the module conventions)."""
    if isinstance(x, enum.Enum):
        return plain(x.value)
    if x is None or isinstance(x, bool | str):
        return x
    if isinstance(x, np.generic):
        return plain(x.item())
    if isinstance(x, int):
        return x
    if isinstance(x, float):
        if math.isnan(x):
            raise ValueError("NaN reached the JSON renderer")
        if math.isinf(x):
            return "inf" if x > 0 else "-inf"
        return x
    if isinstance(x, complex):
        return {"re": plain(x.real), "im": plain(x.imag)}
    if isinstance(x, dt.date):
        return x.isoformat()
    if dataclasses.is_dataclass(x) and not isinstance(x, type):
        return _object(x)
    if isinstance(x, Mapping):
        return {str(k): plain(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [plain(v) for v in x]
    raise TypeError(f"cannot put {type(x).__name__} into the JSON evidence")


def _alternative(alt: IntegralAlternative) -> dict[str, Any]:
    out = plain(alt)
    # The flat keys of DESIGN.md §5 beside the full sub-objects.
    out.update(phase_margin_deg=plain(alt.margins.phase_margin_deg),
               gain_margin_db=plain(alt.margins.gain_margin_db),
               system_type=alt.tracking.system_type,
               settling_time_s=plain(alt.step.settling_time_s))
    return out


#: JSON keys of ``margins`` that an uncovered check (measured plant) leaves undecided.
_UNCOVERED_KEYS = {
    "gain_margin": ("gain_margin_db", "gain_margin_lower_db", "phase_crossover_rad_s"),
    "phase_margin": ("phase_margin_deg", "gain_crossover_rad_s"),
    "delay_margin": ("delay_margin_s", "delay_margin_samples"),
    "peak_sensitivity": ("peak_sensitivity", "peak_sensitivity_rad_s"),
    "peak_complementary": ("peak_complementary", "peak_complementary_rad_s"),
    "disk_margin": ("disk_margin", "disk_gain_low", "disk_gain_high", "disk_phase_deg"),
}


def _margins(a: LoopAnalysis) -> dict[str, Any]:
    out = {**plain(a.margins), **plain(a.sensitivity)}
    if a.coverage is not None:
        # A figure the measured range does not decide is not reported as a number.
        for check in a.coverage.uncovered:
            for key in _UNCOVERED_KEYS.get(check, ()):
                out[key] = None
    for check in a.undecided:
        # Nor is one whose part of the analysis failed (its value is a placeholder).
        for key in _UNCOVERED_KEYS.get(check, ()):
            out[key] = None
    return out


def _tracking(a: LoopAnalysis) -> dict[str, Any]:
    out = plain(a.tracking)
    for key in a.tracking.unknown:
        out[key] = None
    return out


def _variant(a: LoopAnalysis, design: Design) -> dict[str, Any]:
    model = next((v for v in design.variants if v.name == a.variant), None)
    alternatives = [_alternative(alt) for alt in a.integral_alternatives]
    return {
        "name": a.variant,
        "plant_delay_s": plain(model.delay_s) if model else None,
        "closed_loop_stable": a.stability.closed_loop_stable,
        "stability": plain(a.stability),
        "internal_stability": plain(a.internal),
        "margins": _margins(a),
        "tracking": _tracking(a),
        "step": plain(a.step),
        "slow_tail": plain(a.slow_tail),
        "slow_pairs": None if a.slow_tail is None else plain(a.slow_tail.pairs),
        "boost": plain(a.boosts),
        "integral_alternative": alternatives[0] if alternatives else None,
        "integral_alternatives": alternatives,
        "errors": dict(sorted(a.errors.items())),
        "sampling": plain(a.sampling),
        "frequency_coverage": plain(a.coverage),
        "not_applicable": dict(sorted(a.not_applicable.items())),
        "undecided": dict(sorted(a.undecided.items())),
        "disturbance": plain(a.disturbance),
        "effort": plain(a.effort),
        "saturation": _saturation(a),
    }


def _saturation(a: LoopAnalysis) -> dict[str, Any] | None:
    """The saturated responses, the reference step's figures at the top level."""
    s = a.saturation
    if s is None:
        return None
    out = plain(s.reference)
    out.update({"min": plain(s.min_value), "max": plain(s.max_value),
                "rate_limit_per_s": plain(s.rate_limit_per_s), "anti_windup": s.anti_windup,
                "tracking_time_s": plain(s.tracking_time_s), "method": s.method,
                "step_s": plain(s.step_s), "load": plain(s.load)})
    return out


def _design(d: Design) -> dict[str, Any]:
    return {
        "name": d.name, "revision": d.revision, "description": d.description,
        "file": PurePath(d.path).name, "sha256": d.sha256,
        "frequency_unit": d.frequency_unit,
        "variants": [v.name for v in d.variants],
        "sampling": plain(d.sampling),
        "measured_plants": [{"variant": v.name, "file": v.measured.file,
                             "sha256": v.measured.sha256} for v in d.variants
                            if v.measured is not None],
        "controller": [{"index": s.index, "type": s.type, "params": plain(s.params),
                        "name": s.title}
                       for s in d.controller],
        "requirements": plain(d.requirements.values),
        "limits": plain(d.rule_limits),
        "waivers": plain(d.waivers),
        "actuator": plain(d.actuator),
    }


def _ruleset(rs: RuleSet) -> dict[str, Any]:
    return {
        "id": rs.id, "version": rs.version, "title": rs.title, "sha256": rs.sha256,
        "file": PurePath(rs.path).name, "extends": list(rs.extends),
        "files": [{"id": f.id, "version": f.version, "file": PurePath(f.path).name,
                   "sha256": f.sha256} for f in rs.files],
        "rules": [{"id": r.id, "check": r.check, "severity": plain(r.severity),
                   "limits": plain(r.limits), "options": plain(r.options),
                   "origin": r.origin, "rationale": r.rationale, "source": r.source}
                  for r in rs.rules],
    }


def _finding(f: Finding) -> dict[str, Any]:
    return {
        "rule": f.rule, "check": f.check, "status": plain(f.status), "variant": f.variant,
        "measured": plain(f.measured), "limit": plain(f.limit), "unit": f.unit,
        "message": f.message, "limit_source": f.limit_source or None,
        "rationale": f.rationale, "source": f.source, "waiver": f.waiver,
        "details": plain(f.details),
    }


def to_dict(review: Review) -> dict[str, Any]:
    """The evidence as plain JSON values."""
    out: dict[str, Any] = {
        "schema": SCHEMA,
        "verdict": plain(review.verdict),
        "date": review.run.date,
        "signer": review.run.signer,
        "signed_at": review.run.signed_at,
        "tool": {"name": "loopwarden", "version": review.run.tool_version},
        "design": _design(review.design),
        "ruleset": _ruleset(review.ruleset),
        "variants": [_variant(a, review.design) for a in review.analyses],
        "findings": [_finding(f) for f in review.findings],
        "counts": {s.value: review.count(s) for s in Status},
        "cautions": CAUTIONS,
        "baseline": None,
        "uncertainty": uncertainty_dict(review),
    }
    if review.baseline is not None:
        out["baseline"] = {"design": _design(review.baseline.design),
                           "variants": [_variant(a, review.baseline.design)
                                        for a in review.baseline.analyses]}
    return out


# --------------------------------------------------------------------------- uncertainty
def uncertainty_dict(review: Review) -> dict[str, Any] | None:
    """``uncertainty``: the ``[parameters]`` sweep (None for a design without parameters).

    ``parameters.<name>`` as read (file units); ``samples``/``corners`` evaluated and
    ``seed`` (0 and None when no sweep ran); ``worst.<figure>`` = value, the point
    (``parameters``), the plant variant and how it was found, or None when no stable point
    has the figure; ``pass_fraction.<rule id>`` over the random sample (None where not
    computed); ``unstable_samples`` / ``unstable_corners`` with an unstable closed loop on
    any swept variant, ``unstable_example`` the first such point.
    """
    unc = review.uncertainty
    if unc is None:
        return None
    params = {p.name: {"nominal": p.nominal, "min": p.min, "max": p.max,
                       "distribution": p.distribution, "sigma": p.sigma}
              for p in unc.parameters}
    out: dict[str, Any] = {"parameters": params, "samples": 0, "corners": 0, "seed": None,
                           "swept_variants": [], "worst": None, "pass_fraction": None,
                           "unstable_samples": None, "unstable_corners": None,
                           "unstable_example": None}
    sw = unc.sweep
    if sw is None:
        return out
    unstable = ~sw.stable
    first = np.flatnonzero(unstable)
    out.update({
        "samples": sw.samples, "corners": sw.corners, "seed": sw.settings.seed,
        "swept_variants": list(sw.variants),
        "worst": {name: None if wp is None else {
            "value": plain(float(wp.value)), "variant": wp.variant, "found_by": wp.found_by,
            "parameters": sw.values(wp.point)} for name, wp in sw.worst.items()},
        "pass_fraction": {k: plain(v) for k, v in unc.pass_fraction.items()},
        "unstable_samples": int(np.sum(unstable[sw.random_rows])),
        "unstable_corners": int(np.sum(unstable[:sw.corners])),
        "unstable_example": None if first.size == 0 else {
            "parameters": sw.values(sw.points[int(first[0])]),
            "variants": [n for n in sw.variants
                         if not sw.per_variant[n].stable[int(first[0])]]},
    })
    return out


def render(review: Review) -> bytes:
    """UTF-8 JSON, keys sorted, two-space indent, trailing newline."""
    text = json.dumps(to_dict(review), sort_keys=True, indent=2, ensure_ascii=False,
                      allow_nan=False)
    return (text + "\n").encode("utf-8")
