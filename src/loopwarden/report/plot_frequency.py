"""Frequency-domain figures: Bode (with the marked crossings, measured range and Nyquist
frequency) and Nyquist, with the frequency view and markers the sensitivity figure
(:mod:`.plot_sensitivity`) shares.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from matplotlib.axes import Axes
from numpy.typing import NDArray

from ..analysis.results import GainCrossing, LoopAnalysis, Margins, PhaseCrossing
from .plot_style import (
    _RC,
    C_FAIL,
    C_MAIN,
    C_MARK,
    C_SECOND,
    FULL_WIDTH_IN,
    FrequencyUnit,
    Plot,
    _db,
    _figure,
    _fmt,
    _interp_log,
    _label,
    _no_data,
    _phase_deg,
    _pixels,
    _place,
    _style,
)

# --------------------------------------------------------------------------- frequency view
#: A measured response is drawn with this factor of unmeasured axis on either side, so that
#: the ends of the sweep are visible as ends (and not mistaken for the ends of the plot).
MEASURED_MARGIN = 10.0 ** 0.3


def frequency_view(analysis: LoopAnalysis, unit: FrequencyUnit) -> tuple[float, float]:
    """The frequency axis of the Bode and sensitivity figures, in the shown unit.

    The stored curve's range, except: a sampled loop's axis ends exactly at the Nyquist
    frequency π/T (L(e^{jωT}) repeats beyond it, so nothing further exists to draw); a
    measured loop's axis extends :data:`MEASURED_MARGIN` beyond each end of the sweep.
    """
    assert analysis.curves is not None
    w = analysis.curves.frequency_rad_s
    lo, hi = float(w[0]), float(w[-1])
    if analysis.sampling is not None:
        hi = analysis.sampling.nyquist_rad_s
    if analysis.coverage is not None:
        lo = min(lo, analysis.coverage.frequency_min_rad_s) / MEASURED_MARGIN
        hi = max(hi, analysis.coverage.frequency_max_rad_s) * MEASURED_MARGIN
    return unit.show(lo), unit.show(hi)


def _mark_nyquist_frequency(analysis: LoopAnalysis, unit: FrequencyUnit,
                            axes: Sequence[Axes]) -> None:
    """A sampled loop: the axis ends at π/T; say so at the end of the axis."""
    if analysis.sampling is None:
        return
    fn = unit.show(analysis.sampling.nyquist_rad_s)
    for ax in axes:
        ax.axvline(fn, color=C_FAIL, linewidth=0.9, linestyle="-.")
    axes[0].annotate(f"Nyquist frequency\nπ/T = {fn:.4g} {unit.label}", (fn, 1.0),
                     xycoords=("data", "axes fraction"), xytext=(-4, -4),
                     textcoords="offset points", ha="right", va="top", fontsize=6.5,
                     color=C_FAIL, bbox={"boxstyle": "round,pad=0.15", "fc": "white",
                                         "ec": "none", "alpha": 0.85})


def uncovered_sides(analysis: LoopAnalysis) -> dict[str, str]:
    """Checks the sweep leaves undecided → "above" or "below" (the side of the sweep
    where the crossing may lie), or "" when the side is not known.

    Read from the coverage the analysis recorded: |L| ≥ 1 at the top of the sweep means a
    gain crossover above it; otherwise a gain margin left open has its phase crossover
    above the sweep, and the other margins a gain crossover below it.
    """
    cov = analysis.coverage
    if cov is None:
        return {}
    out = {}
    for check in cov.uncovered:
        if cov.loop_gain_at_max >= 1.0 or check == "gain_margin":
            out[check] = "above"
        elif cov.loop_gain_at_min <= 1.0:
            out[check] = "below"
        else:
            out[check] = ""
    return out


def _mark_measured_range(analysis: LoopAnalysis, unit: FrequencyUnit,
                         axes: Sequence[Axes]) -> str:
    """Shade the measured range, hatch what lies outside it, flag crossings beyond it.

    Returns the caption sentence that explains the marks.
    """
    cov = analysis.coverage
    if cov is None:
        return ""
    lo, hi = unit.show(cov.frequency_min_rad_s), unit.show(cov.frequency_max_rad_s)
    view_lo, view_hi = frequency_view(analysis, unit)
    for i, ax in enumerate(axes):
        ax.axvspan(lo, hi, color="#eef3f9", linewidth=0, zorder=0,
                   label="measured range" if i == 0 else None)
        for a, b in ((view_lo, lo), (hi, view_hi)):
            ax.axvspan(a, b, facecolor="none", edgecolor="#c8c8c8", hatch="////",
                       linewidth=0, zorder=0)
        for edge in (lo, hi):
            ax.axvline(edge, color=C_MARK, linewidth=0.7)
    top = axes[0]
    for x, ha in ((math.sqrt(view_lo * lo), "center"), (math.sqrt(hi * view_hi), "center")):
        top.text(x, 0.5, "not measured", transform=top.get_xaxis_transform(), rotation=90,
                 ha=ha, va="center", fontsize=6.3, color=C_MARK,
                 bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none",
                       "alpha": 0.9})
    sides = uncovered_sides(analysis)
    for side in ("above", "below"):
        names = sorted(c for c, s in sides.items() if s == side)
        if not names:
            continue
        x = math.sqrt(hi * view_hi) if side == "above" else math.sqrt(view_lo * lo)
        top.annotate("crossing\nbeyond\nthe sweep?" if side == "above" else
                     "crossing\nbelow\nthe sweep?", (x, 0.97),
                     xycoords=("data", "axes fraction"), ha="center", va="top",
                     fontsize=6.2, color=C_FAIL, fontweight="bold",
                     bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none"})
    caption = (f" Shaded: the measured range of {cov.file}, {_fmt(lo)}–{_fmt(hi)} "
               f"{unit.label} ({cov.points} points); hatched: not measured, nothing is "
               "drawn or assumed there.")
    for side in ("above", "below"):
        names = sorted(c for c, s in sides.items() if s == side)
        if names:
            caption += (f" Not decided by the sweep, a crossing may lie {side} it: "
                        f"{', '.join(names)} (red mark; extend the sweep).")
    unknown = sorted(c for c, s in sides.items() if not s)
    if unknown:
        caption += f" Not decided by the sweep: {', '.join(unknown)}."
    return caption


# --------------------------------------------------------------------------- open loop
#: At most this many gain and phase crossings are marked in a figure (the ones with the
#: smallest margins); a delay makes the phase cross −180° again and again at high frequency.
MAX_MARKED = 4


#: Phase crossings whose gain margin exceeds this are not drawn (unless one sets the
#: figure): a factor of 30 in gain is far from deciding anything.
MARK_GM_DB = 30.0


def marked_crossings(m: Margins) -> tuple[tuple[GainCrossing, ...], tuple[PhaseCrossing, ...]]:
    """The crossings worth drawing: those that set the figures, then the smallest margins.

    Returned in frequency order.  Phase crossings at ω = 0 or ∞ and infinite margins are
    left out (nothing to draw).
    """
    gains = sorted(m.gain_crossings, key=lambda g: (g.frequency_rad_s != m.gain_crossover_rad_s,
                                                    abs(g.phase_margin_deg)))[:MAX_MARKED]
    phases = [p for p in m.phase_crossings
              if 0.0 < p.frequency_rad_s < math.inf and math.isfinite(p.gain_margin_db)
              and (abs(p.gain_margin_db) <= MARK_GM_DB
                   or p.frequency_rad_s == m.phase_crossover_rad_s
                   or p.gain_margin_db == m.gain_margin_lower_db)]
    phases = sorted(phases, key=lambda p: (p.frequency_rad_s != m.phase_crossover_rad_s,
                                           abs(p.gain_margin_db)))[:MAX_MARKED]
    return (tuple(sorted(gains, key=lambda g: g.frequency_rad_s)),
            tuple(sorted(phases, key=lambda p: p.frequency_rad_s)))


def bode_figure(analysis: LoopAnalysis, unit: FrequencyUnit, *,
                width_in: float = FULL_WIDTH_IN, height_in: float = 4.3) -> Plot:
    """Open-loop magnitude (dB) and phase (deg) with the deciding crossings marked."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        ax_m, ax_p = fig.subplots(2, 1, sharex=True)
        curves = analysis.curves
        if curves is None or curves.frequency_rad_s.size < 2:
            _no_data(ax_m, "no frequency response was computed")
            ax_p.set_visible(False)
            return Plot(key="bode", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                        caption="Open-loop frequency response (not available).")
        w = curves.frequency_rad_s
        f = w * unit.per_rad_s
        mag = _db(np.abs(curves.open_loop))
        ph = _phase_deg(analysis)
        m = analysis.margins
        gains, phases = marked_crossings(m)
        ax_m.semilogx(f, mag, color=C_MAIN, label="|L(jω)|")
        ax_m.axhline(0.0, color=C_MARK, linewidth=0.7, linestyle="--")
        ax_p.semilogx(f, ph, color=C_MAIN, label="∠L(jω)")
        ax_m.set_xlim(*frequency_view(analysis, unit))

        # Phase view: up to a decade past the last marked crossing.  Beyond it a delay's
        # phase falls without bound and would squash the interesting part flat.
        marks = [g.frequency_rad_s for g in gains] + [p.frequency_rad_s for p in phases]
        upto = 10.0 * max(marks) if marks else w[-1]
        view = ph[w <= upto] if np.any(w <= upto) else ph
        lo, hi = float(np.min(view)) - 20.0, float(np.max(view)) + 20.0
        lo = min(lo, min((_interp_log(w, ph, g.frequency_rad_s) - g.phase_margin_deg - 20.0
                          for g in gains), default=lo))
        ax_p.set_ylim(lo, hi)
        for k in range(math.floor((lo + 180.0) / 360.0), math.ceil((hi + 180.0) / 360.0) + 1):
            ref = -180.0 + 360.0 * k
            if lo <= ref <= hi:
                ax_p.axhline(ref, color=C_MARK, linewidth=0.7, linestyle="--")

        for gc in gains:
            fc = unit.show(gc.frequency_rad_s)
            phi = _interp_log(w, ph, gc.frequency_rad_s)
            col = C_SECOND if gc.frequency_rad_s == m.gain_crossover_rad_s else C_MARK
            for ax in (ax_m, ax_p):
                ax.axvline(fc, color=col, linewidth=0.6, linestyle=":")
            ax_p.annotate("", xy=(fc, phi), xytext=(fc, phi - gc.phase_margin_deg),
                          arrowprops={"arrowstyle": "<->", "color": col, "lw": 1.0})
            _label(ax_p, fc, phi - gc.phase_margin_deg / 2.0,
                   f"PM {_fmt(gc.phase_margin_deg)}°\n@ {_fmt(fc)} {unit.label}", col)
        for pc in phases:
            fp = unit.show(pc.frequency_rad_s)
            col = C_SECOND if pc.frequency_rad_s == m.phase_crossover_rad_s else C_MARK
            for ax in (ax_m, ax_p):
                ax.axvline(fp, color=col, linewidth=0.6, linestyle=":")
            ax_m.annotate("", xy=(fp, -pc.gain_margin_db), xytext=(fp, 0.0),
                          arrowprops={"arrowstyle": "<->", "color": col, "lw": 1.0})
            _label(ax_m, fp, -pc.gain_margin_db / 2.0,
                   f"GM {_fmt(pc.gain_margin_db)} dB\n@ {_fmt(fp)} {unit.label}", col)

        _mark_nyquist_frequency(analysis, unit, (ax_m, ax_p))
        coverage_caption = _mark_measured_range(analysis, unit, (ax_m, ax_p))

        # Magnitude view: clip the steep ends, but never hide a marked gain-margin arrow.
        need = [0.0] + [-pc.gain_margin_db for pc in phases]
        top = max(min(float(np.max(mag)), 60.0), max(need) + 10.0)
        bottom = min(max(float(np.min(mag)), -60.0), min(need) - 10.0)
        ax_m.set_ylim(bottom, top)
        ax_m.set_ylabel("magnitude (dB)")
        ax_p.set_ylabel("phase (deg)")
        ax_p.set_xlabel(f"frequency ({unit.label})")
        ax_p.yaxis.set_major_locator(matplotlib.ticker.MultipleLocator(
            90.0 if hi - lo <= 720 else 180.0 * math.ceil((hi - lo) / 1440.0)))
        for ax in (ax_m, ax_p):
            _style(ax)
        ax_m.set_title(f"Open loop L = C·P·H — {analysis.variant}", loc="left")
        _place(fig, rows=2, hgap=0.08)
        caption = _bode_caption(analysis, unit, gains, phases)
        caption += coverage_caption
        return Plot(key="bode", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=caption)


