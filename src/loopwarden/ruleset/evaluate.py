"""Evaluation: rules × analysed variants → findings, complete at birth.

Limits
    Each rule's limits come from the rule set and may be *tightened or supplied* by the
    design: ``[requirements]`` values map onto checks (:data:`REQUIREMENT_TARGETS`) and
    ``[limits."rule.id"]`` tables override single keys.  The stricter value wins and every
    finding records where its limit came from.  A ``[limits]`` entry looser than the rule
    set is a :class:`DesignError`: loosening a rule takes a waiver, which is visible.

Severity (what a breach becomes)
    ``fail`` (default): breaching ``min``/``max`` fails, breaching ``warn_*`` warns.
    ``warn``: breaching any limit warns; the rule never fails the review.
    ``info``: breaching ``min``/``max`` warns; ``warn_*`` levels are only noted in the
    message (status pass).
    A check that cannot be computed is ``error`` whatever the severity; one that does not
    apply, or has no limit at all, is ``n/a`` with the reason.

Waivers
    An unexpired waiver (valid through its expiry date) turns ``fail`` into ``waived``; an
    expired one changes nothing and the message says so; a waiver naming a rule the set
    does not have is a :class:`DesignError`; one that matches no finding (a rule limited
    to the nominal plant, waived on another variant) becomes a ``warn`` finding; stability
    checks refuse waivers.  The review date is an
    argument, never read from the clock here.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

from ..analysis.results import LoopAnalysis, RequirementLimit
from ..design.model import Design, Waiver
from ..errors import AnalysisError, DesignError, did_you_mean
from ..report.numbers import fmt
from .checks import CHECKS, Measurement, NotApplicable
from .model import Bound, Finding, Level, LimitKey, Rule, RuleSet, Severity, Status
from .waivers import decide_waiver, unmatched_waiver, waiver_matches

__all__ = ["REQUIREMENT_TARGETS", "Limit", "Outcome", "alternative_limits", "analysis_settings",
           "build_finding", "evaluate", "evaluate_rule", "judge_rule", "resolve_limits"]


@dataclass(frozen=True, slots=True)
class Limit:
    key: LimitKey                        # which quantity, bound and level
    value: float
    source: str                          # "rule set general 1.0", "design [requirements].x"


@dataclass(frozen=True, slots=True)
class Target:
    """Where a design requirement value lands: a check, limit keys, a conversion."""

    check: str
    keys: tuple[str, ...]
    when: Callable[[Rule], bool] = lambda rule: True
    convert: Callable[[float], float] = lambda x: x


def _which(*names: str) -> Callable[[Rule], bool]:
    return lambda rule: rule.options.get("which") in names


def _inverse(e: float) -> float:
    return math.inf if e == 0.0 else 1.0 / e


#: design ``[requirements]`` key → the rule limits it tightens or supplies.
REQUIREMENT_TARGETS: dict[str, tuple[Target, ...]] = {
    "settling_time": (Target("step_settling", ("max",)), Target("slow_pair_tail", ("max",))),
    "rise_time": (Target("step_rise", ("max",)),),
    "overshoot": (Target("step_overshoot", ("max",)),),
    "phase_margin": (Target("phase_margin", ("min",)),),
    "gain_margin": (Target("gain_margin", ("min",)),),
    "delay_margin": (Target("delay_margin", ("min",),
                            when=lambda rule: not rule.options.get("relative")),),
    "peak_sensitivity": (Target("peak_sensitivity", ("max",)),),
    "peak_complementary": (Target("peak_complementary", ("max",)),),
    "disk_margin": (Target("disk_margin", ("min",)),),
    "crossover_min": (Target("crossover_band", ("min",)),),
    "crossover_max": (Target("crossover_band", ("max",)),),
    # The boost must help by 3 dB across the reference band (fail) and by 2x (warn).
    "reference_band": (Target("boost_band", ("min", "warn_min")),),
    "system_type": (Target("system_type", ("min",)),),
    "disturbance_peak": (Target("disturbance_rejection", ("max",)),),
    "disturbance_iae": (Target("disturbance_rejection", ("max_iae",)),),
    "disturbance_recovery_time": (Target("disturbance_rejection", ("max_recovery",)),),
    "noise_gain_max": (Target("noise_sensitivity", ("max",)),),
    "actuator_limit": (Target("control_effort", ("max",)),),
    "saturated_settling_time": (Target("saturated_response", ("max",)),),
    "windup_cost_max": (Target("saturated_response", ("max_windup",)),),
    "step_error": (Target("error_constant", ("max",), when=_which("step_error")),
                   Target("error_constant", ("min",), when=_which("kp"),
                          convert=lambda e: math.inf if e == 0.0 else 1.0 / e - 1.0)),
    "ramp_error": (Target("error_constant", ("max",), when=_which("ramp_error")),
                   Target("error_constant", ("min",), when=_which("kv"), convert=_inverse)),
    "parabola_error": (Target("error_constant", ("max",), when=_which("parabola_error")),
                       Target("error_constant", ("min",), when=_which("ka"),
                              convert=_inverse)),
}
# A check declares the requirement keys it takes in its catalog entry
# (``@_check(requirements={"key": ("max",)})``); they land here too, so a new check needs no
# edit of this table.
for _entry in CHECKS.values():
    for _key, _limit_keys in _entry.requirements.items():
        REQUIREMENT_TARGETS[_key] = (*REQUIREMENT_TARGETS.get(_key, ()),
                                     Target(_entry.name, _limit_keys))
#: requirement keys the analysis itself uses (not limits).
ANALYSIS_REQUIREMENTS = ("settling_band",)


def requirement_values(design: Design) -> dict[str, float]:
    """The design's requirement values by key, frequencies in rad/s."""
    req = design.requirements
    values = {k: float(v) for k, v in req.values.items()}
    if req.reference_band_rad_s is not None:
        values["reference_band"] = req.reference_band_rad_s
    if req.settling_time_s is not None:
        values["settling_time"] = req.settling_time_s
    if req.settling_band is not None:
        values["settling_band"] = req.settling_band
    return dict(sorted(values.items()))


