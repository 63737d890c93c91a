"""Time-response figure: the step and ramp responses the analysis computed, with the slow
pairs' tails.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from matplotlib.axes import Axes

from ..analysis.results import LoopAnalysis, SlowPair
from .plot_style import (
    _RC,
    C_FAIL,
    C_MAIN,
    C_MARK,
    C_SECOND,
    FULL_WIDTH_IN,
    Plot,
    _figure,
    _fmt,
    _no_data,
    _pixels,
    _place,
    _style,
)


def time_figure(analysis: LoopAnalysis, *, width_in: float = FULL_WIDTH_IN,
                height_in: float = 4.6) -> Plot:
    """Step response, its distance to the final value on a log scale (the slow tail), and
    the ramp-tracking error."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        grid = fig.add_gridspec(2, 2, height_ratios=(1, 1))
        ax_y = fig.add_subplot(grid[0, 0])
        ax_log = fig.add_subplot(grid[0, 1])
        ax_r = fig.add_subplot(grid[1, :])
        curves = analysis.curves
        metrics = analysis.step
        if curves is None or metrics is None or curves.step.time_s.size < 2:
            why = analysis.errors.get("step", "no step response was computed")
            for ax in (ax_y, ax_log, ax_r):
                _no_data(ax, why)
            _place(fig, rows=2, cols=2, hgap=0.62, wgap=0.72)
            return Plot(key="time", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                        caption=f"Closed-loop responses, {analysis.variant}: {why}.")
        t = curves.step.time_s
        y = curves.step.value
        yf = metrics.final_value
        band = metrics.settling_band * abs(yf)
        sampled = analysis.sampling is not None
        # A sampled loop is known at t = kT only: drawn as held samples, not as a smooth
        # curve that would suggest knowledge of the output between the instants.
        draw = {"drawstyle": "steps-post"} if sampled else {}
        ax_y.plot(t, y, color=C_MAIN, label="y(kT), r = 1(t)" if sampled else "y(t), r = 1(t)",
                  **draw)
        ax_y.axhspan(yf - band, yf + band, color="#e3ecf5", linewidth=0,
                     label=f"±{100 * metrics.settling_band:g} % band")
        ax_y.axhline(yf, color=C_MARK, linewidth=0.5)
        if math.isfinite(metrics.settling_time_s):
            ax_y.axvline(metrics.settling_time_s, color=C_SECOND, linewidth=0.8, linestyle=":",
                         label=f"settled {_fmt(metrics.settling_time_s)} s")
        if metrics.peak_time_s is not None and metrics.overshoot_pct > 0:
            ax_y.plot([metrics.peak_time_s], [yf * (1 + metrics.overshoot_pct / 100.0)], "v",
                      color=C_SECOND, markersize=4,
                      label=f"overshoot {_fmt(metrics.overshoot_pct)} %")
        ax_y.set_xlabel("time (s)")
        ax_y.set_ylabel("output y")
        ax_y.set_xlim(t[0], t[-1])
        ax_y.legend(loc="lower right", frameon=False)
        ax_y.set_title("Reference step", loc="left")

        dist = np.abs(y - yf)
        floor = band / 300.0 if band > 0 else 1e-9
        ax_log.semilogy(t, np.maximum(dist, floor), color=C_MAIN, label="|y(t) − y∞|",
                        **draw)
        ax_log.axhline(band, color=C_SECOND, linewidth=0.8, linestyle="--",
                       label="settling band")
        tail_pairs: Sequence[SlowPair] = (analysis.slow_tail.pairs
                                          if analysis.slow_tail is not None else ())
        for pair in tail_pairs:
            rate = abs(pair.pole.real)
            ax_log.semilogy(t, np.maximum(abs(pair.residue) * np.exp(-rate * t), floor),
                            color=C_FAIL, linewidth=0.9, linestyle="--",
                            label=f"slow-pair tail, pole {_fmt(pair.pole.real)}")
            if math.isfinite(pair.tail_time_s) and pair.tail_time_s > 0:
                ax_log.axvline(pair.tail_time_s, color=C_FAIL, linewidth=0.6, linestyle=":")
        ax_log.set_ylim(floor, max(float(np.max(dist)), band) * 3.0)
        ax_log.set_xlim(t[0], t[-1])
        ax_log.set_xlabel("time (s)")
        ax_log.set_ylabel("distance to final value")
        ax_log.legend(loc="upper right", frameon=False)
        ax_log.set_title("Step error, log scale (slow tail)", loc="left")

        _ramp_panel(ax_r, analysis, curves, metrics, draw)
        for ax in (ax_y, ax_log, ax_r):
            _style(ax)
        _place(fig, rows=2, cols=2, hgap=0.62, wgap=0.72)
        caption = (f"Closed-loop responses, {analysis.variant}. Settling ("
                   f"{100 * metrics.settling_band:g} % band) after "
                   f"{_fmt(metrics.settling_time_s)} s, overshoot "
                   f"{_fmt(metrics.overshoot_pct)} %.")
        if analysis.sampling is not None:
            caption += (f" Values at the sampling instants t = kT (T = "
                        f"{analysis.sampling.period_s:.4g} s), held between them: what the "
                        "output does between two instants is not shown.")
        if tail_pairs:
            caption += (" The dashed red line is the slow pair's own term |r|·e^(p·t): while "
                        "it lies above the band, the tail alone keeps the output unsettled.")
        return Plot(key="time", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=caption)


def _ramp_panel(ax_r: Axes, analysis: LoopAnalysis, curves: Any, metrics: Any,
                draw: dict[str, str]) -> None:
    """The lower panel of :func:`time_figure`: the ramp-tracking error."""
    tr = curves.ramp_error.time_s
    er = curves.ramp_error.value
    if tr.size >= 2:
        ax_r.plot(tr, er, color=C_MAIN, label="e(t) = t − y(t), r = t", **draw)
        final = metrics.ramp_error_final
        ax_r.axhline(final, color=C_MARK, linewidth=0.6, linestyle="--",
                     label=f"e at end of run {_fmt(final)}")
        ramp = analysis.tracking.ramp_error
        if ramp is not None and math.isfinite(ramp):
            ax_r.axhline(analysis.tracking.ramp_error, color=C_SECOND, linewidth=0.8,
                         linestyle=":",
                         label=f"steady state 1/Kv = {_fmt(analysis.tracking.ramp_error)}")
        ax_r.set_xlim(tr[0], tr[-1])
        # A growing error (type 0) ends top right; put the legend where the curve isn't.
        rising = er[-1] >= 0.8 * float(np.max(er))
        ax_r.legend(loc="lower right" if rising else "upper right", frameon=False)
    else:
        _no_data(ax_r, analysis.errors.get("ramp", "no ramp response was computed"))
    ax_r.set_xlabel("time (s)")
    ax_r.set_ylabel("tracking error (per unit slope)")
    ax_r.set_title("Reference ramp: tracking error", loc="left")
