"""Sensitivity peaks and the balanced disk margin.

``S = 1/(1 + L)``, ``T = L/(1 + L)``.  The peaks are suprema over ω ∈ [0, ∞]: the exact
limits at ω = 0 and ω = ∞ are included (a peak there is reported at 0.0 or ``math.inf``,
where python-control's ``linfnorm`` returns inf), the interior maximum is found on
:func:`~.frequency_grid.loop_grid` and refined by bounded scalar minimisation in ``ln ω``
around the best grid maxima (golden section, all maxima of |S|, |T| and |S − 1/2| at once).

Balanced disk margin (Seiler, Packard & Gahinet, "An Introduction to Disk Margins",
IEEE Control Systems Magazine 40(5), 2020 [memory]): ``α = 1/max|S − 1/2|``; the loop
tolerates every simultaneous gain and phase change in the disk, in particular gains in
``[(2−α)/(2+α), (2+α)/(2−α)]`` and phases within ``±2·atan(α/2)``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
from numpy.typing import NDArray

from ..lti import ComplexArray, FloatArray, Loop
from .frequency_grid import loop_grid, response
from .results import Sensitivity

__all__ = ["PEAK_FUNCTIONS", "compute_sensitivity", "disk_ranges", "peak_candidates",
           "peak_values_at", "sensitivity_from_peaks"]

#: How many of the largest grid maxima are refined at least, and at most.
_CANDIDATES = 6
_MAX_CANDIDATES = 12
_XATOL = 1e-12
_TIE_RTOL = 1e-12
#: Golden-section steps at most (each shrinks a bracket by 0.618).
_MAX_GOLDEN = 100


def _limits(loop: Loop) -> tuple[tuple[float, float, float], tuple[float, float, float]]:
    """``(|S|, |T|, |S − 1/2|)`` at ω = 0 and their suprema as ω → ∞."""
    rat = loop.rational
    at = peak_values_at
    infinite = (0.0, 1.0, 0.5)      # |L| → ∞
    vanishing = (1.0, 0.0, 0.5)     # L → 0
    m = rat.origin_poles
    zero = infinite if m > 0 else vanishing if m < 0 else at(rat.low_frequency_coefficient())
    rd = rat.relative_degree
    if rd > 0:
        high = vanishing
    elif rd < 0:
        high = infinite
    elif not loop.has_delay:
        high = at(rat.gain)
    else:
        # L(jω) ≈ k·e^{−jωT} turns forever: the supremum over the circle |L| = |k|.
        k = abs(rat.gain)
        high = ((1.0 / (1.0 - k), k / (1.0 - k), (1.0 + k) / (2.0 * (1.0 - k))) if k < 1
                else (math.inf, math.inf, math.inf))
    return zero, high


def _s_mag(lv: ComplexArray) -> FloatArray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs(1.0 / (1.0 + lv))


def _t_mag(lv: ComplexArray) -> FloatArray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs(lv / (1.0 + lv))


def _d_mag(lv: ComplexArray) -> FloatArray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs((1.0 - lv) / (2.0 * (1.0 + lv)))


#: ``|S|``, ``|T|`` and ``|S − 1/2|`` as functions of values of L (inf where 1 + L = 0).
PEAK_FUNCTIONS: tuple[Callable[[ComplexArray], FloatArray], ...] = (_s_mag, _t_mag, _d_mag)


def peak_values_at(value: float) -> tuple[float, float, float]:
    """``(|S|, |T|, |S − 1/2|)`` where L takes the finite real ``value`` (inf at −1)."""
    den = 1.0 + value
    if den == 0:
        return math.inf, math.inf, math.inf
    return 1.0 / abs(den), abs(value / den), abs((1.0 - value) / (2.0 * den))


def peak_candidates(vals: FloatArray) -> NDArray[np.int_]:
    """Grid maxima to refine: the largest few and any other within 0.1 % of the best."""
    interior = np.flatnonzero(np.r_[True, vals[1:] >= vals[:-1]]
                              & np.r_[vals[:-1] >= vals[1:], True])
    # Refine the largest grid maxima and any other within 0.1 % of the best: the grid value
    # of a peak is low by its curvature times the squared spacing, never by more.
    ranked = interior[np.argsort(vals[interior])[::-1]]
    close = vals[ranked] >= 0.999 * vals[ranked[0]] if ranked.size else ranked.astype(bool)
    keep = np.arange(ranked.size) < _CANDIDATES
    return ranked[(keep | close)][:_MAX_CANDIDATES]


def _golden_max(fn: Callable[[FloatArray], FloatArray], a: FloatArray,
                b: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Local maxima of ``fn`` on every bracket ``[a_i, b_i]`` at once (golden section).

    ``fn`` maps an array of ``u`` (one per bracket) to the values.  Converged when a
    bracket is narrower than ``1.5e−8·|u| + _XATOL`` (the tolerance of scipy's bounded
    scalar minimiser).  Returns the best point evaluated in each bracket and its value.
    """
    g = 0.5 * (3.0 - math.sqrt(5.0))
    a, b = a.astype(float).copy(), b.astype(float).copy()
    c = a + g * (b - a)
    d = b - g * (b - a)
    fc, fd = fn(c), fn(d)
    best_u = np.where(fc >= fd, c, d)
    best_f = np.maximum(fc, fd)
    for _ in range(_MAX_GOLDEN):
        active = (b - a) > 2.0 * (1.5e-8 * np.abs(0.5 * (a + b)) + _XATOL / 3.0)
        if not active.any():
            break
        left = fc >= fd                      # the maximum lies in [a, d]
        go_left, go_right = active & left, active & ~left
        b = np.where(go_left, d, b)
        a = np.where(go_right, c, a)
        span = g * (b - a)
        probe = np.where(left, a + span, b - span)
        fp = fn(probe)
        fp[~active] = -np.inf
        # Left: the old c becomes d, the probe the new c; right: d becomes c, probe d.
        c, d = np.where(go_left, probe, np.where(go_right, d, c)), \
            np.where(go_left, c, np.where(go_right, probe, d))
        fc, fd = np.where(left, fp, fd), np.where(left, fc, fp)
        better = fp > best_f
        best_u[better] = probe[better]
        best_f[better] = fp[better]
    return best_u, best_f


