"""The regression check: candidate against baseline, figure by figure.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING

from ..analysis.regression import FIGURE_NAMES, FigureChange
from ..analysis.regression import compare as compare_figures
from ..analysis.results import LoopAnalysis
from ..report.numbers import fmt
from .model import Rule

if TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load the design stack
    from ..design.model import Design
from .check_catalog import UPPER, Measurement, NotApplicable, Option, _check

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
