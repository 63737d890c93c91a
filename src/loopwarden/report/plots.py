"""Figures for the PDF review, drawn with matplotlib (Agg, no pyplot, no global state).

Every curve and marker comes from the :class:`~loopwarden.analysis.results.LoopAnalysis`
the analysis computed; nothing here solves for a margin, a crossing or a pole.  The only
arithmetic is presentation: dB and degrees, the design's frequency unit, the pointwise
S = 1/(1 + L) and T = L/(1 + L) of the stored open-loop curve, the conjugate half of the
Nyquist curve, and the tail exponential r·e^(p·t) of a slow pair the analysis found.

Each ``*_figure`` function returns a :class:`Plot`: PNG bytes (deterministic: fixed DPI,
no metadata) with the size it is meant to be printed at.
"""

from __future__ import annotations

import io
import math
import zlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from numpy.typing import NDArray

from ..analysis.results import GainCrossing, LoopAnalysis, Margins, PhaseCrossing, SlowPair
from ..design.model import Design

#: Print resolution of every figure (the issue asks for ≥ 200 dpi raster plots).
DPI = 200
#: Width of a full-width figure on an A4 page with 20 mm margins, in inches.
FULL_WIDTH_IN = 6.7

# One restrained palette for every figure (colour-blind safe: blue / orange / grey).
C_MAIN = "#1f4e79"
C_SECOND = "#c55a11"
C_MARK = "#7f7f7f"
C_FAIL = "#b00020"
C_BAND = "#2e7d32"

_RC = {
    "font.size": 7.5,
    "axes.titlesize": 8.5,
    "axes.labelsize": 7.5,
    "xtick.labelsize": 7,
    "ytick.labelsize": 7,
    "legend.fontsize": 6.8,
    "axes.linewidth": 0.6,
    "lines.linewidth": 1.2,
    # A fixed title height: matplotlib's automatic placement measures every tick label of
    # the axes at each draw (a quarter of a figure's time) only to find nothing above the
    # top spine, where the title goes anyway.
    "axes.titley": 1.0,
}


@dataclass(frozen=True, slots=True, kw_only=True)
class Plot:
    """One rendered figure: its pixels and the size it is printed at.

    ``pixels`` is the RGB raster at :data:`DPI`; :attr:`png` encodes it on demand (the PDF
    embeds the raster directly, so encoding a PNG there would be wasted work).
    """

    key: str                    # "bode", "nyquist", ...
    pixels: Raster
    width_in: float
    height_in: float
    caption: str

    @property
    def png(self) -> bytes:
        """PNG bytes without text chunks: the same figure gives the same bytes."""
        buf = io.BytesIO()
        self.pixels.image().save(buf, format="PNG", dpi=(DPI, DPI), compress_level=6)
        return buf.getvalue()


@dataclass(frozen=True, slots=True)
class Raster:
    """An 8-bit RGB raster: ``rgb`` holds width·height·3 bytes, row by row.

    ``flate`` is ``rgb`` zlib-compressed, as a PDF image stream holds it (FlateDecode),
    made where the figure is drawn: in a worker process when the figures are drawn in
    parallel (see :func:`all_variant_plots`), not in the process laying out the PDF.
    """

    width_px: int
    height_px: int
    rgb: bytes
    flate: bytes = field(default=b"", repr=False, compare=False)

    def flate_stream(self) -> bytes:
        """``rgb`` compressed for a PDF FlateDecode image stream."""
        return self.flate or zlib.compress(self.rgb)

    def image(self) -> Any:
        """The raster as a PIL image."""
        from PIL import Image as PILImage

        return PILImage.frombytes("RGB", (self.width_px, self.height_px), self.rgb)


@dataclass(frozen=True, slots=True)
class FrequencyUnit:
    """How frequencies are shown: rad/s internally, the design's unit on paper."""

    label: str                  # "rad/s" or "Hz"
    per_rad_s: float            # multiply a rad/s value by this to get the shown unit

    @classmethod
    def of(cls, design: Design) -> FrequencyUnit:
        if design.frequency_unit.lower() == "hz":
            return cls("Hz", 1.0 / (2.0 * math.pi))
        return cls("rad/s", 1.0)

    def show(self, w_rad_s: float) -> float:
        return w_rad_s * self.per_rad_s