def resolve_limits(design: Design, ruleset: RuleSet) -> dict[str, dict[str, Limit]]:
    """Effective limits per rule id: rule set, tightened by the design.

    Raises
    ------
    DesignError
        A ``[limits]`` table for an unknown rule id or key, or one that loosens a limit;
        a ``[[waivers]]`` entry naming a rule the set does not have.
    """
    rules = {r.id: r for r in ruleset.rules}
    for i, w in enumerate(design.waivers, start=1):
        # A waiver for a rule the set does not have is a typo or a stale waiver; it must
        # not pass silently (nor quietly stop applying when a rule is renamed).
        if w.rule not in rules:
            raise DesignError(f"waiver for rule '{w.rule}', which rule set {ruleset.id} does "
                              "not have", file=design.path, where=f"waivers[{i}].rule",
                              hint=did_you_mean(w.rule, rules) or "see 'loopwarden rules "
                              f"--show {ruleset.id}'")
    for rule_id, table in design.rule_limits.items():
        if rule_id not in rules:
            raise DesignError(f"no rule '{rule_id}' in rule set {ruleset.id}",
                              file=design.path, where=f"limits.{rule_id}",
                              hint=did_you_mean(rule_id, rules) or "see 'loopwarden rules "
                              f"--show {ruleset.id}'")
        allowed = CHECKS[rules[rule_id].check].limit_keys
        for key in table:
            if key not in allowed:
                raise DesignError(f"rule '{rule_id}' (check {rules[rule_id].check}) has no "
                                  f"limit '{key}'", file=design.path,
                                  where=f"limits.{rule_id}.{key}",
                                  hint=did_you_mean(key, allowed)
                                  or "allowed: " + (", ".join(allowed) or "none"))
    reqs = requirement_values(design)
    out: dict[str, dict[str, Limit]] = {}
    for rule in ruleset.rules:
        spec = CHECKS[rule.check].limit_specs
        lim = {k: Limit(spec[k], v, f"rule set {rule.origin}") for k, v in rule.limits.items()}
        for req_key, value in reqs.items():
            for target in REQUIREMENT_TARGETS.get(req_key, ()):
                if target.check != rule.check or not target.when(rule):
                    continue
                for key in target.keys:
                    new = target.convert(value)
                    if key not in lim or spec[key].bound.stricter(lim[key].value, new):
                        lim[key] = Limit(spec[key], new, f"design [requirements].{req_key}")
        for key, value in design.rule_limits.get(rule.id, {}).items():
            value = float(value)
            own = rule.limits.get(key)
            if own is not None and spec[key].bound.stricter(value, own):
                bound = "lower" if spec[key].bound is Bound.MIN else "raise"
                raise DesignError(
                    f"{key} = {value:g} would {bound} the rule set's {key} = {own:g}; a design "
                    "may only tighten a rule", file=design.path,
                    where=f"limits.{rule.id}.{key}",
                    hint="to accept a breach, add a waiver with a reason, approver and expiry")
            if key not in lim or spec[key].bound.stricter(lim[key].value, value):
                lim[key] = Limit(spec[key], value, f"design [limits.{rule.id}]")
        out[rule.id] = lim
    return out


