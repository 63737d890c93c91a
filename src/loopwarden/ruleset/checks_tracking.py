"""Checks on tracking and the time response: system type, error constants, crossover
band, step overshoot/settling/rise and the slow-pair tail.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..analysis.results import LoopAnalysis, StepMetrics
from ..errors import AnalysisError
from ..report.numbers import fmt, root_text
from .model import Bound, Rule

if TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load the design stack
    from ..design.model import Design
from .check_catalog import (
    BAND,
    ERROR_CONSTANT_UNITS,
    LOWER,
    UPPER,
    Measurement,
    NotApplicable,
    Option,
    _check,
    _freq,
)
from .checks_margins import _loop_delay_s


# --------------------------------------------------------------------------- tracking
@_check("system_type", unit="", limits=(*LOWER, *UPPER),
        summary="number of poles of the loop at s = 0")
def system_type(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    t = float(a.tracking.system_type)
    return Measurement(value=t, text=f"system type {int(t)}",
                       compare=dict.fromkeys((*LOWER, *UPPER), t))


_ERROR_LABEL = {"kp": "Kp", "kv": "Kv", "ka": "Ka", "step_error": "steady-state step error",
                "ramp_error": "steady-state ramp error per unit slope",
                "parabola_error": "steady-state parabola error per unit acceleration"}


@_check("error_constant", unit="", limits=(*LOWER, *UPPER),
        options={"which": Option(kind=str, required=True, choices=tuple(ERROR_CONSTANT_UNITS),
                                 help="which constant or steady-state error to compare")},
        summary="Kp, Kv or Ka, or the steady-state step/ramp/parabola error (option which)")
def error_constant(a: LoopAnalysis, rule: Rule, design: Design, *,
                   baseline: LoopAnalysis | None = None) -> Measurement:
    which = str(rule.options["which"])
    value = float(getattr(a.tracking, which))
    unit = ERROR_CONSTANT_UNITS[which]
    text = f"{_ERROR_LABEL[which]} {fmt(value, unit)} (type {a.tracking.system_type})"
    return Measurement(value=value, text=text, unit=unit,
                       compare=dict.fromkeys((*LOWER, *UPPER), value))


@_check("crossover_band", unit="rad/s", limits=(*LOWER, *UPPER),
        summary="gain crossover frequency within limits (lowest crossing against min, "
                "highest against max)")
def crossover_band(a: LoopAnalysis, rule: Rule, design: Design, *,
                   baseline: LoopAnalysis | None = None) -> Measurement:
    ws = sorted(c.frequency_rad_s for c in a.margins.gain_crossings)
    if not ws:
        low_gain = a.curves is None or a.curves.open_loop.size == 0 \
            or abs(a.curves.open_loop[0]) < 1.0
        w = 0.0 if low_gain else math.inf
        return Measurement(value=w, text="no gain crossover (|L| " +
                           ("< 1" if low_gain else "> 1") + " at all frequencies)",
                           compare=dict.fromkeys((*LOWER, *UPPER), w))
    lo, hi = ws[0], ws[-1]
    text = (f"gain crossover at {_freq(lo)}" if len(ws) == 1
            else f"{len(ws)} gain crossovers from {_freq(lo)} to {_freq(hi)}")
    upper = any(rule.limit_specs[k].bound is Bound.MAX for k in rule.limits)
    return Measurement(value=hi if upper else lo,
                       text=text,
                       compare={"min": lo, "warn_min": lo, "max": hi, "warn_max": hi},
                       details={"lowest_rad_s": lo, "highest_rad_s": hi})


# --------------------------------------------------------------------------- time response
def _step(a: LoopAnalysis) -> StepMetrics:
    if a.step is not None:
        return a.step
    if not a.stability.closed_loop_stable:
        raise NotApplicable("the closed loop is unstable (see closed_loop_stability): no "
                            "settled step response")
    raise AnalysisError(a.errors.get("step", "the step response was not computed"))


def _band_note(step: StepMetrics) -> str:
    return f"±{fmt(step.settling_band * 100.0)} % band"


@_check("step_overshoot", unit="%", limits=UPPER,
        summary="overshoot of the closed-loop reference step, % of the final value")
def step_overshoot(a: LoopAnalysis, rule: Rule, design: Design, *,
                   baseline: LoopAnalysis | None = None) -> Measurement:
    st = _step(a)
    text = f"step overshoot {fmt(st.overshoot_pct, '%')}"
    if st.peak_time_s is not None and st.overshoot_pct > 0:
        text += f" at {fmt(st.peak_time_s, 's')}"
    return Measurement(value=st.overshoot_pct, text=text,
                       compare=dict.fromkeys(UPPER, st.overshoot_pct))


@_check("step_settling", unit="s", limits=UPPER, options={"band": BAND},
        summary="settling time of the closed-loop reference step (last exit from the band)")
def step_settling(a: LoopAnalysis, rule: Rule, design: Design, *,
                  baseline: LoopAnalysis | None = None) -> Measurement:
    st = _step(a)
    t = st.settling_time_s
    text = (f"step settles into the {_band_note(st)} after {fmt(t, 's')}" if math.isfinite(t)
            else f"step does not settle into the {_band_note(st)} within "
                 f"{fmt(st.horizon_s, 's')}")
    return Measurement(value=t, text=text, compare=dict.fromkeys(UPPER, t),
                       details={"settling_band": st.settling_band, "horizon_s": st.horizon_s})


@_check("step_rise", unit="s", limits=UPPER,
        summary="10-90 % rise time of the closed-loop reference step")
def step_rise(a: LoopAnalysis, rule: Rule, design: Design, *,
              baseline: LoopAnalysis | None = None) -> Measurement:
    st = _step(a)
    t = math.inf if st.rise_time_s is None else st.rise_time_s
    text = (f"10-90 % rise time {fmt(t, 's')}" if math.isfinite(t)
            else "the step never reaches 90 % of its final value")
    return Measurement(value=t, text=text, compare=dict.fromkeys(UPPER, t))


@_check("slow_pair_tail", unit="s", limits=(*UPPER, "max_ratio", "warn_max_ratio"),
        options={"band": BAND},
        summary="time the tail of a slow closed-loop pole nearly cancelled by a zero needs "
                "to enter the settling band (max_ratio: settling with / without the tail)")
def slow_pair_tail(a: LoopAnalysis, rule: Rule, design: Design, *,
                   baseline: LoopAnalysis | None = None) -> Measurement:
    st = _step(a)
    tail = a.slow_tail
    if tail is None:
        reason = a.errors.get("slow_tail", "the slow-pair analysis was not computed")
        if _loop_delay_s(a, design) > 0.0:
            raise NotApplicable(reason)
        raise AnalysisError(reason)
    ratio = 1.0
    if tail.settling_time_without_tail_s > 0.0:
        ratio = tail.settling_time_s / tail.settling_time_without_tail_s
    details: dict[str, float | str | None] = {
        "settling_time_s": tail.settling_time_s,
        "settling_time_without_tail_s": tail.settling_time_without_tail_s,
        "settling_ratio": ratio, "pairs": float(len(tail.pairs)), "criteria": tail.criteria}
    if not tail.pairs:
        return Measurement(value=0.0, text="no slow closed-loop pole-zero pair",
                           compare={"max": 0.0, "warn_max": 0.0, "max_ratio": ratio,
                                    "warn_max_ratio": ratio}, details=details)
    worst = max(tail.pairs, key=lambda p: p.tail_time_s)
    details |= {"pole_re": worst.pole.real, "zero_re": worst.zero.real,
                "residue": worst.residue, "time_constant_s": worst.time_constant_s}
    text = (f"slow pole {root_text(worst.pole)} beside zero {root_text(worst.zero)}: residue "
            f"{fmt(worst.residue)}, its tail enters the {_band_note(st)} after "
            f"{fmt(worst.tail_time_s, 's')} (settling {fmt(tail.settling_time_s, 's')}, "
            f"{fmt(tail.settling_time_without_tail_s, 's')} without the tail)")
    t = worst.tail_time_s
    return Measurement(value=t, text=text, details=details,
                       compare={"max": t, "warn_max": t, "max_ratio": ratio,
                                "warn_max_ratio": ratio})