# --------------------------------------------------------------------------- helpers
def _figure(width_in: float, height_in: float) -> Figure:
    # A bare Figure with its own Agg canvas: no pyplot figure registry, nothing global.
    fig = Figure(figsize=(width_in, height_in), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


def _place(fig: Figure, *, left: float = 0.62, right: float = 0.14, top: float = 0.3,
           bottom: float = 0.42, rows: int = 1, cols: int = 1, hgap: float = 0.1,
           wgap: float = 0.6) -> None:
    """Fixed margins and gaps in inches (tight_layout costs more than the drawing)."""
    w, h = fig.get_size_inches()
    axes_h = (h - top - bottom - (rows - 1) * hgap) / rows
    axes_w = (w - left - right - (cols - 1) * wgap) / cols
    fig.subplots_adjust(left=left / w, right=1 - right / w, top=1 - top / h,
                        bottom=bottom / h, hspace=hgap / axes_h, wspace=wgap / axes_w)


def _pixels(fig: Figure) -> Raster:
    """Draw the figure and keep its RGB raster.

    RGB rather than matplotlib's RGBA: the figures are opaque, and an alpha channel would
    make reportlab write a second (mask) image for every figure.
    """
    fig.canvas.draw()
    rgba = np.asarray(fig.canvas.buffer_rgba())  # type: ignore[attr-defined]
    h, w = rgba.shape[:2]
    rgb = np.ascontiguousarray(rgba[..., :3]).tobytes()
    return Raster(width_px=w, height_px=h, rgb=rgb, flate=zlib.compress(rgb))


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _decade(x: float, _pos: int) -> str:
    """Log-axis label 10ⁿ in plain text (mathtext costs more than the rest of the tick)."""
    if x <= 0:
        return ""
    e = math.log10(x)
    if abs(e - round(e)) > 1e-6:
        return ""
    return "10" + str(int(round(e))).translate(_SUPERSCRIPT)


def _minor_log_grid(ax: Axes, which: str) -> None:
    """Faint lines at 2× and 5× each decade, drawn as one collection.

    Minor ticks would do the same, but every tick is several artists and drawing them took
    a fifth of the time of a figure.
    """
    lo, hi = (ax.get_xlim() if which == "x" else ax.get_ylim())
    data = ax.dataLim.intervalx if which == "x" else ax.dataLim.intervaly
    lo, hi = min(lo, hi, *data), max(lo, hi, *data)
    if not (lo > 0 and math.isfinite(lo) and math.isfinite(hi)):
        return
    decades = range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1)
    at = [m * 10.0 ** d for d in decades for m in (2.0, 5.0)]
    from matplotlib.collections import LineCollection

    if which == "x":
        segments = [((v, 0.0), (v, 1.0)) for v in at]
        transform = ax.get_xaxis_transform()
    else:
        segments = [((0.0, v), (1.0, v)) for v in at]
        transform = ax.get_yaxis_transform()
    lines = LineCollection(segments, colors="#ececec", linewidths=0.3, zorder=0,
                           transform=transform)
    ax.add_collection(lines, autolim=False)      # grid lines must not widen the view


def _style(ax: Axes) -> None:
    from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

    for axis, scale, which in ((ax.xaxis, ax.get_xscale(), "x"),
                               (ax.yaxis, ax.get_yscale(), "y")):
        if scale == "log":
            axis.set_major_locator(LogLocator(base=10.0, numticks=12))
            axis.set_major_formatter(FuncFormatter(_decade))
            axis.set_minor_locator(NullLocator())
            _minor_log_grid(ax, which)
    ax.grid(True, which="major", linewidth=0.45, color="#d0d0d0")
    ax.tick_params(length=2.5, width=0.5)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _no_data(ax: Axes, text: str) -> None:
    ax.text(0.5, 0.5, text, ha="center", va="center", transform=ax.transAxes,
            fontsize=8, color=C_MARK, wrap=True)
    ax.set_xticks([])
    ax.set_yticks([])


def _db(x: NDArray[np.float64]) -> NDArray[np.float64]:
    # Exact zeros of |L| would give -inf dB; clip far below any plotted range.
    return 20.0 * np.log10(np.maximum(x, 1e-300))


def _fmt(x: float, digits: int = 3) -> str:
    if math.isinf(x):
        return "∞" if x > 0 else "−∞"
    if x == 0:
        return "0"
    mag = math.floor(math.log10(abs(x)))
    if -3 <= mag < 5:
        decimals = max(0, digits - 1 - mag)
        text = f"{x:.{decimals}f}"
    else:
        text = f"{x:.{digits - 1}e}"
    return text.replace("-", "−")