def analysis_settings(design: Design, ruleset: RuleSet,
                      limits: Mapping[str, Mapping[str, Limit]]) -> tuple[float | None,
                                                                          float | None]:
    """(minimum phase margin, settling band) the analysis should use.

    The phase margin is the strictest ``min`` of the set's phase-margin rules (the integral
    alternative is re-tuned to keep it); the band is the design's, else the rule set's.
    """
    pm = [limits[r.id]["min"].value for r in ruleset.rules
          if r.check == "phase_margin" and "min" in limits[r.id]]
    bands = [float(r.options["band"]) for r in ruleset.rules if "band" in r.options]
    band = design.requirements.settling_band or (bands[0] if bands else None)
    return (max(pm) if pm else None), band


#: check → (figure of the integral alternative per hard limit key) for the limits the
#: alternative is judged against; error_constant's figure is its ``which`` option.
_ALTERNATIVE_FIGURES: dict[str, dict[str, str]] = {
    "phase_margin": {"min": "phase_margin_deg"},
    "gain_margin": {"min": "gain_margin_db"},
    "delay_margin": {"min": "delay_margin_s"},
    "peak_sensitivity": {"max": "peak_sensitivity"},
    "peak_complementary": {"max": "peak_complementary"},
    "disk_margin": {"min": "disk_margin"},
    "crossover_band": {"min": "lowest_crossover_rad_s", "max": "highest_crossover_rad_s"},
    "step_overshoot": {"max": "overshoot_pct"},
    "step_settling": {"max": "settling_time_s"},
    "step_rise": {"max": "rise_time_s"},
    "system_type": {"min": "system_type", "max": "system_type"},
    "slow_pair_tail": {"max": "tail_time_s"},
}


def alternative_limits(ruleset: RuleSet, limits: Mapping[str, Mapping[str, Limit]],
                       ) -> tuple[RequirementLimit, ...]:
    """The hard limits (``min``/``max``) of the review that the integral alternative is
    judged against: margins, peaks, crossover, step, type and error constants.

    Effective limits (the design's requirements included), so the alternative meets or
    fails the same numbers as the current design.  Relative delay-margin rules are left
    out (they compare with the loop delay, not an absolute figure).
    """
    out: list[RequirementLimit] = []
    for rule in ruleset.rules:
        if rule.check == "error_constant":
            which = str(rule.options.get("which", ""))
            figures = {"min": which, "max": which}
        elif rule.check == "delay_margin" and rule.options.get("relative"):
            continue
        else:
            figures = _ALTERNATIVE_FIGURES.get(rule.check, {})
        check = CHECKS[rule.check]
        for key, figure in figures.items():
            lim = limits.get(rule.id, {}).get(key)
            if lim is None:
                continue
            out.append(RequirementLimit(
                rule=rule.id, figure=figure, bound=lim.key.bound.value, value=lim.value,
                unit=check.limit_unit(key, rule.options), source=lim.source,
                nominal_only=rule.options.get("variants") == "nominal"))
    return tuple(out)


# --------------------------------------------------------------------------- judging
_BREACH = {Severity.FAIL: Status.FAIL, Severity.WARN: Status.WARN, Severity.INFO: Status.WARN}


def _judge(m: Measurement, lim: Mapping[str, Limit], severity: Severity,
           unit: Callable[[str], str]) -> tuple[Status, str | None, str]:
    """(status, determining limit key, phrase) for a numeric measurement.

    The phrase names the determining limit with its value ("below the minimum 45°").
    """
    usable = [k for k in lim if k in m.compare]
    if not usable:
        return Status.NA, None, ""
    hard = [k for k in usable if lim[k].key.level is Level.FAIL]
    warn = [k for k in usable if lim[k].key.level is Level.WARN]

    def value(key: str) -> str:
        return fmt(lim[key].value, unit(key))

    def breached(key: str) -> bool:
        return lim[key].key.bound.breached(m.compare[key], lim[key].value)

    def lower(key: str) -> bool:
        return lim[key].key.bound is Bound.MIN

    for key in hard:
        if breached(key):
            word = "below the minimum" if lower(key) else "above the maximum"
            return _BREACH[severity], key, f"{word} {value(key)}"
    for key in warn:
        if breached(key):
            word = "below the warning level" if lower(key) else "above the warning level"
            if severity == Severity.INFO:
                return Status.PASS, key, f"{word} {value(key)} (noted only: info rule)"
            return Status.WARN, key, f"{word} {value(key)}"
    met = hard or warn
    if len(met) == 1:
        return Status.PASS, met[0], f"meets {lim[met[0]].key.bound.sign} {value(met[0])}"
    return Status.PASS, met[0], "meets " + ", ".join(f"{k} {value(k)}" for k in met)


