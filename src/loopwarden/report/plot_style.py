"""Shared figure helpers for the PDF review: size, colours, matplotlib settings, the
:class:`Plot` and :class:`Raster` results, axes styling and presentation arithmetic
(dB, degrees, log interpolation).
"""

from __future__ import annotations

import io
import math
import zlib
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from numpy.typing import NDArray

from ..analysis.results import LoopAnalysis
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
