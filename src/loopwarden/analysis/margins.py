"""Gain, phase and delay margins over every crossing of the loop.

Crossings are located as sign changes on :func:`~.frequency_grid.loop_grid` and refined
with :func:`scipy.optimize.brentq` on continuous functions of ``u = ln ω``:

* gain crossings on ``ln|L(jω)|`` (summed factor by factor);
* phase crossings on ``(∠L(jω) + π)/(2π) − n`` for every integer ``n`` the continuous
  phase passes in a grid step, so a step in which a delay turns the phase several times
  still yields every crossing.

The delay enters exactly as ``−ωT`` (no rational approximation).  Grid steps that straddle
an imaginary-axis root are skipped: there ``L`` passes through 0 or ∞, not through a
crossing.  ``ω = 0`` and ``ω = ∞`` count as phase crossings when ``L`` is finite and
negative real there.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy.optimize import brentq

from ..lti import FloatArray, Loop
from . import frequency_grid
from .frequency_grid import imaginary_axis_frequencies, log_magnitude, loop_grid
from .results import GainCrossing, Margins, PhaseCrossing

__all__ = ["compute_margins", "plot_grid", "wrap_phase_margin_deg"]

#: Tolerance of the crossing refinement in u = ln ω (relative in ω).
_XTOL = 1e-14
#: Crossings closer than this (relative) are one crossing found from two grid steps.
_SAME_CROSSING_RTOL = 1e-9


def wrap_phase_margin_deg(phase_deg: FloatArray | float) -> FloatArray:
    """``180° + phase`` wrapped to (−180°, 180°]."""
    x = 180.0 + np.asarray(phase_deg, dtype=float)
    return x - 360.0 * np.ceil((x - 180.0) / 360.0)


def _valid_steps(w: FloatArray, axis: FloatArray) -> FloatArray:
    """Mask of grid steps ``[w_i, w_{i+1}]`` that contain no imaginary-axis root."""
    seg = np.searchsorted(axis, w)
    return seg[:-1] == seg[1:]


def _refine(fn: Callable[[float], float], a: FloatArray, b: FloatArray) -> FloatArray:
    """Roots of ``fn(u)`` in each bracket ``[ln a_i, ln b_i]`` (returned as ω)."""
    roots = [brentq(fn, math.log(x), math.log(y), xtol=_XTOL) for x, y in zip(a, b, strict=True)]
    return np.exp(np.asarray(roots, dtype=float))


def _dedupe(w: FloatArray) -> FloatArray:
    w = np.sort(w)
    if w.size < 2:
        return w
    keep = np.concatenate([[True], np.diff(w) > _SAME_CROSSING_RTOL * w[1:]])
    return w[keep]


def gain_crossover_frequencies(loop: Loop, w: FloatArray | None = None) -> FloatArray:
    """Every frequency (rad/s) where ``|L(jω)| = 1``, ascending."""
    rat = loop.rational
    if rat.gain == 0:
        return np.zeros(0)
    if w is None:
        w = loop_grid(loop)
    f = log_magnitude(rat, w)
    above = f > 0
    steps = (_valid_steps(w, imaginary_axis_frequencies(rat)) & (above[:-1] != above[1:])
             & np.isfinite(f[:-1]) & np.isfinite(f[1:]))
    idx = np.flatnonzero(steps)

    def fn(u: float) -> float:
        return float(log_magnitude(rat, np.array([math.exp(u)]))[0])

    return _dedupe(_refine(fn, w[idx], w[idx + 1]))


def phase_crossover_frequencies(loop: Loop, w: FloatArray | None = None) -> FloatArray:
    """Every frequency 0 < ω < ∞ (rad/s) on the grid's span where ∠L = −180° mod 360°."""
    rat = loop.rational
    if rat.gain == 0:
        return np.zeros(0)
    if w is None:
        w = loop_grid(loop)
    delay = loop.delay_s

    def phase(x: FloatArray) -> FloatArray:
        return rat.phase_rad(x) - x * delay

    g = (phase(w) + math.pi) / (2.0 * math.pi)
    lo = np.minimum(g[:-1], g[1:])
    hi = np.maximum(g[:-1], g[1:])
    # Integers n with lo < n ≤ hi: each is one crossing of the phase through −π + 2πn.
    first = np.floor(lo) + 1.0
    count = np.floor(hi) - first + 1.0
    count[~_valid_steps(w, imaginary_axis_frequencies(rat))] = 0.0
    count = np.maximum(count, 0.0).astype(int)
    idx = np.repeat(np.arange(count.size), count)
    offsets = np.arange(idx.size) - np.repeat(np.cumsum(count) - count, count)
    targets = first[idx] + offsets
    roots = []
    for i, n in zip(idx, targets, strict=True):
        def fn(u: float, n: float = n) -> float:
            ph = phase(np.array([math.exp(u)]))[0]
            return float((ph + math.pi) / (2.0 * math.pi) - n)

        roots.append(brentq(fn, math.log(w[i]), math.log(w[i + 1]), xtol=_XTOL))
    return _dedupe(np.exp(np.asarray(roots, dtype=float)))


