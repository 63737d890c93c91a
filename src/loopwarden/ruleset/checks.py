"""The check catalog: what each check measures on one analysed loop.

A check is a small function ``(analysis, rule, design, *, baseline) -> Measurement``
registered in :data:`CHECKS` under its name (the names are part of the JSON contract).
It only *measures*; comparing against limits, severities and waivers is
:mod:`loopwarden.ruleset.evaluate`'s job.  A check that does not apply raises
:class:`NotApplicable` with the reason; one that cannot be computed raises
:class:`loopwarden.errors.AnalysisError` — neither is ever turned into a silent pass.

``rule.limits`` seen by a check are the *effective* limits (rule set, tightened by the
design); a few checks use them to pick the worst of several candidates.

Limit keys: ``min``/``warn_min`` are lower bounds, ``max``/``warn_max`` upper bounds; a
suffix names a second quantity of the same check (``max_lower``: the gain-reduction margin,
``max_ratio``: the slow-tail settling ratio).  Each key is read once, when a check is
registered, into a :class:`~loopwarden.ruleset.model.LimitKey` (quantity, bound, level).
``Measurement.compare`` maps each limit key to the number compared with it, so a check may
compare different quantities against different keys (boost_band: the 3 dB band against
``min``, the 2× band against ``warn_min``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING

from ..analysis.regression import FIGURE_NAMES, FigureChange
from ..analysis.regression import compare as compare_figures
from ..analysis.results import Boost, IntegralAlternative, LoopAnalysis, StepMetrics
from ..errors import AnalysisError
from ..report.numbers import fmt, root_text
from .model import Bound, LimitKey, Rule

if TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load the design stack
    from ..design.model import Design

Details = Mapping[str, float | str | None]


class NotApplicable(Exception):  # noqa: N818 - a verdict, not a failure
    """The check does not apply to this loop; the finding is ``n/a`` with this reason."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


@dataclass(frozen=True, slots=True, kw_only=True)
class Measurement:
    """What a check measured on one variant.

    ``value`` is shown as "measured" (in ``unit``, or the check's unit); ``compare`` maps
    limit keys to the quantity compared with them; ``ok`` is set instead by predicate
    checks (stability), which have no numeric limits.
    """

    value: float | str
    text: str                                       # "phase margin 41.6° at 0.454 rad/s"
    compare: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))
    ok: bool | None = None
    unit: str | None = None
    details: Details = field(default_factory=lambda: MappingProxyType({}))
    # Named parts judged one by one against the same limits (regression: one per figure);
    # evaluation records each part's status as details["<part>.status"].
    parts: Mapping[str, Mapping[str, float]] = field(
        default_factory=lambda: MappingProxyType({}))


@dataclass(frozen=True, slots=True, kw_only=True)
class Option:
    """A check-specific rule key (``band = 0.02``, ``which = "kv"``)."""

    kind: type                                      # float, str or bool
    help: str
    choices: tuple[str, ...] = ()
    low: float | None = None                        # open bounds for floats
    high: float | None = None
    required: bool = False


CheckFunction = Callable[..., Measurement]


@dataclass(frozen=True, slots=True, kw_only=True)
class Check:
    name: str
    unit: str
    summary: str
    limit_keys: tuple[str, ...]
    function: CheckFunction
    #: each of ``limit_keys`` read once into quantity, bound and level
    limit_specs: Mapping[str, LimitKey] = field(default_factory=lambda: MappingProxyType({}))
    options: Mapping[str, Option] = field(default_factory=lambda: MappingProxyType({}))
    waivable: bool = True
    predicate: bool = False                         # pass/fail without numeric limits
    needs_stable: bool = False                      # only meaningful for a stable loop

    def __call__(self, analysis: LoopAnalysis, rule: Rule, design: Design, *,
                 baseline: LoopAnalysis | None = None) -> Measurement:
        # The analysis says which checks do not apply to its kind of loop (sampled,
        # measured) and which a measured range leaves undecided: n/a and error, never a
        # number the loop cannot give.
        reason = analysis.not_applicable.get(self.name)
        if reason is not None:
            raise NotApplicable(reason)
        undecided = analysis.undecided.get(self.name)
        if undecided is not None:
            raise AnalysisError(undecided)
        if analysis.coverage is not None and self.name in analysis.coverage.uncovered:
            raise AnalysisError("not covered by the measured range: "
                                + analysis.coverage.uncovered[self.name])
        return self.function(analysis, rule, design, baseline=baseline)

    def unit_for(self, options: Mapping[str, float | str | bool]) -> str:
        """The unit of the measured value under a rule's options."""
        if self.name == "error_constant":
            return ERROR_CONSTANT_UNITS[str(options.get("which", "kv"))]
        if self.name == "delay_margin" and options.get("relative"):
            return "x"
        return self.unit

    def limit_unit(self, key: str, options: Mapping[str, float | str | bool]) -> str:
        """The unit of one limit key (``*_ratio`` keys compare a dimensionless factor)."""
        if key.endswith("_recovery"):
            return "s"
        return "x" if key.endswith("_ratio") else self.unit_for(options)


