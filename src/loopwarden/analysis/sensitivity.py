"""Sensitivity peaks and the balanced disk margin.

``S = 1/(1 + L)``, ``T = L/(1 + L)``.  The peaks are suprema over ω ∈ [0, ∞]: the exact
limits at ω = 0 and ω = ∞ are included (a peak there is reported at 0.0 or ``math.inf``,
where python-control's ``linfnorm`` returns inf), the interior maximum is found on
:func:`~.frequency_grid.loop_grid` and refined by bounded scalar minimisation in ``ln ω``
around the best grid maxima.

Balanced disk margin (Seiler, Packard & Gahinet, "An Introduction to Disk Margins",
IEEE Control Systems Magazine 40(5), 2020 [memory]): ``α = 1/max|S − 1/2|``; the loop
tolerates every simultaneous gain and phase change in the disk, in particular gains in
``[(2−α)/(2+α), (2+α)/(2−α)]`` and phases within ``±2·atan(α/2)``.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy.optimize import minimize_scalar

from ..lti import ComplexArray, FloatArray, Loop
from .frequency_grid import loop_grid
from .results import Sensitivity

__all__ = ["compute_sensitivity", "disk_ranges"]

#: How many of the largest grid maxima are refined at least, and at most.
_CANDIDATES = 6
_MAX_CANDIDATES = 12
_XATOL = 1e-12
_TIE_RTOL = 1e-12


def _limits(loop: Loop) -> tuple[tuple[float, float, float], tuple[float, float, float]]:
    """``(|S|, |T|, |S − 1/2|)`` at ω = 0 and their suprema as ω → ∞."""
    rat = loop.rational

    def at(value: float) -> tuple[float, float, float]:
        den = 1.0 + value
        if den == 0:
            return math.inf, math.inf, math.inf
        return 1.0 / abs(den), abs(value / den), abs((1.0 - value) / (2.0 * den))

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


def _peak(fn: Callable[[ComplexArray], FloatArray], l_grid: ComplexArray, w: FloatArray,
          l_of_w: Callable[[FloatArray], ComplexArray], at_zero: float, at_inf: float,
          ) -> tuple[float, float]:
    """Supremum of ``fn(L(jω))`` over [0, ∞] and where it is attained (rad/s)."""
    vals = fn(l_grid)
    # An interior value must beat an exact end value by more than rounding to replace it.
    best_val, best_w = at_zero, 0.0
    if at_inf > best_val:
        best_val, best_w = at_inf, math.inf
    floor = best_val * (1.0 + _TIE_RTOL)
    if not np.all(np.isfinite(vals)):
        i = int(np.flatnonzero(~np.isfinite(vals))[0])
        return math.inf, float(w[i])
    interior = np.flatnonzero(np.r_[True, vals[1:] >= vals[:-1]]
                              & np.r_[vals[:-1] >= vals[1:], True])
    # Refine the largest grid maxima and any other within 0.1 % of the best: the grid value
    # of a peak is low by its curvature times the squared spacing, never by more.
    ranked = interior[np.argsort(vals[interior])[::-1]]
    close = vals[ranked] >= 0.999 * vals[ranked[0]] if ranked.size else ranked.astype(bool)
    keep = np.arange(ranked.size) < _CANDIDATES
    interior = ranked[(keep | close)][:_MAX_CANDIDATES]
    u = np.log(w)

    def neg(x: float) -> float:
        return -float(fn(l_of_w(np.array([math.exp(x)])))[0])

    for i in interior:
        if vals[i] > max(best_val, floor):
            best_val, best_w = float(vals[i]), float(w[i])
        a, b = u[max(i - 1, 0)], u[min(i + 1, u.size - 1)]
        if b <= a:
            continue
        res = minimize_scalar(neg, bounds=(a, b), method="bounded",
                              options={"xatol": _XATOL})
        if -res.fun > max(best_val, floor):
            best_val, best_w = float(-res.fun), float(math.exp(res.x))
    return best_val, best_w


def disk_ranges(alpha: float) -> tuple[float, float, float]:
    """Gain range (factors) and ± phase (deg) guaranteed by a balanced disk margin α."""
    if alpha >= 2.0:
        low, high = 0.0, math.inf
    else:
        low, high = (2.0 - alpha) / (2.0 + alpha), (2.0 + alpha) / (2.0 - alpha)
    return low, high, math.degrees(2.0 * math.atan(alpha / 2.0))


def compute_sensitivity(loop: Loop) -> Sensitivity:
    """Peak sensitivity Ms, peak complementary sensitivity Mt and balanced disk margin.

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
        return rat.freqresp(x) * np.exp(-1j * x * delay)

    w = loop_grid(loop)
    l_grid = l_of_w(w)
    zero, high = _limits(loop)

    def s_mag(lv: ComplexArray) -> FloatArray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.abs(1.0 / (1.0 + lv))

    def t_mag(lv: ComplexArray) -> FloatArray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.abs(lv / (1.0 + lv))

    def d_mag(lv: ComplexArray) -> FloatArray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.abs((1.0 - lv) / (2.0 * (1.0 + lv)))

    ms, w_ms = _peak(s_mag, l_grid, w, l_of_w, zero[0], high[0])
    mt, w_mt = _peak(t_mag, l_grid, w, l_of_w, zero[1], high[1])
    d_max, _ = _peak(d_mag, l_grid, w, l_of_w, zero[2], high[2])
    alpha = 1.0 / d_max if d_max > 0 else math.inf
    low, high_gain, phase = disk_ranges(alpha)
    return Sensitivity(
        peak_sensitivity=ms, peak_sensitivity_rad_s=w_ms,
        peak_complementary=mt, peak_complementary_rad_s=w_mt,
        disk_margin=alpha, disk_gain_low=low, disk_gain_high=high_gain,
        disk_phase_deg=phase,
    )