def _bode_caption(analysis: LoopAnalysis, unit: FrequencyUnit,
                  gains: Sequence[GainCrossing], phases: Sequence[PhaseCrossing]) -> str:
    """The caption of :func:`bode_figure` (before the measured-range note)."""
    m = analysis.margins
    gm = "∞" if math.isinf(m.gain_margin_db) else f"{_fmt(m.gain_margin_db)} dB"
    pm = "∞" if math.isinf(m.phase_margin_deg) else f"{_fmt(m.phase_margin_deg)}°"
    cov = analysis.coverage
    if cov is not None:
        if "gain_margin" in cov.bounded:
            gm = f"at least {gm} (bound at the top of the sweep)"
        if "gain_margin" in cov.uncovered:
            gm = "not decided by the sweep"
        if "phase_margin" in cov.uncovered:
            pm = "not decided by the sweep"
    omitted = (len(m.gain_crossings) - len(gains)
               + sum(1 for p in m.phase_crossings if 0 < p.frequency_rad_s < math.inf)
               - len(phases))
    caption = (f"Open-loop magnitude and phase, {analysis.variant}. Marked crossings "
               f"carry their phase or gain margin; the ones that set the figures are "
               f"orange: PM {pm}, GM {gm}.")
    if omitted > 0:
        caption += (f" {omitted} further crossing{'s' if omitted != 1 else ''} with larger "
                    "margins not drawn (see the table of crossings).")
    if analysis.sampling is not None:
        caption += (" The frequency axis ends at the Nyquist frequency π/T = "
                    f"{unit.show(analysis.sampling.nyquist_rad_s):.4g} {unit.label} "
                    "(dash-dotted): the sampled response repeats beyond it.")
    return caption