#: check name → Check. Explicit and greppable; filled by the @_check decorator below.
CHECKS: dict[str, Check] = {}

LOWER = ("min", "warn_min")
UPPER = ("max", "warn_max")
BAND = Option(kind=float, low=0.0, high=0.5,
              help="settling band as a fraction of the final value (default 0.02)")


def _check(name: str, *, unit: str, summary: str, limits: tuple[str, ...] = (),
           options: Mapping[str, Option] | None = None, waivable: bool = True,
           predicate: bool = False, needs_stable: bool = False
           ) -> Callable[[CheckFunction], CheckFunction]:
    def register(fn: CheckFunction) -> CheckFunction:
        CHECKS[name] = Check(name=name, unit=unit, summary=summary, limit_keys=limits,
                             limit_specs=MappingProxyType(
                                 {k: LimitKey.parse(k) for k in limits}),
                             function=fn, options=MappingProxyType(dict(options or {})),
                             waivable=waivable, predicate=predicate,
                             needs_stable=needs_stable)
        return fn
    return register


# --------------------------------------------------------------------------- formatting
def _deg(x: float) -> str:
    return fmt(x, "deg")


def _freq(x: float | None) -> str:
    return fmt(x, "rad/s")


def _db(x: float) -> float:
    return 20.0 * math.log10(x) if x > 0 else -math.inf


# --------------------------------------------------------------------------- stability
@_check("closed_loop_stability", unit="", predicate=True, waivable=False,
        summary="every closed-loop pole in the open left half-plane (Nyquist count for "
                "delay loops)")
def closed_loop_stability(a: LoopAnalysis, rule: Rule, design: Design, *,
                          baseline: LoopAnalysis | None = None) -> Measurement:
    st = a.stability
    if not st.certified:
        # Roots and the argument principle disagree: neither verdict can be trusted.
        raise AnalysisError(f"the closed-loop roots of variant '{a.variant}' are not "
                            f"certified: {st.note}")
    sampled = st.domain == "z"
    how = ("closed-loop poles in z" if sampled else "closed-loop poles" if st.method == "poles"
           else f"Nyquist count, {st.open_loop_rhp_poles} open-loop RHP poles")
    region = "outside the unit circle" if sampled else "right-half-plane"
    if st.closed_loop_stable:
        value, text = "stable", f"closed loop stable ({how})"
    elif st.marginal:
        value, text = "marginal", f"closed-loop pole on the stability boundary ({how})"
    else:
        value = "unstable"
        text = f"closed loop unstable: {st.rhp_closed_loop_poles} {region} pole(s) ({how})"
    if st.note:
        text += f"; {st.note}"
    return Measurement(value=value, text=text, ok=st.closed_loop_stable, details={
        "method": st.method, "rhp_closed_loop_poles": float(st.rhp_closed_loop_poles),
        "open_loop_rhp_poles": float(st.open_loop_rhp_poles)})


@_check("internal_stability", unit="", predicate=True, waivable=False,
        summary="no unstable or imaginary-axis pole of one block cancelled by a zero of "
                "another")
