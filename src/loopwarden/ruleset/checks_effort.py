"""Checks on disturbance rejection, noise sensitivity, control effort and the saturated
response.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..analysis.results import LoopAnalysis
from ..errors import AnalysisError
from ..report.numbers import fmt
from .model import Rule

if TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load the design stack
    from ..design.model import Design
from .check_catalog import UPPER, Measurement, NotApplicable, _check, _freq


# --------------------------------------------------------------------------- loads, noise, effort
def _stable_for(a: LoopAnalysis, what: str) -> None:
    if not a.stability.closed_loop_stable:
        raise NotApplicable(f"the closed loop is unstable (see closed_loop_stability): no {what}")


@_check("disturbance_rejection", unit="",
        limits=(*UPPER, "max_iae", "warn_max_iae", "max_recovery",
                "warn_max_recovery"),
        summary="step load disturbance ([disturbance]): peak deviation of the output (max), "
                "IAE = ∫|y| dt (max_iae) and recovery time (max_recovery, s); IE and "
                "the |P·S| peak up to the disturbance band are reported")
def disturbance_rejection(a: LoopAnalysis, rule: Rule, design: Design, *,
                          baseline: LoopAnalysis | None = None) -> Measurement:
    dist = design.disturbance
    if dist is None:
        raise NotApplicable("the design has no [disturbance] table (where a load enters and "
                            "how large it is)")
    _stable_for(a, "settled disturbance response")
    d = a.disturbance
    if d is None:
        raise AnalysisError(a.errors.get("disturbance",
                                         "the disturbance response was not computed"))
    where = "plant input" if d.at == "plant_input" else "plant output"
    when = f" at {fmt(d.peak_time_s, 's')}" if d.peak_time_s is not None else " (final value)"
    gain = "|P·S|" if d.at == "plant_input" else "|S|"
    upto = f" up to {_freq(d.band_rad_s)}" if d.band_rad_s is not None else ""
    text = (f"load step {fmt(d.size)} at the {where}: peak deviation {fmt(d.peak)}{when}, "
            f"IE {fmt(d.ie)}, IAE {fmt(d.iae)}, recovers within ±{fmt(d.recovery_level)} "
            f"after {fmt(d.recovery_time_s, 's')}; {gain} peak {fmt(d.gain_peak)}{upto}")
    if d.static_deviation != 0.0:
        text += f"; static deviation {fmt(d.static_deviation)} (no integral action)"
    if d.sampled:
        text += " (at the sampling instants)"
    return Measurement(
        value=d.peak, text=text,
        compare={"max": d.peak, "warn_max": d.peak, "max_iae": d.iae, "warn_max_iae": d.iae,
                 "max_recovery": d.recovery_time_s,
                 "warn_max_recovery": d.recovery_time_s},
        details={"peak_time_s": d.peak_time_s, "ie": d.ie, "iae": d.iae,
                 "recovery_time_s": d.recovery_time_s, "recovery_level": d.recovery_level,
                 "static_deviation": d.static_deviation, "gain_peak": d.gain_peak,
                 "gain_peak_rad_s": d.gain_peak_rad_s, "at": d.at})


@_check("disturbance_recovery", unit="s", limits=UPPER,
        requirements={"disturbance_recovery_time": ("max",)},
        summary="step load disturbance ([disturbance]): time until the output stays within "
                "the settling band of the load's static effect (s)")
def disturbance_recovery(a: LoopAnalysis, rule: Rule, design: Design, *,
                         baseline: LoopAnalysis | None = None) -> Measurement:
    if design.disturbance is None:
        raise NotApplicable("the design has no [disturbance] table (where a load enters and "
                            "how large it is)")
    _stable_for(a, "recovery from the load")
    d = a.disturbance
    if d is None:
        raise AnalysisError(a.errors.get("disturbance",
                                         "the disturbance response was not computed"))
    where = "plant input" if d.at == "plant_input" else "plant output"
    text = (f"load step {fmt(d.size)} at the {where}: the output stays within "
            f"±{fmt(d.recovery_level)} of its final value after {fmt(d.recovery_time_s, 's')}")
    if d.sampled:
        text += " (at the sampling instants)"
    return Measurement(value=d.recovery_time_s, text=text,
                       compare=dict.fromkeys(UPPER, d.recovery_time_s),
                       details={"recovery_level": d.recovery_level, "peak": d.peak,
                                "at": d.at})


def _effort(a: LoopAnalysis):  # type: ignore[no-untyped-def]
    if a.effort is None:
        raise AnalysisError(a.errors.get("effort", "the noise and effort figures were not "
                                                   "computed"))
    return a.effort


@_check("noise_sensitivity", unit="", limits=UPPER, needs_stable=True,
        summary="peak of |K·S|, measurement noise to the actuator (K the controller); the "
                "controller's high-frequency gain is reported")
def noise_sensitivity(a: LoopAnalysis, rule: Rule, design: Design, *,
                      baseline: LoopAnalysis | None = None) -> Measurement:
    e = _effort(a)
    at = ("as ω → ∞" if math.isinf(e.ks_peak_rad_s) else f"at {_freq(e.ks_peak_rad_s)}")
    hf = "at the Nyquist frequency" if design.sampling is not None else "as ω → ∞"
    text = (f"noise to actuator |K·S| peaks at {fmt(e.ks_peak)} {at}; controller gain "
            f"{fmt(e.controller_hf_gain)} {hf}")
    return Measurement(value=e.ks_peak, text=text, compare=dict.fromkeys(UPPER, e.ks_peak),
                       details={"ks_peak_rad_s": e.ks_peak_rad_s,
                                "controller_hf_gain": e.controller_hf_gain})


@_check("control_effort", unit="", limits=UPPER,
        summary="peak actuator signal |u| for the unit reference step and for the "
                "[disturbance] step, against the actuator limit")
def control_effort(a: LoopAnalysis, rule: Rule, design: Design, *,
                   baseline: LoopAnalysis | None = None) -> Measurement:
    _stable_for(a, "settled actuator signal")
    e = _effort(a)
    if e.u_peak_step is None:
        raise AnalysisError(a.errors.get("effort", "the actuator signal was not computed"))
    peaks = {"reference step": e.u_peak_step}
    if e.u_peak_disturbance is not None:
        peaks["disturbance step"] = e.u_peak_disturbance
    worst_name = max(peaks, key=lambda k: peaks[k])
    worst = peaks[worst_name]
    text = "peak |u| " + ", ".join(f"{fmt(v)} for the {k}" for k, v in peaks.items())
    if design.disturbance is None:
        text += " (no [disturbance] table: reference step only)"
    return Measurement(value=worst, text=text, compare=dict.fromkeys(UPPER, worst),
                       details={"u_peak_step": e.u_peak_step,
                                "u_peak_disturbance": e.u_peak_disturbance,
                                "worst": worst_name})


@_check("saturated_response", unit="s", limits=(*UPPER, "max_windup", "warn_max_windup"),
        summary="reference step with the [actuator] limits and the controller's anti-windup: "
                "settling time (max, s) and windup cost = saturated − linear settling time "
                "(max_windup, s); overshoot, peak demand and time saturated are reported")
def saturated_response(a: LoopAnalysis, rule: Rule, design: Design, *,
                       baseline: LoopAnalysis | None = None) -> Measurement:
    if design.actuator is None:
        raise NotApplicable("the design has no [actuator] table (the actuator's limits)")
    _stable_for(a, "saturated step response")
    s = a.saturation
    if s is None:
        raise AnalysisError(a.errors.get("saturation",
                                         "the saturated response was not computed"))
    r = s.reference
    rng = f"[{fmt(s.min_value)}, {fmt(s.max_value)}]"
    rate = f", rate ≤ {fmt(s.rate_limit_per_s)}/s" if s.rate_limit_per_s is not None else ""
    aw = s.anti_windup.replace("_", "-") if s.anti_windup != "none" else "no anti-windup"
    text = (f"step {fmt(r.step)} with u in {rng}{rate}, {aw}: settles in "
            f"{fmt(r.settling_time_s, 's')} (linear {fmt(r.linear_settling_time_s, 's')}, "
            f"windup cost {fmt(r.windup_cost_s, 's')}), overshoot {fmt(r.overshoot_pct, '%')} "
            f"(linear {fmt(r.linear_overshoot_pct, '%')}); demand peaks at {fmt(r.u_peak)}, "
            f"saturated for {fmt(r.saturated_time_s, 's')}")
    if s.load is not None:
        ld = s.load
        text += (f"; load step: peak {fmt(ld.peak)} (linear {fmt(ld.linear_peak)}), "
                 f"recovers after {fmt(ld.recovery_time_s, 's')} "
                 f"(linear {fmt(ld.linear_recovery_time_s, 's')})")
    return Measurement(
        value=r.settling_time_s, text=text,
        compare={"max": r.settling_time_s, "warn_max": r.settling_time_s,
                 "max_windup": r.windup_cost_s, "warn_max_windup": r.windup_cost_s},
        details={"overshoot_pct": r.overshoot_pct, "windup_cost_s": r.windup_cost_s,
                 "linear_settling_time_s": r.linear_settling_time_s,
                 "u_peak": r.u_peak, "saturated_time_s": r.saturated_time_s,
                 "anti_windup": s.anti_windup})
