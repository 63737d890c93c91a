"""Candidate against baseline: which figures of a loop got worse, and by how much.

Each figure has a direction ("higher is better" or "lower is better").  The change is
``candidate − baseline`` in the figure's unit; it is a worsening when it goes the wrong way.
Infinite values compare as numbers (an infinite gain margin that becomes finite is a
worsening of infinite size); a figure missing on one side is reported with ``None``.

A figure is missing when the analysis did not compute it: no step response or slow-tail
analysis, a tracking constant listed in ``Tracking.unknown`` (its stored value is only a
placeholder), or a margin the measured range leaves undecided
(``FrequencyCoverage.uncovered``).  Those are exactly the figures the JSON evidence reports
as null, and a placeholder must never pass for a number in a comparison.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from .absence import CHECK_FIGURES, absent_figures
from .results import LoopAnalysis


@dataclass(frozen=True, slots=True, kw_only=True)
class Figure:
    name: str                       # JSON-style key, e.g. "phase_margin_deg"
    unit: str
    higher_is_better: bool
    get: Callable[[LoopAnalysis], float | None]


@dataclass(frozen=True, slots=True, kw_only=True)
class FigureChange:
    figure: str
    unit: str
    baseline: float | None
    candidate: float | None
    change: float | None            # candidate − baseline (None when either is missing)
    worsening: float | None         # ≥ 0: how much worse in the figure's unit; 0 if not worse
    higher_is_better: bool


def _step(attr: str) -> Callable[[LoopAnalysis], float | None]:
    def get(a: LoopAnalysis) -> float | None:
        if a.step is None:
            return None
        value = getattr(a.step, attr)
        return None if value is None else float(value)

    return get


def _tail(a: LoopAnalysis) -> float | None:
    if a.slow_tail is None:
        return None
    return max((p.tail_time_s for p in a.slow_tail.pairs), default=0.0)


#: The figures compared, in report order.
FIGURES: tuple[Figure, ...] = (
    Figure(name="gain_margin_db", unit="dB", higher_is_better=True,
           get=lambda a: a.margins.gain_margin_db),
    Figure(name="phase_margin_deg", unit="deg", higher_is_better=True,
           get=lambda a: a.margins.phase_margin_deg),
    Figure(name="delay_margin_s", unit="s", higher_is_better=True,
           get=lambda a: a.margins.delay_margin_s),
    Figure(name="peak_sensitivity", unit="", higher_is_better=False,
           get=lambda a: a.sensitivity.peak_sensitivity),
    Figure(name="peak_complementary", unit="", higher_is_better=False,
           get=lambda a: a.sensitivity.peak_complementary),
    Figure(name="disk_margin", unit="", higher_is_better=True,
           get=lambda a: a.sensitivity.disk_margin),
    Figure(name="gain_crossover_rad_s", unit="rad/s", higher_is_better=True,
           get=lambda a: a.margins.gain_crossover_rad_s),
    Figure(name="kp", unit="", higher_is_better=True, get=lambda a: a.tracking.kp),
    Figure(name="kv", unit="1/s", higher_is_better=True, get=lambda a: a.tracking.kv),
    Figure(name="ka", unit="1/s^2", higher_is_better=True, get=lambda a: a.tracking.ka),
    Figure(name="overshoot_pct", unit="%", higher_is_better=False,
           get=_step("overshoot_pct")),
    Figure(name="settling_time_s", unit="s", higher_is_better=False,
           get=_step("settling_time_s")),
    Figure(name="rise_time_s", unit="s", higher_is_better=False, get=_step("rise_time_s")),
    Figure(name="tail_time_s", unit="s", higher_is_better=False, get=_tail),
)

FIGURE_NAMES = tuple(f.name for f in FIGURES)

#: Checks a measured range may leave undecided → the figures they decide.
UNDECIDED_FIGURES = CHECK_FIGURES


def missing_figures(a: LoopAnalysis) -> frozenset[str]:
    """Names of the figures of ``FIGURES`` that the analysis of ``a`` did not compute
    (:func:`~.absence.figure_absence`)."""
    return absent_figures(a, FIGURE_NAMES)


def _difference(new: float, old: float) -> float:
    if new == old:  # also inf == inf
        return 0.0
    return new - old  # ±inf when exactly one side is infinite


def compare(baseline: LoopAnalysis, candidate: LoopAnalysis) -> tuple[FigureChange, ...]:
    """Every figure of ``FIGURES`` for one variant, baseline against candidate."""
    out = []
    gone_old, gone_new = missing_figures(baseline), missing_figures(candidate)
    for fig in FIGURES:
        old = None if fig.name in gone_old else fig.get(baseline)
        new = None if fig.name in gone_new else fig.get(candidate)
        if old is None or new is None:
            out.append(FigureChange(figure=fig.name, unit=fig.unit, baseline=old, candidate=new,
                                    change=None, worsening=None,
                                    higher_is_better=fig.higher_is_better))
            continue
        change = _difference(float(new), float(old))
        worse = -change if fig.higher_is_better else change
        out.append(FigureChange(figure=fig.name, unit=fig.unit, baseline=float(old),
                                candidate=float(new), change=change,
                                worsening=max(worse, 0.0) if not math.isnan(worse) else None,
                                higher_is_better=fig.higher_is_better))
    return tuple(out)
