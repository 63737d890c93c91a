"""The check catalog: the :class:`Check` record, the ``CHECKS`` registry filled by the
``@_check`` decorator, :class:`Measurement`, :class:`Option` and the number helpers the
check groups share.  Every check module registers itself on import (see ``checks.py``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING

from ..analysis.results import LoopAnalysis
from ..errors import AnalysisError
from ..report.numbers import fmt
from .model import LimitKey, Rule

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
    #: design ``[requirements]`` key → the limit keys of this check it tightens or supplies
    #: (merged into :data:`loopwarden.ruleset.evaluate.REQUIREMENT_TARGETS`)
    requirements: Mapping[str, tuple[str, ...]] = field(
        default_factory=lambda: MappingProxyType({}))
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
           predicate: bool = False, needs_stable: bool = False,
           requirements: Mapping[str, tuple[str, ...]] | None = None
           ) -> Callable[[CheckFunction], CheckFunction]:
    def register(fn: CheckFunction) -> CheckFunction:
        CHECKS[name] = Check(name=name, unit=unit, summary=summary, limit_keys=limits,
                             limit_specs=MappingProxyType(
                                 {k: LimitKey.parse(k) for k in limits}),
                             function=fn, options=MappingProxyType(dict(options or {})),
                             waivable=waivable, predicate=predicate,
                             needs_stable=needs_stable,
                             requirements=MappingProxyType(dict(requirements or {})))
        return fn
    return register


# --------------------------------------------------------------------------- formatting
def _deg(x: float) -> str:
    return fmt(x, "deg")


def _freq(x: float | None) -> str:
    return fmt(x, "rad/s")


def _db(x: float) -> float:
    return 20.0 * math.log10(x) if x > 0 else -math.inf


ERROR_CONSTANT_UNITS = {"kp": "", "kv": "1/s", "ka": "1/s^2", "step_error": "",
                        "ramp_error": "s", "parabola_error": "s^2"}