def nyquist_figure(analysis: LoopAnalysis, *, width_in: float = 3.2,
                   height_in: float = 3.15) -> Plot:
    """Nyquist curve near −1 with the unit circle and the Ms circle (centre −1, radius 1/Ms)."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        ax = fig.subplots()
        curves = analysis.curves
        ms = analysis.sensitivity.peak_sensitivity
        ms_decided = (analysis.coverage is None
                      or "peak_sensitivity" not in analysis.coverage.uncovered)
        if curves is None or curves.open_loop.size < 2:
            _no_data(ax, "no frequency response was computed")
        else:
            L = curves.open_loop
            theta = np.linspace(0.0, 2.0 * math.pi, 361)
            ax.plot(np.cos(theta), np.sin(theta), color=C_MARK, linewidth=0.6,
                    linestyle="--", label="unit circle")
            if ms_decided and math.isfinite(ms) and ms > 0:
                r = 1.0 / ms
                ax.fill(-1.0 + r * np.cos(theta), r * np.sin(theta), color=C_FAIL, alpha=0.10,
                        linewidth=0)
                ax.plot(-1.0 + r * np.cos(theta), r * np.sin(theta), color=C_FAIL,
                        linewidth=0.8, label=f"Ms circle, radius 1/Ms = {_fmt(r)}")
            ax.plot(L.real, L.imag, color=C_MAIN, label="L(jω), ω > 0")
            ax.plot(L.real, -L.imag, color=C_MAIN, linewidth=0.7, linestyle="--",
                    label="L(−jω)")
            _direction_arrows(ax, L)
            ax.plot([-1.0], [0.0], marker="+", color=C_FAIL, markersize=8, mew=1.4)
            gains, phases = marked_crossings(analysis.margins)
            for gc in gains:
                phi = math.radians(gc.phase_margin_deg - 180.0)
                ax.plot([math.cos(phi)], [math.sin(phi)], "o", color=C_SECOND, markersize=3)
            for pc in phases:
                ax.plot([-pc.magnitude], [0.0], "s", color=C_SECOND, markersize=3)
            end_note = _nyquist_ends(ax, analysis)
            ax.set_xlim(-3.0, 1.5)
            ax.set_ylim(-2.25, 2.25)
            ax.set_aspect("equal")
            ax.set_xlabel("Re L")
            ax.set_ylabel("Im L")
            ax.legend(loc="lower right", frameon=True, framealpha=0.9, edgecolor="none",
                      fontsize=6.2)
        _style(ax)
        ax.set_title(f"Nyquist — {analysis.variant}", loc="left")
        _place(fig, left=0.5)
        caption = (f"Nyquist curve near −1, {analysis.variant}. The shaded disc (centre −1, "
                   f"radius 1/Ms) is the closest the curve comes to −1: Ms = {_fmt(ms)}. "
                   "Dots: gain crossings on the unit circle; squares: phase crossings.")
        if not ms_decided:
            caption = (f"Nyquist curve near −1, {analysis.variant}. No Ms disc: the measured "
                       "range does not decide how close the curve comes to −1. Dots: gain "
                       "crossings on the unit circle; squares: phase crossings.")
        if curves is not None and curves.open_loop.size >= 2:
            caption += end_note
        return Plot(key="nyquist", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=caption)


def _nyquist_ends(ax: Axes, analysis: LoopAnalysis) -> str:
    """Mark where the curve ends, when it ends at a finite frequency; the caption's words.

    A sampled loop's curve ends at ω = π/T, where L(−1) is real and the curve meets its
    mirror image; a measured loop's curve covers the sweep only.
    """
    assert analysis.curves is not None
    L = analysis.curves.open_loop
    if analysis.sampling is not None:
        ax.plot([L[-1].real], [L[-1].imag], "D", color=C_FAIL, markersize=3.5,
                label="ω = π/T (Nyquist frequency)")
        return (" The curve ends at the Nyquist frequency ω = π/T (red diamond), where it "
                "meets its mirror image on the real axis.")
    if analysis.coverage is not None:
        for k in (0, -1):
            ax.plot([L[k].real], [L[k].imag], "D", color=C_MARK, markersize=3.5,
                    label="ends of the sweep" if k == 0 else None)
        return (f" Drawn over the measured range of {analysis.coverage.file} only (grey "
                "diamonds: its ends); outside it the response is not known.")
    return ""


def _direction_arrows(ax: Axes, L: NDArray[np.complex128]) -> None:
    """Small arrows along the ω > 0 branch, where it is inside the view."""
    inside = np.flatnonzero(np.abs(L + 1.0) < 2.5)
    if inside.size < 4:
        return
    for idx in inside[[inside.size // 3, (2 * inside.size) // 3]]:
        j = min(idx + 1, L.size - 1)
        if j == idx:
            continue
        ax.annotate("", xy=(L[j].real, L[j].imag), xytext=(L[idx].real, L[idx].imag),
                    arrowprops={"arrowstyle": "-|>", "color": C_MAIN, "lw": 0.8,
                                "mutation_scale": 8})


# --------------------------------------------------------------------------- closed loop