def _phase_deg(analysis: LoopAnalysis) -> NDArray[np.float64]:
    """Continuous phase of the stored L(jω) in degrees, on the branch that starts near
    −90°·(system type) at the lowest plotted frequency (the usual Bode convention)."""
    assert analysis.curves is not None
    ph = np.degrees(np.unwrap(np.angle(analysis.curves.open_loop)))
    target = -90.0 * analysis.tracking.system_type
    ph = ph + 360.0 * round((target - ph[0]) / 360.0)
    return ph


def _label(ax: Axes, x: float, y: float, text: str, color: str) -> None:
    """A margin label beside its arrow, on a white patch so the curve stays legible."""
    lo, hi = ax.get_xlim()
    right = math.log(x) < 0.5 * (math.log(lo) + math.log(hi)) if lo > 0 else True
    ax.annotate(text, (x, y), textcoords="offset points", xytext=(5 if right else -5, 0),
                ha="left" if right else "right", va="center", color=color, fontsize=6.8,
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none",
                      "alpha": 0.85})


def _interp_log(w_rad_s: NDArray[np.float64], y: NDArray[np.float64], at_rad_s: float) -> float:
    return float(np.interp(math.log(at_rad_s), np.log(w_rad_s), y))


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
        caption += coverage_caption
        return Plot(key="bode", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=caption)


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
        caption += coverage_caption
        return Plot(key="sensitivity", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=caption)


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

        tr = curves.ramp_error.time_s
        er = curves.ramp_error.value
        if tr.size >= 2:
            ax_r.plot(tr, er, color=C_MAIN, label="e(t) = t − y(t), r = t", **draw)
            final = metrics.ramp_error_final
            ax_r.axhline(final, color=C_MARK, linewidth=0.6, linestyle="--",
                         label=f"e at end of run {_fmt(final)}")
            if math.isfinite(analysis.tracking.ramp_error):
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


def pole_zero_figure(analysis: LoopAnalysis, zeros: NDArray[np.complex128], *,
                     open_loop_poles: NDArray[np.complex128] | None = None,
                     width_in: float = 3.2, height_in: float = 3.15) -> Plot:
    """Closed-loop poles and zeros; each slow pair ringed, with a zoomed view when small.

    ``zeros`` are the closed-loop zeros from reference to output as read from the model
    (zeros of C·P and poles of the sensor); the poles are the analysis's closed-loop poles.
    For a loop with transport delay the poles are the roots right of the search line,
    which is drawn dashed.  Without closed-loop poles (a measured plant) the open-loop
    poles of the rational part (``open_loop_poles``, as read) are drawn instead.
    """
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = _figure(width_in, height_in)
        poles = np.asarray(analysis.stability.closed_loop_poles, dtype=complex)
        pairs = analysis.slow_tail.pairs if analysis.slow_tail is not None else ()
        if poles.size == 0:
            return _open_loop_map(fig, analysis, zeros, open_loop_poles, width_in, height_in)
        if getattr(analysis.stability, "domain", "s") == "z":
            return _z_plane_map(fig, analysis, poles, zeros, width_in, height_in)
        search = analysis.stability.search_abscissa_rad_s
        line_drawn = False
        span = float(np.max(np.abs(np.concatenate([poles, zeros])))) or 1.0
        zoom = None
        if pairs:
            near = max(max(abs(p.pole), abs(p.zero)) for p in pairs)
            if near < 0.2 * span:
                zoom = 2.5 * near
        if zoom is not None:
            ax_all, ax_zoom = fig.subplots(2, 1, height_ratios=(1, 1))
            views = ((ax_all, 1.15 * span), (ax_zoom, zoom))
        else:
            ax_all = fig.subplots()
            views = ((ax_all, 1.15 * span),)
        for ax, r in views:
            ax.axhline(0.0, color=C_MARK, linewidth=0.5)
            ax.axvline(0.0, color=C_MARK, linewidth=0.5)
            ax.plot(poles.real, poles.imag, "x", color=C_MAIN, markersize=5, mew=1.2,
                    label="closed-loop poles")
            if zeros.size:
                ax.plot(zeros.real, zeros.imag, "o", mfc="none", color=C_SECOND,
                        markersize=5, mew=1.0, label="closed-loop zeros")
            for pair in pairs:
                # A ring marker stays round whatever the axes' aspect ratio.
                cx = (pair.pole.real + pair.zero.real) / 2.0
                cy = (pair.pole.imag + pair.zero.imag) / 2.0
                ax.plot([cx], [cy], "o", mfc="none", color=C_FAIL, markersize=15, mew=1.0)
            xlim = _pz_limits(poles, zeros, r)[0]
            if search is not None and xlim[0] <= -search <= xlim[1]:
                ax.axvline(-search, color=C_MARK, linewidth=0.8, linestyle="--")
                line_drawn = True
            ax.set_xlim(*xlim)
            ax.set_ylim(*_pz_limits(poles, zeros, r)[1])
            ax.set_ylabel("Im s (rad/s)")
            _style(ax)
        views[-1][0].set_xlabel("Re s (1/s)")
        title = f"Closed-loop poles and zeros — {analysis.variant}"
        if len(title) > 34:                 # a long variant name would run off the axes
            title = f"Closed-loop poles and zeros\n{analysis.variant}"
        ax_all.set_title(title, loc="left")
        # No legend: it would sit on roots; the caption names the markers.
        if zoom is not None:
            views[-1][0].set_title("near the origin (slow pairs ringed)", loc="left")
        _place(fig, left=0.66, rows=2 if zoom is not None else 1, hgap=0.6)
        caption = f"Closed-loop poles (×) and zeros (○), {analysis.variant}."
        if search is not None:
            line = f"Re s = {-search:.4g}" + ("" if line_drawn else ", left of this view")
            caption += (f" Transport delay: every closed-loop root right of the search line "
                        f"({'dashed, ' if line_drawn else ''}{line}) is drawn (counted by the "
                        "argument principle); infinitely many more lie left of it.")
        if pairs:
            caption += (" Red rings: slow closed-loop poles nearly cancelled by a zero; "
                        "their small residue decays slowly.")
        return Plot(key="poles", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=caption)