def _peaks(fns: Sequence[Callable[[ComplexArray], FloatArray]], l_grid: ComplexArray,
           w: FloatArray, l_of_w: Callable[[FloatArray], ComplexArray],
           ends: Sequence[tuple[float, float]]) -> list[tuple[float, float]]:
    """Supremum of each ``fn(L(jω))`` over [0, ∞] and where it is attained (rad/s).

    ``ends`` holds each function's exact values at ω = 0 and ω = ∞.  The grid maxima of
    all functions are refined together: one evaluation of L per golden-section step.
    """
    u = np.log(w)
    plans = []
    for fn in fns:
        vals = fn(l_grid)
        if not np.all(np.isfinite(vals)):
            plans.append((vals, None))
            continue
        idx = peak_candidates(vals)
        lo = np.maximum(idx - 1, 0)
        hi = np.minimum(idx + 1, u.size - 1)
        plans.append((vals, (idx, lo, hi)))
    brackets = [p[1] for p in plans if p[1] is not None]
    owner = np.concatenate([np.full(br[0].size, k) for k, br in enumerate(brackets)]
                           ) if brackets else np.zeros(0, dtype=int)
    a = np.concatenate([u[br[1]] for br in brackets]) if brackets else np.zeros(0)
    b = np.concatenate([u[br[2]] for br in brackets]) if brackets else np.zeros(0)
    live = b > a
    live_fns = [fn for fn, p in zip(fns, plans, strict=True) if p[1] is not None]
    refined_u = np.zeros(a.size)
    refined_f = np.full(a.size, -np.inf)
    if live.any():
        own = owner[live]
        groups = [(fn, np.flatnonzero(own == k)) for k, fn in enumerate(live_fns)]
        groups = [(fn, sel) for fn, sel in groups if sel.size]

        def many(x: FloatArray) -> FloatArray:
            lv = l_of_w(np.exp(x))
            out = np.empty(x.size)
            for fn, sel in groups:
                out[sel] = fn(lv[sel])
            return out

        refined_u[live], refined_f[live] = _golden_max(many, a[live], b[live])

    results: list[tuple[float, float]] = []
    offset = 0
    for (vals, plan), (at_zero, at_inf) in zip(plans, ends, strict=True):
        # An interior value must beat an exact end value by more than rounding to replace it.
        best_val, best_w = at_zero, 0.0
        if at_inf > best_val:
            best_val, best_w = at_inf, math.inf
        floor = best_val * (1.0 + _TIE_RTOL)
        if plan is None:
            i = int(np.flatnonzero(~np.isfinite(vals))[0])
            results.append((math.inf, float(w[i])))
            continue
        idx = plan[0]
        for j, i in enumerate(idx):
            if vals[i] > max(best_val, floor):
                best_val, best_w = float(vals[i]), float(w[i])
            k = offset + j
            if live[k] and refined_f[k] > max(best_val, floor):
                best_val, best_w = float(refined_f[k]), float(math.exp(refined_u[k]))
        offset += idx.size
        results.append((best_val, best_w))
    return results


