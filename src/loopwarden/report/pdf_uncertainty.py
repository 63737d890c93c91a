"""PDF section: the uncertain parameters, the sweep's worst cases and pass fractions.

Tables of the parameters as read, the worst case of each figure with its point, plant
variant and how it was found, the pass fraction of each swept rule; then the histograms
and the worst figure against its two most influential parameters
(:mod:`.plots_uncertainty`).  Everything comes from the Review; nothing is recomputed.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from reportlab.platypus import Paragraph, Spacer

from ..ruleset.sweep_rules import SWEPT_CHECKS, point_text
from .pdf_evidence import _figure, grid_table
from .pdf_style import num, text
from .plots import FrequencyUnit
from .plots_uncertainty import FIGURE_LABELS, histogram_figure, influence_figure, worst_figure_name
from .review import Review

__all__ = ["uncertainty_section"]

WORST_SUFFIX = " (worst case)"


def _rule_limits(review: Review) -> tuple[dict[str, float], dict[str, float]]:
    """(figure → the limit of its worst-case finding, figure → that rule's pass fraction)."""
    unc = review.uncertainty
    limits: dict[str, float] = {}
    fractions: dict[str, float] = {}
    for f in review.findings:
        if f.variant is None or not f.variant.endswith(WORST_SUFFIX):
            continue
        figure = SWEPT_CHECKS.get(f.check)
        if figure is None:
            continue
        if isinstance(f.limit, float | int) and figure not in limits:
            limits[figure] = float(f.limit)
        frac = unc.pass_fraction.get(f.rule) if unc is not None else None
        if frac is not None:
            fractions[figure] = min(fractions.get(figure, 1.0), frac)
    return limits, fractions


def uncertainty_section(review: Review, st: dict[str, Any], unit: FrequencyUnit, *,
                        number: str) -> list[Any]:
    """Section ``number``: the sweep of ``[parameters]`` (empty without parameters)."""
    unc = review.uncertainty
    if unc is None:
        return []
    out: list[Any] = [Paragraph(f"{number}  Uncertain parameters", st["h1"])]
    rows = [["parameter", "nominal", "min", "max", "distribution"]]
    for p in unc.parameters:
        dist = p.distribution + (f" (σ = {num(p.sigma)})" if p.sigma is not None else "")
        rows.append([text(p.name), num(p.nominal), num(p.min), num(p.max), text(dist)])
    out.append(grid_table(rows, st, (20, 18, 18, 18, 26)))
    sw = unc.sweep
    if sw is None:
        out.append(Paragraph("No sweep was run (no [sweep] table and no --sweep): the "
                             "review above uses the nominal values only.", st["body"]))
        return out
    unstable = int(np.sum(~sw.stable[sw.random_rows]))
    unstable_corners = int(np.sum(~sw.stable[:sw.corners]))
    out.append(Spacer(1, 2))
    out.append(Paragraph(
        f"Swept plant variants: {text(', '.join(sw.variants))}. {sw.corners} corners and "
        f"{sw.samples} random points (scrambled Sobol', seed {sw.settings.seed}), "
        f"{'with' if sw.settings.worst_case else 'without'} a local worst-case search. "
        f"Unstable closed loop at {unstable} of {sw.samples} random points and "
        f"{unstable_corners} of {sw.corners} corners. Worst cases consider stable points "
        "only; the findings marked “(worst case)” judge the rules there.", st["body"]))
    rows = [["figure", "worst", "plant variant", "point", "found by"]]
    for name, wp in sw.worst.items():
        if wp is None:
            rows.append([text(FIGURE_LABELS[name]), "—", "",
                         "none: no stable point has this figure", ""])
            continue
        value = num(wp.value) if math.isfinite(wp.value) else text(str(wp.value))
        rows.append([text(FIGURE_LABELS[name]), value, text(wp.variant),
                     text(point_text(sw.names, wp.point)), text(wp.found_by)])
    out.append(Spacer(1, 2))
    out.append(grid_table(rows, st, (22, 12, 16, 38, 12)))
    if unc.pass_fraction:
        rows = [["rule", "random points passing"]]
        checks = {r.id: r.check for r in review.ruleset.rules}
        for rule, frac in unc.pass_fraction.items():
            if frac is not None:
                shown = f"{100.0 * frac:.1f} %"
            elif checks.get(rule) == "step_settling":
                shown = "not computed (settling is simulated at candidate points only)"
            else:
                shown = "— (the rule sets no hard limit)"
            rows.append([text(rule), shown])
        out.append(Spacer(1, 2))
        out.append(grid_table(rows, st, (40, 60)))
    limits, fractions = _rule_limits(review)
    out.append(_figure(histogram_figure(sw, limits), st))
    out.append(_figure(influence_figure(sw, worst_figure_name(sw, fractions)), st))
    return out
