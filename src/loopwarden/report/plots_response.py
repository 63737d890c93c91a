"""Figures of the saturated responses: output against the linear loop, actuator signal
against its limits, for the reference step and the ``[disturbance]`` load step.

Drawn from :class:`~loopwarden.analysis.results.Saturation` only (renderers never
recompute analysis).
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.axes import Axes

from ..analysis.results import LoopAnalysis, Saturation, TimeSeries
from .plots import (
    _RC,
    C_FAIL,
    C_MAIN,
    C_MARK,
    C_SECOND,
    FULL_WIDTH_IN,
    Plot,
    _figure,
    _fmt,
    _pixels,
    _place,
    _style,
)

__all__ = ["saturation_figure"]


def _limits(ax: Axes, s: Saturation) -> None:
    for value, name in ((s.max_value, "max"), (s.min_value, "min")):
        ax.axhline(value, color=C_FAIL, linewidth=0.8, linestyle="--",
                   label="actuator limits" if name == "max" else None)


def _output(ax: Axes, sat: TimeSeries, lin: TimeSeries, draw: dict, title: str,
            final: float | None, band: float | None) -> None:
    ax.plot(lin.time_s, lin.value, color=C_MARK, linewidth=0.9, linestyle="--",
            label="linear (no limits)", **draw)
    ax.plot(sat.time_s, sat.value, color=C_MAIN, label="with the limits", **draw)
    if final is not None and band is not None:
        ax.axhspan(final - band, final + band, color="#e3ecf5", linewidth=0)
    ax.set_xlim(sat.time_s[0], sat.time_s[-1])
    ax.set_xlabel("time (s)")
    ax.set_ylabel("output y")
    ax.set_title(title, loc="left")
    ax.legend(loc="best", frameon=False)


def _actuator(ax: Axes, s: Saturation, demand: TimeSeries | None, actual: TimeSeries,
              draw: dict, title: str) -> None:
    if demand is not None:
        ax.plot(demand.time_s, demand.value, color=C_SECOND, linewidth=0.9, linestyle=":",
                label="controller demand u", **draw)
    ax.plot(actual.time_s, actual.value, color=C_MAIN, label="actuator output u_a", **draw)
    _limits(ax, s)
    ax.set_xlim(actual.time_s[0], actual.time_s[-1])
    ax.set_xlabel("time (s)")
    ax.set_ylabel("actuator signal")
    ax.set_title(title, loc="left")
    ax.legend(loc="best", frameon=False)


def saturation_figure(analysis: LoopAnalysis, *, width_in: float = FULL_WIDTH_IN) -> Plot:
    """Reference step (and load step) with the actuator limits, beside the linear loop."""
    import matplotlib

    s = analysis.saturation
    if s is None or s.curves is None:
        raise ValueError("no saturated responses to draw")
    c = s.curves
    has_load = c.load is not None and c.load_linear is not None
    rows = 2 if has_load else 1
    height_in = 2.5 * rows + 0.3
    draw = {"drawstyle": "steps-post"} if s.method == "sampled" else {}
    r = s.reference
    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        axes = fig.subplots(rows, 2, squeeze=False)
        final = analysis.step.final_value * r.step if analysis.step is not None else None
        band = (abs(final) * analysis.step.settling_band
                if final is not None and analysis.step is not None else None)
        _output(axes[0, 0], c.step, c.step_linear, draw, f"Reference step {_fmt(r.step)}",
                final, band)
        if math.isfinite(r.settling_time_s):
            axes[0, 0].axvline(r.settling_time_s, color=C_SECOND, linewidth=0.8,
                               linestyle=":")
        _actuator(axes[0, 1], s, c.step_u, c.step_u_actuator, draw,
                  "Actuator, reference step")
        if has_load:
            _output(axes[1, 0], c.load, c.load_linear, draw, "Load step", None, None)
            _actuator(axes[1, 1], s, None, c.load_u_actuator, draw, "Actuator, load step")
        for ax in axes.ravel():
            _style(ax)
        for ax in axes[:, 1]:
            lo, hi = ax.get_ylim()
            span = max(hi, s.max_value) - min(lo, s.min_value)
            ax.set_ylim(min(lo, s.min_value) - 0.05 * span, max(hi, s.max_value) + 0.05 * span)
        _place(fig, rows=rows, cols=2, hgap=0.62, wgap=0.72)
        aw = {"none": "no anti-windup", "clamping": "clamping (conditional integration)",
              "back_calculation": f"back-calculation, Tt = {_fmt(s.tracking_time_s or 0.0)} s"}
        caption = (f"Saturated responses, {analysis.variant}: u limited to "
                   f"[{_fmt(s.min_value)}, {_fmt(s.max_value)}]"
                   + (f", rate ≤ {_fmt(s.rate_limit_per_s)}/s" if s.rate_limit_per_s else "")
                   + f", {aw[s.anti_windup]}. Settles after {_fmt(r.settling_time_s)} s "
                   f"(linear {_fmt(r.linear_settling_time_s)} s, windup cost "
                   f"{_fmt(r.windup_cost_s)} s), overshoot {_fmt(r.overshoot_pct)} % "
                   f"(linear {_fmt(r.linear_overshoot_pct)} %); saturated for "
                   f"{_fmt(r.saturated_time_s)} s.")
        if s.load is not None:
            caption += (f" Load step: peak {_fmt(s.load.peak)} (linear "
                        f"{_fmt(s.load.linear_peak)}), recovered after "
                        f"{_fmt(s.load.recovery_time_s)} s (linear "
                        f"{_fmt(s.load.linear_recovery_time_s)} s).")
        if s.method == "sampled":
            caption += " Values at the sampling instants, held between them."
        if not np.isfinite(r.settling_time_s):
            caption += " The output does not settle within the simulated horizon."
        return Plot(key="saturation", pixels=_pixels(fig), width_in=width_in,
                    height_in=height_in, caption=caption)
