"""Figures of the parameter sweep for the PDF review (matplotlib Agg, as :mod:`.plots`).

Every value drawn comes from the :class:`~loopwarden.analysis.sweep.SweepResult` and the
review's worst-case findings (their limits); nothing here evaluates a loop.  Two figures:

* a histogram of each figure over the random sample (stable points), with the rule limit
  of the worst-case finding drawn and the worst value of the sweep marked;
* the figure the sweep judged worst against the two parameters that move it most (by the
  sweep's rank-correlation influence), each sample coloured by its value, the worst point
  marked.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from ..analysis.sweep import LARGER_IS_WORSE, SweepResult
from .plots import _RC, C_FAIL, C_MAIN, C_MARK, C_SECOND, FULL_WIDTH_IN, Plot, _figure, _pixels

__all__ = ["FIGURE_LABELS", "histogram_figure", "influence_figure"]

#: Figure → axis label.
FIGURE_LABELS = {
    "phase_margin_deg": "phase margin (°)",
    "gain_margin_db": "gain margin (dB)",
    "gain_margin_lower_db": "gain-reduction margin (dB)",
    "delay_margin_s": "delay margin (s)",
    "peak_sensitivity": "Ms",
    "peak_complementary": "Mt",
    "disk_margin": "disk margin α",
    "settling_time_s": "settling time (s)",
}
_HIST_FIGURES = ("phase_margin_deg", "gain_margin_db", "delay_margin_s", "peak_sensitivity",
                 "peak_complementary", "disk_margin")


def histogram_figure(sweep: SweepResult, limits: Mapping[str, float], *,
                     width_in: float = FULL_WIDTH_IN, height_in: float = 4.4) -> Plot:
    """One histogram per figure over the stable random points; ``limits[figure]`` drawn."""
    import matplotlib

    rows = np.zeros(sweep.points.shape[0], dtype=bool)
    rows[sweep.random_rows] = True
    rows &= sweep.stable
    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        axes = fig.subplots(2, 3)
        fig.subplots_adjust(left=0.07, right=0.98, top=0.95, bottom=0.1, hspace=0.55,
                            wspace=0.3)
        for ax, name in zip(axes.ravel(), _HIST_FIGURES, strict=True):
            values = sweep.figures[name][rows]
            values = values[np.isfinite(values)]
            ax.set_xlabel(FIGURE_LABELS[name])
            ax.tick_params(labelsize=6.5)
            if values.size == 0:
                ax.text(0.5, 0.5, "no finite value", ha="center", va="center",
                        transform=ax.transAxes, color=C_MARK)
                continue
            ax.hist(values, bins=30, color=C_MAIN, alpha=0.85)
            limit = limits.get(name)
            if limit is not None and math.isfinite(limit):
                ax.axvline(limit, color=C_FAIL, linewidth=1.1, label="rule limit")
            wp = sweep.worst.get(name)
            if wp is not None and math.isfinite(wp.value):
                ax.axvline(wp.value, color=C_SECOND, linewidth=1.0, linestyle="--",
                           label="worst case")
            if name == _HIST_FIGURES[0]:
                ax.legend(loc="best", frameon=False)
        caption = (f"Figures over the {int(np.sum(rows))} stable random points of the sweep "
                   f"(of {sweep.samples}); red: the limit of the rule judged on the worst "
                   "case; orange dashed: the worst value found (corners and local search "
                   "included, so it may lie beyond the histogram).")
        return Plot(key="uncertainty_histograms", pixels=_pixels(fig), width_in=width_in,
                    height_in=height_in, caption=caption)


def worst_figure_name(sweep: SweepResult, fractions_by_figure: Mapping[str, float]) -> str:
    """The figure to plot against the parameters: the lowest pass fraction, else PM."""
    ranked = sorted((f, name != "phase_margin_deg", name)
                    for name, f in fractions_by_figure.items() if name in sweep.influence)
    return ranked[0][2] if ranked else "phase_margin_deg"


def influence_figure(sweep: SweepResult, name: str, *, width_in: float = FULL_WIDTH_IN,
                     height_in: float = 3.6) -> Plot:
    """``name`` over the two most influential parameters (one parameter: against it)."""
    import matplotlib

    rows = np.zeros(sweep.points.shape[0], dtype=bool)
    rows[sweep.random_rows] = True
    rows &= sweep.stable & np.isfinite(sweep.figures[name])
    infl = np.array(sweep.influence.get(name, ()), dtype=float)
    order = [int(j) for j in np.argsort(-infl, kind="stable")] if infl.size else [0]
    values = sweep.figures[name][rows]
    wp = sweep.worst.get(name)
    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        ax = fig.subplots()
        fig.subplots_adjust(left=0.1, right=0.9, top=0.93, bottom=0.14)
        a = order[0]
        if len(sweep.names) == 1 or infl.size < 2:
            ax.scatter(sweep.points[rows, a], values, s=5, color=C_MAIN, linewidths=0)
            ax.set_xlabel(sweep.names[a])
            ax.set_ylabel(FIGURE_LABELS[name])
            if wp is not None:
                ax.plot([wp.point[a]], [wp.value], marker="*", markersize=11, color=C_FAIL,
                        linestyle="none", label="worst case")
                ax.legend(loc="best", frameon=False)
            pair = sweep.names[a]
        else:
            b = order[1]
            cmap = "viridis" if LARGER_IS_WORSE[name] else "viridis_r"
            sc = ax.scatter(sweep.points[rows, a], sweep.points[rows, b], c=values, s=6,
                            cmap=cmap, linewidths=0)
            bar = fig.colorbar(sc, ax=ax, pad=0.02)
            bar.set_label(FIGURE_LABELS[name])
            ax.set_xlabel(f"{sweep.names[a]} (influence {infl[a]:.2f})")
            ax.set_ylabel(f"{sweep.names[b]} (influence {infl[b]:.2f})")
            if wp is not None:
                ax.plot([wp.point[a]], [wp.point[b]], marker="*", markersize=12,
                        color=C_FAIL, linestyle="none", label="worst case")
                ax.legend(loc="best", frameon=False)
            pair = f"{sweep.names[a]} and {sweep.names[b]}"
        caption = (f"{FIGURE_LABELS[name]} over the stable random points against {pair}, "
                   "the parameters that move it most (absolute rank correlation); the star "
                   "is the worst case found.")
        return Plot(key="uncertainty_influence", pixels=_pixels(fig), width_in=width_in,
                    height_in=height_in, caption=caption)