def _pz_limits(poles: NDArray[np.complex128], zeros: NDArray[np.complex128],
               r: float) -> tuple[tuple[float, float], tuple[float, float]]:
    """x and y limits of a pole-zero view of size ``r``: every root within ``r`` stays
    inside, imaginary parts included (lightly damped pairs sit far above the real axis)."""
    roots = np.concatenate([poles, zeros])
    inside = roots[np.abs(roots) <= r * 1.0001] if roots.size else roots
    right = float(np.max(inside.real)) if inside.size else 0.0
    x = (-r, max(0.25 * r, 1.15 * right if right > 0 else 0.25 * r))
    top = float(np.max(np.abs(inside.imag))) if inside.size else 0.0
    y_half = max(0.75 * r, 1.4 * top) if top > 0.5 * r else 0.75 * r   # room for the legend
    return x, (-y_half, y_half)


#: The z-plane view reaches at most this far from the origin: the unit circle must stay
#: readable; roots further out (a sampling zero far on the negative real axis, say) are
#: named in the caption and pointed at from the edge of the view.
Z_VIEW_MAX = 2.5


def z_plane_view(poles: NDArray[np.complex128], zeros: NDArray[np.complex128]
                 ) -> tuple[float, NDArray[np.complex128]]:
    """Half-width of the z-plane view and the roots that lie outside it.

    The view holds the unit circle with a margin and every root within
    :data:`Z_VIEW_MAX` of the origin.
    """
    roots = np.concatenate([poles, zeros])
    near = roots[np.abs(roots) <= Z_VIEW_MAX]
    r = max(1.25, 1.1 * float(np.max(np.abs(near)))) if near.size else 1.25
    return r, roots[np.abs(roots) > r]