def _requirement_hint(rule: Rule) -> str:
    keys = [k for k, ts in REQUIREMENT_TARGETS.items()
            if any(t.check == rule.check and t.when(rule) for t in ts)]
    if not keys:
        return "no limit given"
    return "no limit given (the design may set " + " or ".join(
        f"[requirements].{k}" for k in keys) + ")"


@dataclass(frozen=True, slots=True, kw_only=True)
class Outcome:
    """What one rule gave on one variant before any waiver is considered.

    :func:`evaluate` decides the waiver from this and the design's waivers, then builds
    the :class:`Finding` once (:func:`build_finding`, with
    :func:`loopwarden.ruleset.waivers.decide_waiver`).
    """

    status: Status
    message: str
    unit: str
    measured: float | str | None = None
    limit: float | str | None = None
    limit_source: str = ""
    limit_key: LimitKey | None = None
    details: Mapping[str, float | str | None] = dataclasses.field(
        default_factory=lambda: MappingProxyType({}))


def judge_rule(rule: Rule, lim: Mapping[str, Limit], analysis: LoopAnalysis,
               design: Design, *, baseline: LoopAnalysis | None = None) -> Outcome:
    """One rule on one variant; never raises for a check's own failure."""
    check = CHECKS[rule.check]
    unit = check.unit_for(rule.options)
    effective = dataclasses.replace(
        rule, limits=MappingProxyType({k: v.value for k, v in lim.items()}))
    try:
        m = check(analysis, effective, design, baseline=baseline)
    except NotApplicable as exc:
        return Outcome(status=Status.NA, message=exc.reason, unit=unit)
    except AnalysisError as exc:
        return Outcome(status=Status.ERROR, message=f"could not compute: {exc}", unit=unit)
    except Exception as exc:  # noqa: BLE001 - one broken check must not stop the review
        return Outcome(status=Status.ERROR, unit=unit,
                       message=f"check '{rule.check}' crashed ({type(exc).__name__}: "
                               f"{exc}); the other rules were evaluated")
    unit = m.unit if m.unit is not None else unit
    if check.needs_stable and not analysis.stability.closed_loop_stable:
        # Margins and peaks describe how far a *stable* loop is from instability; on an
        # unstable loop the numbers exist but mean nothing (the stability rule fails).
        why = ("closed-loop stability could not be decided"
               if "closed_loop_stability" in analysis.undecided else "the closed loop is unstable")
        return Outcome(status=Status.NA, unit=unit, measured=m.value,
                       message=f"{m.text}; {why}, so this is no stability "
                               "margin (see closed_loop_stability)")
    details: dict[str, float | str | None] = dict(m.details)
    details["severity"] = str(rule.severity)
    for key, limit in lim.items():
        details[f"limit.{key}"] = limit.value
        details[f"limit_source.{key}"] = limit.source

    if check.predicate:
        status = Status.PASS if m.ok else _BREACH[rule.severity]
        return Outcome(status=status, message=m.text, unit=unit, measured=m.value,
                       limit="stable", limit_source=f"rule set {rule.origin}",
                       details=MappingProxyType(details))
    status, key, phrase = _judge(m, lim, rule.severity,
                                 lambda k: check.limit_unit(k, rule.options))
    if key is None:
        reason = _requirement_hint(rule) if not lim else (
            "none of this rule's limits applies to this loop ("
            + ", ".join(lim) + ")")
        return Outcome(status=Status.NA, message=f"{m.text}; {reason}", unit=unit,
                       measured=m.value, details=MappingProxyType(details))
    details["limit_key"] = key
    for part, compare in m.parts.items():
        # Each part (a regression figure) against the same limits, so a report can say
        # which figures breach and which do not, not only the worst one.
        part_status, _key, _phrase = _judge(dataclasses.replace(m, compare=compare), lim,
                                            rule.severity,
                                            lambda k: check.limit_unit(k, rule.options))
        details[f"{part}.status"] = part_status.value
    limit = lim[key]
    if limit.key.quantity in ("ratio", "recovery"):
        unit = check.limit_unit(key, rule.options)
    return Outcome(status=status, message=f"{m.text}: {phrase}", unit=unit,
                   measured=m.compare[key], limit=limit.value, limit_source=limit.source,
                   limit_key=limit.key, details=MappingProxyType(details))