def internal_stability(a: LoopAnalysis, rule: Rule, design: Design, *,
                       baseline: LoopAnalysis | None = None) -> Measurement:
    it = a.internal
    if it.internally_stable:
        text = "no unstable pole-zero cancellation between blocks"
    else:
        parts = [f"pole {root_text(c.pole)} of {c.pole_block} cancelled by zero "
                 f"{root_text(c.zero)} of {c.zero_block}" for c in it.cancellations]
        text = "internally unstable: " + ("; ".join(parts) or it.note)
    return Measurement(value="stable" if it.internally_stable else "unstable", text=text,
                       ok=it.internally_stable,
                       details={"cancellations": float(len(it.cancellations))})


# --------------------------------------------------------------------------- margins
@_check("gain_margin", needs_stable=True, unit="dB", limits=(*LOWER, "max_lower", "warn_max_lower"),
        summary="smallest gain increase to instability; gain-reduction margin of a "
                "conditionally stable loop (max_lower)")
def gain_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    m = a.margins
    gm = m.gain_margin_db
    text = (f"gain margin {fmt(gm, 'dB')} at {_freq(m.phase_crossover_rad_s)}"
            if math.isfinite(gm) else "gain margin infinite (no phase crossover above 0 dB)")
    if a.coverage is not None and "gain_margin" in a.coverage.bounded:
        text = (f"gain margin at least {fmt(gm, 'dB')}: no phase crossover in the measured "
                f"range, and |L| is {fmt(-gm, 'dB')} at its top (see the stated assumptions)")
    compare = dict.fromkeys(LOWER, gm)
    if m.gain_margin_lower_db is not None:
        compare |= {"max_lower": m.gain_margin_lower_db,
                    "warn_max_lower": m.gain_margin_lower_db}
        text += f"; gain-reduction margin {fmt(m.gain_margin_lower_db, 'dB')}"
    return Measurement(value=gm, text=text, compare=compare, details={
        "gain_margin_lower_db": m.gain_margin_lower_db,
        "phase_crossover_rad_s": m.phase_crossover_rad_s,
        "phase_crossings": float(len(m.phase_crossings))})


@_check("phase_margin", needs_stable=True, unit="deg", limits=LOWER,
        summary="smallest phase margin over all gain crossovers")
def phase_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                 baseline: LoopAnalysis | None = None) -> Measurement:
    m = a.margins
    n = len(m.gain_crossings)
    if n == 0:
        text = "no gain crossover: phase margin infinite"
    else:
        text = f"phase margin {_deg(m.phase_margin_deg)} at {_freq(m.gain_crossover_rad_s)}"
        if n > 1:
            text += f" (smallest of {n} gain crossovers)"
    return Measurement(value=m.phase_margin_deg, text=text,
                       compare=dict.fromkeys(LOWER, m.phase_margin_deg),
                       details={"gain_crossover_rad_s": m.gain_crossover_rad_s,
                                "gain_crossings": float(n)})


def _loop_delay_s(a: LoopAnalysis, design: Design) -> float:
    variant = next((v for v in design.variants if v.name == a.variant), None)
    if variant is None:
        raise AnalysisError(f"the design has no plant variant named {a.variant!r}")
    if variant.measured is not None:
        raise NotApplicable("measured plant: its dead time is part of the measured response "
                            "and not known on its own")
    delay = variant.delay_s + design.sensor_delay_s
    if design.sampling is not None:
        # The computer's own delay is dead time of the loop like any transport delay.
        delay += design.sampling.compute_delay_samples * design.sampling.period_s
    return delay


@_check("delay_margin", needs_stable=True, unit="s", limits=LOWER,
        options={"relative": Option(kind=bool, help="compare delay margin / loop delay "
                                                     "(the factor by which the dead time may "
                                                     "grow) instead of seconds")},
        summary="smallest extra transport delay to instability over all crossovers")
def delay_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                 baseline: LoopAnalysis | None = None) -> Measurement:
    dm = a.margins.delay_margin_s
    details: dict[str, float | str | None] = {"delay_margin_s": dm}
    text = f"delay margin {fmt(dm, 's')}"
    if a.margins.delay_margin_samples is not None:
        details["delay_margin_samples"] = a.margins.delay_margin_samples
        text += f" ({fmt(a.margins.delay_margin_samples)} samples)"
    value = dm
    if rule.options.get("relative"):
        delay = _loop_delay_s(a, design)
        if delay <= 0.0:
            raise NotApplicable("the loop has no transport delay to compare the delay "
                                "margin with")
        value = dm / delay
        details["loop_delay_s"] = delay
        text += f" = {fmt(value, 'x')} the loop's dead time of {fmt(delay, 's')}"
    return Measurement(value=value, text=text, compare=dict.fromkeys(LOWER, value),
                       details=details)