def _z_plane_map(fig: Figure, analysis: LoopAnalysis, poles: NDArray[np.complex128],
                 zeros: NDArray[np.complex128], width_in: float, height_in: float) -> Plot:
    """Closed-loop poles and zeros of a sampled loop in the z-plane, with the unit circle."""
    ax = fig.subplots()
    pairs = analysis.slow_tail.pairs if analysis.slow_tail is not None else ()
    theta = np.linspace(0.0, 2.0 * math.pi, 361)
    ax.fill(np.cos(theta), np.sin(theta), color="#eef3f9", linewidth=0, zorder=0)
    ax.plot(np.cos(theta), np.sin(theta), color=C_MAIN, linewidth=0.8, linestyle="-",
            label="unit circle |z| = 1")
    ax.axhline(0.0, color=C_MARK, linewidth=0.5)
    ax.axvline(0.0, color=C_MARK, linewidth=0.5)
    finite = zeros[np.isfinite(zeros)] if zeros.size else zeros
    r, outside = z_plane_view(poles, finite)
    ax.plot(poles.real, poles.imag, "x", color=C_MAIN, markersize=5, mew=1.2,
            label="closed-loop poles")
    if finite.size:
        ax.plot(finite.real, finite.imag, "o", mfc="none", color=C_SECOND, markersize=5,
                mew=1.0, label="closed-loop zeros")
    for pair in pairs:
        ax.plot([(pair.pole.real + pair.zero.real) / 2.0],
                [(pair.pole.imag + pair.zero.imag) / 2.0], "o", mfc="none", color=C_FAIL,
                markersize=15, mew=1.0)
    if pairs:
        _z_zoom(ax, poles, finite, pairs)
    for root in outside:
        # An arrow from inside the view toward the root, at the edge it leaves through.
        u = root / abs(root)
        ax.annotate(f"{'pole' if root in poles else 'zero'} at\n{_fmt_z(root)}",
                    xy=(0.97 * r * u.real, 0.97 * r * u.imag),
                    xytext=(0.8 * r * u.real, 0.8 * r * u.imag + 0.55 * r * (1 - abs(u.imag))),
                    ha="center", va="center", fontsize=6.2, color=C_SECOND,
                    arrowprops={"arrowstyle": "->", "color": C_SECOND, "lw": 0.8})
    for z_at, label, dx in ((1.0, "ω = 0", 4), (-1.0, "ω = π/T", -4)):
        ax.annotate(label, (z_at, 0.0), textcoords="offset points", xytext=(dx, -7),
                    ha="left" if dx > 0 else "right", va="top", fontsize=6.0, color=C_MARK)
    ax.set_xlim(-r, r)
    ax.set_ylim(-r, r)
    ax.set_aspect("equal")
    ax.set_xlabel("Re z")
    ax.set_ylabel("Im z")
    _style(ax)
    ax.set_title(f"Closed-loop poles and zeros (z) — {analysis.variant}", loc="left")
    _place(fig, left=0.5)
    caption = (f"Closed-loop poles (×) and zeros (○) of the sampled loop in the z-plane, "
               f"{analysis.variant}: stable when every pole lies inside the unit circle "
               "(shaded). z = 1 is ω = 0, z = −1 the Nyquist frequency.")
    if outside.size:
        caption += (" Outside the view: "
                    + ", ".join(f"{'pole' if x in poles else 'zero'} at z = {_fmt_z(x)}"
                                for x in outside) + ".")
    if pairs:
        caption += (" Red rings: slow poles nearly cancelled by a zero; the inset enlarges "
                    "the neighbourhood of z = 1 where they sit.")
    return Plot(key="poles", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                caption=caption)


def _z_zoom(ax: Axes, poles: NDArray[np.complex128], zeros: NDArray[np.complex128],
            pairs: Sequence[SlowPair]) -> None:
    """An inset around z = 1 (slow roots crowd there), with the unit circle and the pairs."""
    half = 2.5 * max(max(abs(p.pole - 1.0), abs(p.zero - 1.0)) for p in pairs)
    if not half > 0:
        return
    ins = ax.inset_axes((0.14, 0.6, 0.34, 0.34))
    theta = np.linspace(-4.0 * half, 4.0 * half, 200)
    ins.plot(np.cos(theta), np.sin(theta), color=C_MAIN, linewidth=0.8)
    ins.plot(poles.real, poles.imag, "x", color=C_MAIN, markersize=4, mew=1.0)
    if zeros.size:
        ins.plot(zeros.real, zeros.imag, "o", mfc="none", color=C_SECOND, markersize=4,
                 mew=0.9)
    for pair in pairs:
        ins.plot([(pair.pole.real + pair.zero.real) / 2.0],
                 [(pair.pole.imag + pair.zero.imag) / 2.0], "o", mfc="none", color=C_FAIL,
                 markersize=11, mew=0.9)
    ins.set_xlim(1.0 - half, 1.0 + 0.4 * half)
    ins.set_ylim(-0.7 * half, 0.7 * half)
    ins.tick_params(labelsize=5.0)
    ins.set_title("near z = 1", fontsize=6.0, loc="left")


