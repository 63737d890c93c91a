"""Pole-zero maps: closed-loop poles and zeros in s or z (unit circle and zoom for sampled
loops), open-loop poles and zeros where the loop has a model.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from numpy.typing import NDArray

from ..analysis.results import LoopAnalysis, SlowPair
from .plot_style import (
    _RC,
    C_FAIL,
    C_MAIN,
    C_MARK,
    C_SECOND,
    Plot,
    _figure,
    _fmt,
    _no_data,
    _pixels,
    _place,
    _style,
)


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
