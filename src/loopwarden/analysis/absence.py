"""Why a check or a figure of an analysis is missing: one typed answer.

A :class:`~.results.LoopAnalysis` records what it could not give in several places, each
with its own meaning: ``not_applicable`` (the kind of loop cannot give it, from the
pipeline's table of parts), ``coverage.uncovered`` (a measured range does not decide it),
``undecided`` (a part failed numerically; its value is a placeholder) and
``Tracking.unknown`` (a constant a measured plant leaves open).  :func:`check_absence` and
:func:`figure_absence` read all of them and answer with one :class:`Absence` (or None when
the value is there), so code that needs to know whether a number is real asks one place.

The JSON evidence is unchanged by this module (it reads the same records).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from enum import StrEnum

from .results import LoopAnalysis

__all__ = ["Absence", "Why", "absent_figures", "check_absence", "figure_absence"]


class Why(StrEnum):
    """Why a value is missing."""

    NOT_APPLICABLE = "not_applicable"       # this kind of loop cannot give it
    UNDECIDED = "undecided"                 # the data do not decide it (measured range)
    NOT_COMPUTED = "not_computed"           # a part of the analysis failed


@dataclass(frozen=True, slots=True)
class Absence:
    """A missing value: why, in words, and a bound where one is known (a lower bound of a
    margin in its unit)."""

    why: Why
    reason: str
    bound: float | None = None


#: Check → the figures (names of :data:`.regression.FIGURES` and of the tracking fields)
#: that it decides.
CHECK_FIGURES: dict[str, tuple[str, ...]] = {
    "gain_margin": ("gain_margin_db",),
    "phase_margin": ("phase_margin_deg", "gain_crossover_rad_s"),
    "crossover_band": ("gain_crossover_rad_s",),
    "delay_margin": ("delay_margin_s",),
    "peak_sensitivity": ("peak_sensitivity",),
    "peak_complementary": ("peak_complementary",),
    "disk_margin": ("disk_margin",),
}
#: Figures of the step response and its tail: missing when the step is undecided.
STEP_FIGURES = ("overshoot_pct", "settling_time_s", "rise_time_s", "tail_time_s")


def check_absence(a: LoopAnalysis, check: str) -> Absence | None:
    """Why check ``check`` has no value on ``a`` (None: it has one).

    Precedence as the rule evaluation applies it: not applicable, then a failed part, then
    a measured range that does not decide it.
    """
    reason = a.not_applicable.get(check)
    if reason is not None:
        return Absence(Why.NOT_APPLICABLE, reason)
    reason = a.undecided.get(check)
    if reason is not None:
        return Absence(Why.NOT_COMPUTED, reason)
    if a.coverage is not None and check in a.coverage.uncovered:
        return Absence(Why.UNDECIDED, a.coverage.uncovered[check], _bound(a, check))
    return None


def _bound(a: LoopAnalysis, check: str) -> float | None:
    """A bound the measured range does give for an undecided check, else None.

    The gain margin, when ``|L| < 1`` at the top of the range and the stability count
    holds: under the stated assumptions every phase crossover above the range has
    ``|L| ≤ |L(ω_max)|``, and one in it a margin above that, so GM ≥ −20·log10|L(ω_max)|
    (dB, a lower bound).
    """
    cov = a.coverage
    if (check != "gain_margin" or cov is None or not 0.0 < cov.loop_gain_at_max < 1.0
            or "closed_loop_stability" in cov.uncovered):
        return None
    return -20.0 * math.log10(cov.loop_gain_at_max)


def figure_absence(a: LoopAnalysis, figure: str) -> Absence | None:
    """Why the figure ``figure`` (a regression figure or tracking field) is missing."""
    if figure in a.tracking.unknown:
        why = a.not_applicable.get("error_constant", "the constant of the loop's own type "
                                                     "needs the plant's low-frequency gain")
        return Absence(Why.UNDECIDED, why)
    for check, figures in CHECK_FIGURES.items():
        if figure not in figures:
            continue
        if check in a.undecided:
            return Absence(Why.NOT_COMPUTED, a.undecided[check])
        if a.coverage is not None and check in a.coverage.uncovered:
            return Absence(Why.UNDECIDED, a.coverage.uncovered[check])
    if figure in STEP_FIGURES:
        for check in ("closed_loop_stability", "step_settling"):
            reason = a.undecided.get(check)
            if reason is not None:
                return Absence(Why.NOT_COMPUTED, reason)
    return None


def absent_figures(a: LoopAnalysis, figures: tuple[str, ...]) -> frozenset[str]:
    """The names among ``figures`` that :func:`figure_absence` finds missing on ``a``."""
    return frozenset(f for f in figures if figure_absence(a, f) is not None)