@_check("peak_sensitivity", needs_stable=True, unit="", limits=UPPER,
        summary="Ms = max |S(jω)|, the inverse of the smallest distance from L to −1")
def peak_sensitivity(a: LoopAnalysis, rule: Rule, design: Design, *,
                     baseline: LoopAnalysis | None = None) -> Measurement:
    s = a.sensitivity
    ms = s.peak_sensitivity
    text = f"Ms {fmt(ms)} ({fmt(_db(ms), 'dB')}) at {_freq(s.peak_sensitivity_rad_s)}"
    details: dict[str, float | str | None] = {"frequency_rad_s": s.peak_sensitivity_rad_s}
    if ms > 1.0 and math.isfinite(ms):
        # Modulus-margin bounds (Åström & Murray): what Ms alone guarantees.
        details["guaranteed_gain_margin"] = ms / (ms - 1.0)
        details["guaranteed_phase_margin_deg"] = math.degrees(2.0 * math.asin(0.5 / ms))
    return Measurement(value=ms, text=text, compare=dict.fromkeys(UPPER, ms),
                       details=details)


@_check("peak_complementary", needs_stable=True, unit="", limits=UPPER,
        summary="Mt = max |T(jω)|, the resonance peak of the closed loop")
def peak_complementary(a: LoopAnalysis, rule: Rule, design: Design, *,
                       baseline: LoopAnalysis | None = None) -> Measurement:
    s = a.sensitivity
    mt = s.peak_complementary
    text = f"Mt {fmt(mt)} ({fmt(_db(mt), 'dB')}) at {_freq(s.peak_complementary_rad_s)}"
    return Measurement(value=mt, text=text, compare=dict.fromkeys(UPPER, mt),
                       details={"frequency_rad_s": s.peak_complementary_rad_s})


@_check("disk_margin", needs_stable=True, unit="", limits=LOWER,
        summary="balanced disk margin α and the simultaneous gain/phase variation it "
                "guarantees")
def disk_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    s = a.sensitivity
    text = (f"disk margin α {fmt(s.disk_margin)}: gain ×{fmt(s.disk_gain_low)} to "
            f"×{fmt(s.disk_gain_high)} or phase ±{_deg(s.disk_phase_deg)}")
    return Measurement(value=s.disk_margin, text=text,
                       compare=dict.fromkeys(LOWER, s.disk_margin),
                       details={"disk_gain_low": s.disk_gain_low,
                                "disk_gain_high": s.disk_gain_high,
                                "disk_phase_deg": s.disk_phase_deg})


# --------------------------------------------------------------------------- sampling
@_check("sample_rate", needs_stable=True, unit="x", limits=(*LOWER, *UPPER),
        summary="sample rate of a digital controller as a multiple of the closed-loop "
                "bandwidth (|T| 3 dB below its DC value)")