def disk_ranges(alpha: float) -> tuple[float, float, float]:
    """Gain range (factors) and ± phase (deg) guaranteed by a balanced disk margin α."""
    if alpha >= 2.0:
        low, high = 0.0, math.inf
    else:
        low, high = (2.0 - alpha) / (2.0 + alpha), (2.0 + alpha) / (2.0 - alpha)
    return low, high, math.degrees(2.0 * math.atan(alpha / 2.0))


def sensitivity_from_peaks(s_peak: tuple[float, float], t_peak: tuple[float, float],
                           d_max: float) -> Sensitivity:
    """The result from ``(Ms, ω)``, ``(Mt, ω)`` (rad/s) and ``max|S − 1/2|``: α = 1/max."""
    (ms, w_ms), (mt, w_mt) = s_peak, t_peak
    alpha = 1.0 / d_max if d_max > 0 else math.inf
    low, high_gain, phase = disk_ranges(alpha)
    return Sensitivity(
        peak_sensitivity=ms, peak_sensitivity_rad_s=w_ms,
        peak_complementary=mt, peak_complementary_rad_s=w_mt,
        disk_margin=alpha, disk_gain_low=low, disk_gain_high=high_gain,
        disk_phase_deg=phase,
    )


def compute_sensitivity(loop: Loop, w: FloatArray | None = None) -> Sensitivity:
    """Peak sensitivity Ms, peak complementary sensitivity Mt and balanced disk margin.

    ``w`` is the analysis grid (rad/s; default :func:`~.frequency_grid.loop_grid`), passed
    in when the caller has it already.

    Returns
    -------
    Sensitivity
        ``peak_sensitivity = max|1/(1+L)|`` and ``peak_complementary = max|L/(1+L)|`` over
        ω ∈ [0, ∞] with the frequency of each (rad/s; 0.0 or ``inf`` at an end);
        ``disk_margin`` α, ``disk_gain_low``/``disk_gain_high`` (factors; 0 and ``inf``
        when α ≥ 2) and ``disk_phase_deg`` (±).  ``inf`` peaks mean a closed-loop pole on
        the imaginary axis.  Computed whether or not the closed loop is stable.
    """
    rat, delay = loop.rational, loop.delay_s

    def l_of_w(x: FloatArray) -> ComplexArray:
        return response(rat, x) * np.exp(-1j * x * delay)

    if w is None:
        w = loop_grid(loop)
    l_grid = l_of_w(w)
    zero, high = _limits(loop)

    s_peak, t_peak, (d_max, _) = _peaks(
        PEAK_FUNCTIONS, l_grid, w, l_of_w,
        [(zero[0], high[0]), (zero[1], high[1]), (zero[2], high[2])])
    return sensitivity_from_peaks(s_peak, t_peak, d_max)