def _endpoint_crossings(loop: Loop) -> list[PhaseCrossing]:
    """Phase crossings at ω = 0 and ω = ∞ where L is finite and negative real there.

    For a biproper rational part with a delay, ``L(jω)`` keeps turning with ``|L| → |k|``;
    the crossings accumulate at ω = ∞ and the entry there carries that limit.
    """
    rat = loop.rational
    out = []
    if rat.origin_poles == 0:
        c0 = rat.low_frequency_coefficient()
        if c0 < 0:
            out.append(_phase_crossing(0.0, abs(c0)))
    if rat.relative_degree == 0 and (loop.has_delay or rat.gain < 0):
        out.append(_phase_crossing(math.inf, abs(rat.gain)))
    return out


def _phase_crossing(w: float, magnitude: float) -> PhaseCrossing:
    gm_db = -20.0 * math.log10(magnitude) if magnitude > 0 else math.inf
    return PhaseCrossing(frequency_rad_s=w, magnitude=magnitude, gain_margin_db=gm_db)


def compute_margins(loop: Loop) -> Margins:
    """Gain, phase and delay margins of ``L = C·P·H·e^(−sT)`` over every crossing.

    Returns
    -------
    Margins
        ``gain_margin_db``: smallest ``−20·log10|L|`` over phase crossings with ``|L| ≤ 1``
        (upper margin, ≥ 0 dB; ``inf`` if none).  ``gain_margin_lower_db``: over phase
        crossings with ``|L| > 1`` the one closest to 0 dB (gain-reduction margin, < 0 dB;
        None if none).  ``phase_margin_deg``: at each gain crossing ``180° + ∠L`` wrapped
        to (−180°, 180°] — the smallest rotation, lag positive, that takes ``L`` onto −1
        there; the loop's value is the crossing's with the smallest magnitude, sign kept
        (``inf`` if no crossing).
        ``delay_margin_s``: smallest over gain crossings of ``(PM mod 360°)[rad]/ω``
        (``inf`` if no crossing).  Every crossing found is listed, ascending in ω.

    Notes
    -----
    The margins are computed whether or not the closed loop is stable; they describe the
    distance to instability only for a stable loop.  For a delay loop, phase crossings
    beyond :func:`~.frequency_grid.delay_grid_end` are not listed: there ``|L|`` is below
    ``1e-3·min(1, max|L|)`` and smaller than at the listed ones.
    """
    rat = loop.rational
    w = loop_grid(loop)
    w_gc = gain_crossover_frequencies(loop, w)
    w_pc = phase_crossover_frequencies(loop, w)

    pm = wrap_phase_margin_deg(np.degrees(loop.open_loop_phase_rad(w_gc)))
    dm = np.radians(np.mod(pm, 360.0)) / w_gc if w_gc.size else np.zeros(0)
    gains = tuple(GainCrossing(frequency_rad_s=float(x), phase_margin_deg=float(p),
                               delay_margin_s=float(d)) for x, p, d in zip(w_gc, pm, dm,
                                                                           strict=True))
    mags = np.exp(log_magnitude(rat, w_pc))
    phases = [_phase_crossing(float(x), float(m)) for x, m in zip(w_pc, mags, strict=True)]
    phases = sorted(phases + _endpoint_crossings(loop), key=lambda c: c.frequency_rad_s)

    upper = [c for c in phases if c.magnitude <= 1.0]
    lower = [c for c in phases if c.magnitude > 1.0]
    gm = min(upper, key=lambda c: c.gain_margin_db) if upper else None
    gm_low = max(lower, key=lambda c: c.gain_margin_db) if lower else None
    # The wrapped margin is the smallest phase rotation, either way, that reaches −1 at that
    # crossing; the loop's margin is the crossing where that rotation is smallest.
    worst = min(gains, key=lambda c: abs(c.phase_margin_deg)) if gains else None
    return Margins(
        gain_margin_db=gm.gain_margin_db if gm else math.inf,
        gain_margin_lower_db=gm_low.gain_margin_db if gm_low else None,
        phase_margin_deg=worst.phase_margin_deg if worst else math.inf,
        gain_crossover_rad_s=worst.frequency_rad_s if worst else None,
        phase_crossover_rad_s=gm.frequency_rad_s if gm else None,
        delay_margin_s=float(dm.min()) if dm.size else math.inf,
        gain_crossings=gains,
        phase_crossings=tuple(phases),
    )


def plot_grid(loop: Loop) -> FloatArray:
    """Frequencies (rad/s) for the open-loop plots: at most 2000, resonances resolved."""
    return frequency_grid.plot_grid(loop)