def sample_rate(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    info = a.sampling
    if info is None:
        raise NotApplicable("continuous-time controller: no sample rate")
    ratio = info.sample_rate_ratio
    rate_hz = info.sample_rate_rad_s / (2.0 * math.pi)
    bw = info.closed_loop_bandwidth_rad_s
    if bw is None:
        text = (f"sample rate {fmt(rate_hz, 'Hz')} (period {fmt(info.period_s, 's')}): the "
                "closed-loop bandwidth reaches the Nyquist frequency, so the rate is at most "
                f"{fmt(ratio, 'x')} the bandwidth")
    else:
        text = (f"sample rate {fmt(rate_hz, 'Hz')} (period {fmt(info.period_s, 's')}) is "
                f"{fmt(ratio, 'x')} the closed-loop bandwidth {_freq(bw)}")
    text += ("; 10-30x is common practice. The review is exact at the sampling instants "
             "only: the plant output may ripple between them")
    return Measurement(value=ratio, text=text, compare=dict.fromkeys((*LOWER, *UPPER), ratio),
                       details={"period_s": info.period_s,
                                "closed_loop_bandwidth_rad_s": bw,
                                "sample_rate_rad_s": info.sample_rate_rad_s,
                                "nyquist_rad_s": info.nyquist_rad_s,
                                "compute_delay_samples": float(info.compute_delay_samples),
                                "inter_sample_note": info.note})


# --------------------------------------------------------------------------- tracking
@_check("system_type", unit="", limits=(*LOWER, *UPPER),
        summary="number of poles of the loop at s = 0")
def system_type(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    t = float(a.tracking.system_type)
    return Measurement(value=t, text=f"system type {int(t)}",
                       compare=dict.fromkeys((*LOWER, *UPPER), t))


ERROR_CONSTANT_UNITS = {"kp": "", "kv": "1/s", "ka": "1/s^2", "step_error": "",
                        "ramp_error": "s", "parabola_error": "s^2"}
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


# --------------------------------------------------------------------------- regression
#: Floors for the relative change, in the figure's unit, so that a baseline near zero
#: (0 % overshoot, 0 s tail) does not turn a trivial change into an infinite one.
_RELATIVE_FLOOR = {"%": 1.0, "deg": 1.0, "dB": 1.0}


def worsening_pct(change: FigureChange) -> float:
    """How much worse a figure got, % of |baseline| (floored); 0 when not worse."""
    if not change.worsening or change.baseline is None:
        return 0.0
    if math.isinf(change.worsening):
        return math.inf                     # e.g. an infinite margin became finite
    floor = _RELATIVE_FLOOR.get(change.unit, 1e-12)
    return 100.0 * change.worsening / max(abs(change.baseline), floor)


@_check("regression", unit="%", limits=UPPER,
        options={"figure": Option(kind=str, choices=FIGURE_NAMES,
                                  help="judge only this figure (one rule per figure holds "
                                       "its own allowed worsening); default every figure")},
        summary="candidate against a baseline design: the largest worsening of margins, "
                "peaks, tracking and step figures, % of the baseline value")
def regression(a: LoopAnalysis, rule: Rule, design: Design, *,
               baseline: LoopAnalysis | None = None) -> Measurement:
    if baseline is None:
        raise NotApplicable("no baseline given")
    only = rule.options.get("figure")
    changes = [c for c in compare_figures(baseline, a) if only is None or c.figure == only]
    if only is not None and changes[0].change is None:
        c = changes[0]
        side = "baseline" if c.baseline is None else "candidate"
        raise NotApplicable(f"{only} is not available for the {side}")
    details: dict[str, float | str | None] = {}
    parts: dict[str, Mapping[str, float]] = {}
    worst: tuple[float, FigureChange | None] = (0.0, None)
    for change in changes:
        pct = worsening_pct(change)
        details[f"{change.figure}.baseline"] = change.baseline
        details[f"{change.figure}.candidate"] = change.candidate
        details[f"{change.figure}.change"] = change.change
        details[f"{change.figure}.unit"] = change.unit
        details[f"{change.figure}.worse_pct"] = pct
        if change.change is not None:
            parts[change.figure] = dict.fromkeys(UPPER, pct)
        if pct > worst[0]:
            worst = (pct, change)
    pct, ch = worst
    if ch is None:
        text = (f"{only} not worse than in the baseline ({_change_text(changes[0])})"
                if only is not None else "no figure worse than in the baseline")
    else:
        text = (f"{ch.figure} {fmt(ch.candidate, ch.unit)} against {fmt(ch.baseline, ch.unit)} "
                f"in the baseline ({_change_text(ch)}, {fmt(pct, '%')} worse)")
        details |= {"figure": ch.figure, "baseline": ch.baseline, "candidate": ch.candidate,
                    "change": ch.change}
    return Measurement(value=pct, text=text, compare=dict.fromkeys(UPPER, pct),
                       details=details, parts=parts)


def _change_text(c: FigureChange) -> str:
    """``change −45°`` (signed, in the figure's unit)."""
    if c.change is None:
        return "no change computed"
    if c.change == 0.0:
        return "unchanged"
    sign = "+" if c.change > 0 else "−"
    return f"change {sign}{fmt(abs(c.change), c.unit)}"