def _fmt_z(z: complex) -> str:
    if z.imag == 0:
        return _fmt(z.real)
    return f"{_fmt(z.real)} {'+' if z.imag > 0 else '−'} j{_fmt(abs(z.imag))}"


def _open_loop_map(fig: Figure, analysis: LoopAnalysis, zeros: NDArray[np.complex128],
                   poles: NDArray[np.complex128] | None, width_in: float,
                   height_in: float) -> Plot:
    """The open-loop pole-zero map, for loops whose closed-loop poles are not computed."""
    ax = fig.subplots()
    if poles is None or poles.size + zeros.size == 0:
        why = ("measured plant: no poles or zeros" if poles is None else
               "transport delay")
        _no_data(ax, f"closed-loop poles are not computed\n({why});\nstability follows "
                     "from the Nyquist count")
        ax.set_title(f"Closed-loop poles — {analysis.variant}", loc="left")
        _place(fig, left=0.2, right=0.2, bottom=0.2)
        return Plot(key="poles", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                    caption=f"Pole-zero map, {analysis.variant}: not available ({why}).")
    r = 1.15 * (float(np.max(np.abs(np.concatenate([poles, zeros])))) or 1.0)
    ax.axhline(0.0, color=C_MARK, linewidth=0.5)
    ax.axvline(0.0, color=C_MARK, linewidth=0.5)
    ax.plot(poles.real, poles.imag, "x", color=C_MARK, markersize=5, mew=1.2,
            label="open-loop poles (C·P·H)")
    if zeros.size:
        ax.plot(zeros.real, zeros.imag, "o", mfc="none", color=C_SECOND, markersize=5,
                mew=1.0, label="closed-loop zeros")
    ax.set_xlim(-r, max(0.25 * r, 1.15 * float(np.max(poles.real))))
    ax.set_ylim(-0.75 * r, 0.75 * r)
    ax.set_xlabel("Re s (1/s)")
    ax.set_ylabel("Im s (rad/s)")
    ax.text(0.98, 0.03, "closed-loop poles not computed:\ntransport delay (Nyquist count)",
            transform=ax.transAxes, ha="right", va="bottom", fontsize=6.5, color=C_MARK)
    _style(ax)
    ax.set_title(f"Open-loop poles and zeros — {analysis.variant}", loc="left")
    _place(fig, left=0.7)
    return Plot(key="poles", pixels=_pixels(fig), width_in=width_in, height_in=height_in,
                caption=f"Open-loop poles (×) and closed-loop zeros (○) of the rational part, "
                        f"{analysis.variant}. With a transport delay the closed loop has "
                        "infinitely many poles; stability is decided by the Nyquist count "
                        "instead.")


def closed_loop_zeros(analysis: LoopAnalysis) -> NDArray[np.complex128]:
    """Zeros of r → y as the analysis read them from the model (empty for a measured plant)."""
    if analysis.pole_zero is None:
        return np.zeros(0, dtype=complex)
    return np.asarray(analysis.pole_zero.closed_loop_zeros, dtype=complex)


def _open_loop_poles(analysis: LoopAnalysis) -> NDArray[np.complex128] | None:
    """Poles of L as the analysis read them (shown only for delay loops); None when measured."""
    if analysis.pole_zero is None:
        return None
    return np.asarray(analysis.pole_zero.open_loop_poles, dtype=complex)


#: Figures that need a model of the plant, with why a measured plant has none of them.
MODEL_FIGURES = {
    "poles": "A pole-zero map needs the plant's poles and zeros, and a measured frequency "
             "response has none",
    "time": "Step and ramp responses need a model to simulate, and a frequency response "
            "known on a finite range does not determine one",
}


def _figure_keys(analysis: LoopAnalysis) -> tuple[str, ...]:
    """The figures of one variant in page order (see :func:`variant_plots`)."""
    if analysis.coverage is not None:           # measured plant
        return ("bode", "nyquist", "sensitivity")
    return ("bode", "nyquist", "poles", "time", "sensitivity")


def _one_plot(design: Design, analysis: LoopAnalysis, key: str) -> Plot:
    """The figure ``key`` of one variant."""
    unit = FrequencyUnit.of(design)
    if key == "bode":
        return bode_figure(analysis, unit)
    if key == "nyquist":
        return nyquist_figure(analysis)
    if key == "poles":
        return pole_zero_figure(analysis, closed_loop_zeros(analysis),
                                open_loop_poles=_open_loop_poles(analysis))
    if key == "time":
        return time_figure(analysis)
    return sensitivity_figure(
        analysis, unit, reference_band_rad_s=design.requirements.reference_band_rad_s)


