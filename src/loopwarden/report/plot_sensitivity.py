"""The sensitivity figure: |S| and |T| in dB with Ms and Mt marked, each boost stage's band
shaded and its improvement factor below.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
from matplotlib.axes import Axes
from numpy.typing import NDArray

from ..analysis.results import LoopAnalysis
from .plot_frequency import _mark_measured_range, _mark_nyquist_frequency, frequency_view
from .plot_style import (
    _RC,
    C_BAND,
    C_MAIN,
    C_MARK,
    C_SECOND,
    FULL_WIDTH_IN,
    FrequencyUnit,
    Plot,
    _db,
    _figure,
    _fmt,
    _no_data,
    _pixels,
    _place,
    _style,
)


# --------------------------------------------------------------------------- closed loop
def sensitivity_figure(analysis: LoopAnalysis, unit: FrequencyUnit, *,
                       reference_band_rad_s: float | None,
                       width_in: float = FULL_WIDTH_IN, height_in: float = 3.9) -> Plot:
    """|S| and |T| in dB with each boost stage's band shaded; improvement factor below."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        has_boost = bool(analysis.boosts) and analysis.curves is not None
        if has_boost:
            ax_s, ax_i = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
        else:
            ax_s, ax_i = fig.subplots(), None
        curves = analysis.curves
        sens = analysis.sensitivity
        if curves is None or curves.open_loop.size < 2:
            _no_data(ax_s, "no frequency response was computed")
            return Plot(key="sensitivity", pixels=_pixels(fig), width_in=width_in,
                        height_in=height_in, caption="Sensitivity (not available).")
        w = curves.frequency_rad_s
        f = w * unit.per_rad_s
        L = curves.open_loop
        S = 1.0 / (1.0 + L)
        T = L / (1.0 + L)
        shades = ("#c8e6c9", "#e8f5e9")
        for b in analysis.boosts:
            for edge, shade, label in ((b.band_3db_rad_s, shades[1], "≥ 3 dB"),
                                       (b.band_2x_rad_s, shades[0], "≥ 2×")):
                if edge is not None and edge > w[0]:
                    for ax in (ax_s, ax_i):
                        if ax is not None:
                            ax.axvspan(f[0], unit.show(edge), color=shade, linewidth=0,
                                       label=(f"{b.stage_name}: tracking error {label} "
                                              "smaller" if ax is ax_s else None))
        ax_s.semilogx(f, _db(np.abs(S)), color=C_MAIN, label="|S| (error / reference)")
        ax_s.semilogx(f, _db(np.abs(T)), color=C_SECOND, label="|T| (output / reference)")
        ax_s.axhline(0.0, color=C_MARK, linewidth=0.6, linestyle="--")
        ax_s.set_xlim(*frequency_view(analysis, unit))        # shared with ax_i
        framed = [ax for ax in (ax_s, ax_i) if ax is not None]
        _mark_nyquist_frequency(analysis, unit, framed)
        coverage_caption = _mark_measured_range(analysis, unit, framed)
        undecided = analysis.coverage.uncovered if analysis.coverage is not None else {}
        _mark_peaks(ax_s, analysis, unit, w, undecided)
        if reference_band_rad_s is not None:
            for ax in (ax_s, ax_i):
                if ax is not None:
                    ax.axvline(unit.show(reference_band_rad_s), color=C_BAND, linewidth=0.9,
                               linestyle="-.",
                               label="reference band" if ax is ax_s else None)
        # An infinite peak (1 + L = 0 on the axis, e.g. L(0) = −1) sets no limit.
        peaks = [p for p in (sens.peak_sensitivity, sens.peak_complementary, 1.0)
                 if math.isfinite(p)]
        ax_s.set_ylim(max(float(np.nanmin(_db(np.abs(S)))), -80.0) - 3.0,
                      max(10.0, 20.0 * math.log10(max(peaks))) + 6.0)
        ax_s.set_ylabel("magnitude (dB)")
        # Legend in a row above the axes: below, it would sit on the curves.
        ax_s.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), frameon=False, ncol=3,
                    borderaxespad=0.2)
        _style(ax_s)
        bottom = ax_s
        if ax_i is not None:
            for i, b in enumerate(analysis.boosts):
                imp = curves.improvement.get(b.stage)
                if imp is None or imp.size != w.size:
                    continue
                ax_i.semilogx(f, imp, color=(C_MAIN, C_SECOND, C_MARK)[i % 3],
                              label=f"{b.stage_name}: improvement factor")
            ax_i.axhline(2.0, color=C_MARK, linewidth=0.6, linestyle="--")
            ax_i.axhline(math.sqrt(2.0), color=C_MARK, linewidth=0.6, linestyle=":")
            ax_i.axhline(1.0, color=C_MARK, linewidth=0.5)
            ax_i.set_yscale("log")
            ax_i.set_ylabel("error ratio\n|S without| / |S|")
            ax_i.legend(loc="upper right", frameon=False)
            _style(ax_i)
            bottom = ax_i
        bottom.set_xlabel(f"frequency ({unit.label})")
        _place(fig, top=0.42, left=0.66, rows=2 if ax_i is not None else 1,
               hgap=0.08)
        caption = _sensitivity_caption(analysis, undecided)
        caption += coverage_caption
        return Plot(key="sensitivity", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=caption)


