"""Rules over the parameter sweep: pass fraction per rule, one worst-case finding per rule.

Pass fraction
    Over the random sample only (corners are not draws of the distributions; ``None``
    for a rule without a hard limit): a point
    passes a rule when, on every swept plant variant, the closed loop is stable and the
    figure meets the rule's hard limits (``min``/``max``, the design's requirements
    included; warning levels never make a point fail).  Stability rules count stable
    points.  Settling rules have no pass fraction (``None``): settling time is simulated
    at candidate points only.  Rules limited to the nominal plant are not swept.
Worst-case finding
    For each swept rule, the rule's worst point (that of its figure; for a stability
    rule the first unstable point, else the point of the smallest phase margin) is
    analysed in full by :func:`loopwarden.analysis.analyze_variant` (certified stability,
    exact margins, the step response) as a plant variant named ``"<variant> (worst
    case)"``, and the rule is evaluated there as on any variant: one finding per rule,
    with the point in its message and details.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType
from typing import TYPE_CHECKING

import numpy as np

from ..analysis.results import LoopAnalysis
from ..design.model import Design
from ..design.parameters import Parameter
from .evaluate import Limit, build_finding, judge_rule
from .model import Bound, Finding, Level, LimitKey, Rule, RuleSet
from .waivers import waiver_matches


def is_lower_bound(key: str) -> bool:
    """True for a limit key that bounds its quantity from below (typed by LimitKey)."""
    return LimitKey.parse(key).bound is Bound.MIN


def is_warn_key(key: str) -> bool:
    """True for a warning-level limit key."""
    return LimitKey.parse(key).level is Level.WARN

if TYPE_CHECKING:  # pragma: no cover - the sweep loads only when a design has parameters
    from ..analysis.sweep import SweepResult, WorstPoint

__all__ = ["SWEPT_CHECKS", "Uncertainty", "pass_fractions", "point_text", "rule_figure",
           "uncertainty_findings"]

#: check → the sweep figure its hard limits compare with (None: stability).
SWEPT_CHECKS: dict[str, str | None] = {
    "closed_loop_stability": None,
    "phase_margin": "phase_margin_deg",
    "gain_margin": "gain_margin_db",
    "delay_margin": "delay_margin_s",
    "peak_sensitivity": "peak_sensitivity",
    "peak_complementary": "peak_complementary",
    "disk_margin": "disk_margin",
    "step_settling": "settling_time_s",
}
_LOWER_KEYS = ("max_lower", "warn_max_lower")


@dataclass(frozen=True, slots=True, kw_only=True)
class Uncertainty:
    """The design's parameters and, when a sweep ran, its result and pass fractions."""

    parameters: tuple[Parameter, ...]
    sweep: SweepResult | None = None
    pass_fraction: Mapping[str, float | None] = dataclasses.field(
        default_factory=lambda: MappingProxyType({}))


def _swept(rule: Rule) -> bool:
    return rule.check in SWEPT_CHECKS and rule.options.get("variants") != "nominal"


def rule_figure(rule: Rule, lim: Mapping[str, Limit]) -> str | None:
    """The sweep figure a rule is judged on (the lower gain margin when only its keys)."""
    figure = SWEPT_CHECKS.get(rule.check)
    if rule.check == "gain_margin" and lim and all(k in _LOWER_KEYS for k in lim):
        return "gain_margin_lower_db"
    return figure


def _meets(values: np.ndarray, key: str, limit: float) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        ok = values >= limit if is_lower_bound(key) else values <= limit
    return ok | np.isnan(values)               # an absent figure breaches no limit


def _variant_pass(result: SweepResult, name: str, rule: Rule,
                  lim: Mapping[str, Limit]) -> np.ndarray:
    fig = result.per_variant[name]
    ok = fig.stable.copy()
    for key, limit in lim.items():
        if is_warn_key(key):
            continue
        if key in _LOWER_KEYS:
            values = fig.gain_margin_lower_db
        else:
            figure = SWEPT_CHECKS[rule.check]
            assert figure is not None
            values = fig.figure(figure)
            if rule.check == "delay_margin" and rule.options.get("relative"):
                with np.errstate(divide="ignore", invalid="ignore"):
                    values = values / result.delay_s[name]
        ok &= _meets(values, key, limit.value)
    return ok