# --------------------------------------------------------------------------- findings
_UNCHECKED_RATIONALE = "A requirement the design states but no rule checks gives false comfort."


def build_finding(rule: Rule, variant: str, outcome: Outcome, waivers: Sequence[Waiver] = (),
                  *, today: dt.date | None = None) -> Finding:
    """The finding of one rule on one variant, complete: its waiver decided first."""
    w = decide_waiver(rule.check, outcome.status, outcome.message, outcome.details, waivers,
                      today=today)
    return Finding(rule=rule.id, check=rule.check, status=w.status, variant=variant,
                   measured=outcome.measured, limit=outcome.limit, unit=outcome.unit,
                   message=w.message, limit_source=outcome.limit_source,
                   rationale=rule.rationale, source=rule.source, waiver=w.waiver,
                   limit_key=outcome.limit_key, details=MappingProxyType(dict(w.details)))


def evaluate_rule(rule: Rule, lim: Mapping[str, Limit], analysis: LoopAnalysis,
                  design: Design, *, baseline: LoopAnalysis | None = None) -> Finding:
    """One rule on one variant, without waivers; never raises for a check's own failure."""
    return build_finding(rule, analysis.variant,
                         judge_rule(rule, lim, analysis, design, baseline=baseline))


def _unused_requirements(design: Design, ruleset: RuleSet) -> list[Finding]:
    checks = {r.check for r in ruleset.rules}
    out = []
    for key, value in requirement_values(design).items():
        if key in ANALYSIS_REQUIREMENTS:
            continue
        targets = REQUIREMENT_TARGETS.get(key, ())
        if any(t.check in checks for t in targets):
            continue
        why = (f"rule set {ruleset.id} has no {' or '.join(sorted({t.check for t in targets}))}"
               " rule" if targets else "no check uses this requirement")
        out.append(Finding(
            rule=f"requirements.{key}", check="requirements", status=Status.WARN,
            variant=None, measured=value, limit=None, unit="",
            limit_source=f"design [requirements].{key}", rationale=_UNCHECKED_RATIONALE,
            source="loopwarden", message=f"requirement {key} = {fmt(value)} is not checked: "
                                         f"{why}"))
    return out


# --------------------------------------------------------------------------- entry point
def evaluate(design: Design, ruleset: RuleSet, analyses: Sequence[LoopAnalysis], *,
             today: dt.date, baseline: Sequence[LoopAnalysis] | None = None,
             limits: Mapping[str, Mapping[str, Limit]] | None = None) -> tuple[Finding, ...]:
    """Evaluate every rule on every variant: findings in variant order, then rule order.

    Design-wide findings (unchecked requirements, then waivers that match no finding) come
    last.  Each finding is built once, its waiver decided before.
    """
    lim = limits if limits is not None else resolve_limits(design, ruleset)
    base = {a.variant: a for a in baseline} if baseline is not None else None
    waivers = tuple(design.waivers)
    matched = [False] * len(waivers)
    findings: list[Finding] = []
    for analysis in analyses:
        for rule in ruleset.rules:
            if rule.options.get("variants") == "nominal" and analysis is not analyses[0]:
                continue
            b = None if base is None else base.get(analysis.variant)
            if base is not None and b is None and rule.check == "regression":
                outcome = Outcome(
                    status=Status.NA, unit=CHECKS[rule.check].unit,
                    message=f"the baseline has no plant variant named '{analysis.variant}'")
            else:
                outcome = judge_rule(rule, lim[rule.id], analysis, design, baseline=b)
            mine = [i for i, w in enumerate(waivers)
                    if waiver_matches(w, rule.id, analysis.variant)]
            for i in mine:
                matched[i] = True
            findings.append(build_finding(rule, analysis.variant, outcome,
                                          [waivers[i] for i in mine], today=today))
    findings.extend(_unused_requirements(design, ruleset))
    rule_ids = [r.id for r in ruleset.rules]
    findings.extend(unmatched_waiver(w, rule_ids)
                    for w, hit in zip(waivers, matched, strict=True) if not hit)
    return tuple(findings)
