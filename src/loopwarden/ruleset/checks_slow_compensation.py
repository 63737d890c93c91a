"""Checks on slow compensation: low-frequency boost band, lag phase budget and the
integral alternative to a lag stage.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..analysis.results import Boost, IntegralAlternative, LoopAnalysis
from ..errors import AnalysisError
from ..report.numbers import fmt
from .model import Rule

if TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load the design stack
    from ..design.model import Design
from .check_catalog import LOWER, UPPER, Measurement, NotApplicable, _check, _deg, _freq
from .checks_tracking import _ERROR_LABEL, _step


# --------------------------------------------------------------------------- boost stages
def _boosts(a: LoopAnalysis) -> tuple[Boost, ...]:
    if not a.boosts:
        raise NotApplicable("no low-frequency boost (lag) stage in the controller")
    return a.boosts


@_check("boost_band", unit="rad/s", limits=LOWER,
        summary="band of reference frequencies where a boost stage cuts the tracking error "
                "by >= 3 dB (min) and >= 2x (warn_min), against requirements.reference_band")
def boost_band(a: LoopAnalysis, rule: Rule, design: Design, *,
               baseline: LoopAnalysis | None = None) -> Measurement:
    boosts = _boosts(a)

    def band(x: float | None) -> float:
        return 0.0 if x is None else x

    worst = min(boosts, key=lambda b: (band(b.band_3db_rad_s), band(b.band_2x_rad_s)))
    b2, b3 = band(worst.band_2x_rad_s), band(worst.band_3db_rad_s)
    text = (f"{worst.stage_name} (boost {fmt(worst.dc_boost, 'x')}) cuts the tracking error "
            f"by >= 2x below {_freq(b2)} and by >= 3 dB below {_freq(b3)}")
    if worst.improvement_at_reference_band is not None:
        text += (f"; {fmt(worst.improvement_at_reference_band, 'x')} at the reference band")
    return Measurement(value=b2, text=text, compare={"min": b3, "warn_min": b2}, details={
        "stage": float(worst.stage), "band_3db_rad_s": b3, "band_2x_rad_s": b2,
        "improvement_at_reference_band": worst.improvement_at_reference_band})


@_check("lag_phase_budget", unit="deg", limits=UPPER,
        summary="phase a boost (lag) stage costs at the gain crossover, and where its zero "
                "sits relative to crossover")
def lag_phase_budget(a: LoopAnalysis, rule: Rule, design: Design, *,
                     baseline: LoopAnalysis | None = None) -> Measurement:
    candidates = [(b, c) for b in _boosts(a) for c in b.costs]
    if not candidates:
        raise NotApplicable("no gain crossover at which to price the lag's phase")
    b, c = min(candidates, key=lambda bc: bc[1].phase_cost_deg)
    cost = max(0.0, -c.phase_cost_deg)
    text = (f"{b.stage_name} costs {_deg(cost)} of phase at the crossover "
            f"{_freq(c.crossover_rad_s)}; its zero sits at {fmt(c.zero_ratio, 'x')} crossover")
    return Measurement(value=cost, text=text, compare=dict.fromkeys(UPPER, cost),
                       details={"stage": float(b.stage), "crossover_rad_s": c.crossover_rad_s,
                                "zero_ratio": c.zero_ratio})


@_check("integral_alternative", unit="x", limits=UPPER,
        summary="the loop with the lag pole moved to the origin (integral action), re-tuned "
                "to keep the phase margin; measured: how many times faster it settles")
def integral_alternative(a: LoopAnalysis, rule: Rule, design: Design, *,
                         baseline: LoopAnalysis | None = None) -> Measurement:
    _boosts(a)
    current = _step(a)
    if not a.integral_alternatives:
        raise AnalysisError(a.errors.get("integral_alternative",
                                         "the integral-action alternative was not computed"))
    stable = [alt for alt in a.integral_alternatives if alt.closed_loop_stable]
    if not stable:
        return Measurement(value=0.0, compare=dict.fromkeys(UPPER, 0.0),
                           text="no stable integral-action alternative with a one-gain "
                                "re-tune: keep the boost stage")

    def speedup(t_alt: float) -> float:
        t_now = current.settling_time_s
        if math.isinf(t_alt):
            return 1.0 if math.isinf(t_now) else 0.0
        return math.inf if t_alt == 0.0 else t_now / t_alt

    alt = max(stable, key=lambda x: speedup(x.step.settling_time_s))
    ratio = speedup(alt.step.settling_time_s)
    stage = next((s.name for s in design.controller if s.index == alt.stage),
                 f"controller[{alt.stage}]")
    text = (f"integral action instead of {stage} (gain x{fmt(alt.gain_factor)}): phase margin "
            f"{_deg(alt.margins.phase_margin_deg)}, gain margin "
            f"{fmt(alt.margins.gain_margin_db, 'dB')}, type {alt.tracking.system_type}, "
            f"settling {fmt(alt.step.settling_time_s, 's')} against "
            f"{fmt(current.settling_time_s, 's')} now")
    # What the extra integrator buys: the steady-state error of the current loop's type.
    which = ("step_error", "ramp_error", "parabola_error")[min(a.tracking.system_type, 2)]
    text += (f", {_ERROR_LABEL[which]} {fmt(getattr(alt.tracking, which))} against "
             f"{fmt(getattr(a.tracking, which))}")
    if alt.sizing_variant is not None and len(design.variants) > 1:
        text += f" (one gain for every plant variant, set by '{alt.sizing_variant}')"
    # The alternative against the review's own limits, on this variant's plant.
    if alt.requirements:
        text += ("; on this plant it meets " + (", ".join(alt.meets) or "none")
                 + " and fails " + (", ".join(_requirement_breach(alt)) or "none"))
    return Measurement(value=ratio, text=text, compare=dict.fromkeys(UPPER, ratio),
                       details={"stage": float(alt.stage), "gain_factor": alt.gain_factor,
                                "phase_margin_deg": alt.margins.phase_margin_deg,
                                "gain_margin_db": alt.margins.gain_margin_db,
                                "system_type": float(alt.tracking.system_type),
                                "settling_time_s": alt.step.settling_time_s,
                                "meets": ", ".join(alt.meets),
                                "fails": ", ".join(alt.fails),
                                "sizing_variant": alt.sizing_variant})


def _requirement_breach(alt: IntegralAlternative) -> list[str]:
    """``rule (figure value vs limit)`` for each limit the alternative breaches."""
    out = []
    for c in alt.requirements:
        if c.met is False and c.value is not None:
            sign = "<" if c.bound == "min" else ">"
            out.append(f"{c.rule} ({fmt(c.value, c.unit)} {sign} {fmt(c.limit, c.unit)})")
    return out