def pass_fractions(result: SweepResult, ruleset: RuleSet,
                   limits: Mapping[str, Mapping[str, Limit]]) -> dict[str, float | None]:
    """Fraction of the random sample passing each swept rule (see the module docstring)."""
    out: dict[str, float | None] = {}
    rows = result.random_rows
    for rule in ruleset.rules:
        if not _swept(rule):
            continue
        if rule.check == "step_settling" or result.samples == 0:
            out[rule.id] = None
            continue
        lim = limits.get(rule.id, {})
        if rule.check != "closed_loop_stability" and all(is_warn_key(k) for k in lim):
            out[rule.id] = None                 # no hard limit: nothing to pass or fail
            continue
        ok = np.ones(result.points.shape[0], dtype=bool)
        for name in result.variants:
            if rule.check == "closed_loop_stability":
                ok &= result.per_variant[name].stable
            else:
                ok &= _variant_pass(result, name, rule, lim)
        out[rule.id] = float(np.mean(ok[rows]))
    return out


def point_text(names: Sequence[str], point: Sequence[float]) -> str:
    return ", ".join(f"{n} = {x:.6g}" for n, x in zip(names, point, strict=True))


def _stability_point(result: SweepResult) -> tuple[tuple[float, ...], str, bool] | None:
    """(point, variant, unstable) for the stability rule's finding."""
    for name in result.variants:
        bad = np.flatnonzero(~result.per_variant[name].stable)
        if bad.size:
            first = int(bad[0])
            return tuple(float(x) for x in result.points[first]), name, True
    wp = result.worst.get("phase_margin_deg")
    if wp is None:
        return None
    return wp.point, wp.variant, False


def uncertainty_findings(design: Design, ruleset: RuleSet,
                         limits: Mapping[str, Mapping[str, Limit]], result: SweepResult,
                         fractions: Mapping[str, float | None],
                         analyse: Callable[[Design, str], LoopAnalysis], *,
                         today: dt.date | None = None) -> list[Finding]:
    """One finding per swept rule at its worst point (see the module docstring).

    The design's waivers that name the rule and the worst-case variant (or every variant)
    are decided before the finding is built, as on any variant (expired ones use ``today``).

    ``analyse(design_at_point, variant_name)`` analyses one plant variant of a design in
    full; points shared by several rules are analysed once.
    """
    from ..design.loader import design_at

    cache: dict[tuple[tuple[float, ...], str], tuple[Design, LoopAnalysis]] = {}
    out: list[Finding] = []
    unstable = {n: int(np.sum(~result.per_variant[n].stable[result.random_rows]))
                for n in result.variants}
    for rule in ruleset.rules:
        if not _swept(rule):
            continue
        lim = limits.get(rule.id, {})
        figure = rule_figure(rule, lim)
        if figure is None:
            found = _stability_point(result)
            if found is None:
                continue
            point, variant, is_bad = found
            how = ("first unstable point of the sweep" if is_bad else
                   f"no unstable point among {result.points.shape[0]} (point of the "
                   "smallest phase margin shown)")
        else:
            wp: WorstPoint | None = result.worst.get(figure)
            if wp is None:
                continue
            point, variant = wp.point, wp.variant
            how = f"worst {figure} over the parameter ranges (found by {wp.found_by})"
        key = (point, variant)
        if key not in cache:
            at = design_at(design, result.values(point))
            base = next(v for v in at.variants if v.name == variant)
            worst_variant = dataclasses.replace(base, name=f"{variant} (worst case)")
            at = dataclasses.replace(at, variants=(*at.variants, worst_variant))
            cache[key] = (at, analyse(at, worst_variant.name))
        at, analysis = cache[key]
        f = judge_rule(rule, lim, analysis, at)
        where = point_text(result.names, point)
        details = dict(f.details)
        details.update({f"parameter.{n}": float(x)
                        for n, x in zip(result.names, point, strict=True)})
        frac = fractions.get(rule.id)
        details["pass_fraction"] = frac
        details["unstable_samples"] = float(sum(unstable.values()))
        tail = (f"; {100.0 * frac:.1f} % of {result.samples} samples pass"
                if frac is not None and not math.isnan(frac) else "")
        outcome = dataclasses.replace(f, message=f"{how}, at {where}: {f.message}{tail}",
                                      details=MappingProxyType(details))
        waivers = [w for w in design.waivers if waiver_matches(w, rule.id, analysis.variant)]
        out.append(build_finding(rule, analysis.variant, outcome, waivers, today=today))
    return out