def _mark_peaks(ax_s: Axes, analysis: LoopAnalysis, unit: FrequencyUnit,
                w: NDArray[np.float64], undecided: Mapping[str, str]) -> None:
    """Mark Ms and Mt on the |S|, |T| axes of :func:`sensitivity_figure`."""
    sens = analysis.sensitivity
    view_lo, view_hi = (math.log(x) for x in ax_s.get_xlim())

    def where(at_rad_s: float) -> float:         # 0 … 1 across the axis
        return (math.log(max(unit.show(at_rad_s), 1e-300)) - view_lo) / (view_hi - view_lo)

    # Ms right of its marker unless near the right end; Mt on the other side when the
    # two are close (they often are), else wherever there is room.
    ms_right = where(sens.peak_sensitivity_rad_s) < 0.72
    close = abs(where(sens.peak_sensitivity_rad_s)
                - where(sens.peak_complementary_rad_s)) < 0.2
    mt_right = (not ms_right) if close else where(sens.peak_complementary_rad_s) < 0.3
    for peak, at, col, name, check, right in (
            (sens.peak_sensitivity, sens.peak_sensitivity_rad_s, C_MAIN, "Ms",
             "peak_sensitivity", ms_right),
            (sens.peak_complementary, sens.peak_complementary_rad_s, C_SECOND, "Mt",
             "peak_complementary", mt_right)):
        if (math.isfinite(peak) and peak > 0 and w[0] <= at <= w[-1]
                and check not in undecided):
            x = unit.show(at)
            ax_s.plot([x], [20.0 * math.log10(peak)], "v", color=col, markersize=4)
            ax_s.annotate(f"{name} {_fmt(peak)} ({_fmt(20 * math.log10(peak))} dB)",
                          (x, 20.0 * math.log10(peak)), textcoords="offset points",
                          xytext=(6, 4) if right else (-6, 4),
                          ha="left" if right else "right", color=col, fontsize=6.8)


def _sensitivity_caption(analysis: LoopAnalysis, undecided: Mapping[str, str]) -> str:
    """The caption of :func:`sensitivity_figure` (before the measured-range note)."""
    sens = analysis.sensitivity
    ms = ("not decided by the sweep" if "peak_sensitivity" in undecided
          else _fmt(sens.peak_sensitivity))
    mt = ("not decided by the sweep" if "peak_complementary" in undecided
          else _fmt(sens.peak_complementary))
    caption = (f"Sensitivity and complementary sensitivity, {analysis.variant}: "
               f"Ms = {ms}, Mt = {mt}.")
    if analysis.boosts:
        caption += (" Shaded: the reference frequencies where each low-frequency boost "
                    "stage makes the tracking error at least 2× (darker) or 3 dB "
                    "(lighter) smaller than the same loop without it.")
    if analysis.sampling is not None:
        caption += " The frequency axis ends at the Nyquist frequency π/T."
    return caption