def variant_plots(design: Design, analysis: LoopAnalysis) -> dict[str, Plot]:
    """Every figure of one variant, keyed by name, in page order.

    A measured plant has no ``poles`` or ``time`` figure (see :data:`MODEL_FIGURES`):
    an empty frame would suggest something was drawn and lost.
    """
    return {key: _one_plot(design, analysis, key) for key in _figure_keys(analysis)}


#: Environment variable: how many processes draw the figures of a review (1: this one).
FIGURE_JOBS_ENV = "LOOPWARDEN_FIGURE_JOBS"
#: Below this many figures the worker start-up costs more than it saves.
_MIN_PARALLEL_FIGURES = 6
#: What a forked worker draws: (design, analyses, tasks), set in the parent before the fork.
_WORK: tuple[Design, Sequence[LoopAnalysis], list[tuple[int, str]]] | None = None


def _draw_task(i: int) -> Plot:
    assert _WORK is not None
    design, analyses, tasks = _WORK
    n, key = tasks[i]
    return _one_plot(design, analyses[n], key)


def _figure_jobs(count: int) -> int:
    """Processes to draw ``count`` figures: 1 unless there are several and spare cores."""
    import os
    import sys

    text = os.environ.get(FIGURE_JOBS_ENV, "").strip()
    if text.isdigit() and int(text) >= 1:
        jobs = int(text)
    else:
        try:
            jobs = len(os.sched_getaffinity(0))
        except AttributeError:                  # not Linux
            jobs = os.cpu_count() or 1
    if count < _MIN_PARALLEL_FIGURES or not sys.platform.startswith("linux"):
        return 1
    import multiprocessing
    import threading

    if multiprocessing.current_process().daemon:   # a daemon may not have children
        return 1
    if threading.active_count() > 1:    # forking a threaded process can deadlock the child
        return 1
    return max(1, min(jobs, 4, count))


def all_variant_plots(design: Design, analyses: Sequence[LoopAnalysis]
                      ) -> list[dict[str, Plot]]:
    """:func:`variant_plots` of every analysis, in order: the same figures, drawn in forked
    worker processes when there are several variants' worth and more than one core.

    Drawing is matplotlib's pure-Python artist walk, one core per figure; on two cores the
    fifteen figures of three variants take about half the time.  The workers are forked
    (they share the imported matplotlib and the analyses, nothing is pickled but the
    finished rasters).  ``LOOPWARDEN_FIGURE_JOBS=1`` draws everything in this process.
    """
    tasks = [(n, key) for n, a in enumerate(analyses) for key in _figure_keys(a)]
    jobs = _figure_jobs(len(tasks))
    plots: list[Plot] | None = None
    if jobs > 1:
        plots = _draw_forked(design, analyses, tasks, jobs)
    if plots is None:
        plots = [_one_plot(design, analyses[n], key) for n, key in tasks]
    out: list[dict[str, Plot]] = [{} for _ in analyses]
    for (n, key), plot in zip(tasks, plots, strict=True):
        out[n][key] = plot
    return out


def _draw_forked(design: Design, analyses: Sequence[LoopAnalysis],
                 tasks: list[tuple[int, str]], jobs: int) -> list[Plot] | None:
    """The figures of ``tasks`` drawn by ``jobs`` forked processes; None when no process
    could be started (the caller then draws them itself)."""
    import contextlib
    import multiprocessing
    import sys

    global _WORK
    # The time plots cost about twice the others: hand them out first.
    order = sorted(range(len(tasks)), key=lambda i: tasks[i][1] != "time")
    for stream in (sys.stdout, sys.stderr):      # a child must not re-flush our buffers
        with contextlib.suppress(OSError, ValueError, AttributeError):
            stream.flush()
    _WORK = (design, analyses, tasks)
    try:
        ctx = multiprocessing.get_context("fork")
        with ctx.Pool(processes=jobs) as pool:
            drawn = pool.map(_draw_task, order, chunksize=1)
    except OSError:                              # no process could be started
        return None
    finally:
        _WORK = None
    plots: list[Plot | None] = [None] * len(tasks)
    for i, plot in zip(order, drawn, strict=True):
        plots[i] = plot
    return [p for p in plots if p is not None]
