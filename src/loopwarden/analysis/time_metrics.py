"""Figures read off a sampled response: crossing and settling times, rise, overshoot and
peak, and the thinned series handed to the plots.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import optimize

from ..lti import FloatArray
from .results import StepMetrics, TimeSeries
from .time_rational import RationalResponse

#: Points kept in the time series handed to the plots.
PLOT_POINTS = 4000


# --------------------------------------------------------------------------- metrics
def crossing_time(t: FloatArray, y: FloatArray, level: float, k: int,
                  exact: Callable[[float], float] | None = None) -> float:
    """Instant in ``[t[k], t[k+1]]`` where the signal equals ``level``.

    Linear interpolation on the grid, then root finding on ``exact`` (the signal at any
    instant) when it is given and brackets the level.
    """
    y0, y1 = y[k] - level, y[k + 1] - level
    if y0 == 0.0:
        return float(t[k])
    guess = float(t[k] + (t[k + 1] - t[k]) * y0 / (y0 - y1)) if y0 != y1 else float(t[k])
    if exact is None:
        return guess
    a, b = float(t[k]), float(t[k + 1])
    fa, fb = exact(a) - level, exact(b) - level
    if fa == 0.0:
        return a
    if fa * fb > 0:
        return guess
    return float(optimize.brentq(lambda s: exact(s) - level, a, b, xtol=1e-12 * max(b, 1.0)))


def settling_time(t: FloatArray, y: FloatArray, final: float, band: float,
                  exact: Callable[[float], float] | None = None) -> float:
    """Last exit from the band ``|y − final| ≤ band·|final|``, interpolated.

    Returns 0 when the sampled signal never leaves the band and ``inf`` when it is
    outside at the last sample.
    """
    tol = band * abs(final)
    outside = np.flatnonzero(np.abs(y - final) > tol)
    if outside.size == 0:
        return 0.0
    k = int(outside[-1])
    if k == y.size - 1:
        return math.inf
    level = final + tol if y[k] > final else final - tol
    return crossing_time(t, y, level, k, exact)


def _first_reach(t: FloatArray, yn: FloatArray, level: float,
                 exact: Callable[[float], float] | None) -> float | None:
    idx = np.flatnonzero(yn >= level)
    if idx.size == 0:
        return None
    k = int(idx[0])
    if k == 0:
        return 0.0
    return crossing_time(t, yn, level, k - 1, exact)


def _peak(t: FloatArray, yn: FloatArray, slope: Callable[[float], float] | None,
          exact: Callable[[float], float] | None) -> tuple[float, float]:
    """Largest value of the normalised response and its instant, refined locally."""
    k = int(np.argmax(yn))
    if 0 < k < yn.size - 1:
        a, b = float(t[k - 1]), float(t[k + 1])
        if slope is not None and exact is not None and slope(a) * slope(b) < 0:
            tp = float(optimize.brentq(slope, a, b, xtol=1e-12 * max(b, 1.0)))
            return exact(tp), tp
        # Parabola through the three samples around the largest one.
        y0, y1, y2 = yn[k - 1], yn[k], yn[k + 1]
        d0, d1 = t[k] - t[k - 1], t[k + 1] - t[k]
        den = y0 - 2 * y1 + y2
        if den < 0 and d0 == d1:
            off = 0.5 * (y0 - y2) / den
            return float(y1 - 0.25 * (y0 - y2) * off), float(t[k] + off * d0)
        if d0 != d1:
            # Uneven spacing (a segment boundary): the vertex of the Lagrange parabola.
            s0, s1 = (y1 - y0) / d0, (y2 - y1) / d1
            curv = (s1 - s0) / (d0 + d1)
            if curv < 0:
                tv = 0.5 * (t[k - 1] + t[k]) - 0.5 * s0 / curv
                yv = y1 + (tv - t[k]) * (s0 + curv * (tv - t[k - 1]))
                return float(yv), float(tv)
    return float(yn[k]), float(t[k])


def _metrics(t: FloatArray, y: FloatArray, e: FloatArray, final: float, band: float,
             exact_delay: bool, rational: RationalResponse | None) -> StepMetrics:
    yn = y / final
    exact = slope = None
    if rational is not None:
        r = rational

        def exact(s: float) -> float:
            return r.step_at(s) / final

        def slope(s: float) -> float:
            return r.step_slope_at(s) / final

    peak, t_peak = _peak(t, yn, slope, exact)
    overshoot = 100.0 * (peak - 1.0)
    has_overshoot = overshoot > 1e-7
    t10 = _first_reach(t, yn, 0.1, exact)
    t90 = _first_reach(t, yn, 0.9, exact)
    rise = t90 - t10 if t10 is not None and t90 is not None else None
    return StepMetrics(
        final_value=final,
        overshoot_pct=overshoot if has_overshoot else 0.0,
        peak_time_s=t_peak if has_overshoot else None,
        rise_time_s=rise,
        settling_time_s=settling_time(t, yn, 1.0, band, exact),
        settling_band=band,
        horizon_s=float(t[-1]),
        ramp_error_final=float(e[-1]),
        exact_delay=exact_delay,
    )


def _settled(t: FloatArray, y: FloatArray, final: float, band: float) -> bool:
    """True when the last exit is well inside the horizon and the end is quiet."""
    ts = settling_time(t, y, final, band)
    quiet = np.abs(y[t >= 0.8 * t[-1]] - final).max() <= 0.5 * band * abs(final)
    return ts <= 0.75 * t[-1] and bool(quiet)


def plot_series(t: FloatArray, v: FloatArray) -> TimeSeries:
    """``v(t)`` thinned to at most :data:`PLOT_POINTS` samples, the last one kept."""
    stride = max(1, math.ceil((t.size - 1) / (PLOT_POINTS - 1)))
    idx = np.arange(0, t.size, stride)
    if idx[-1] != t.size - 1:
        idx = np.append(idx, t.size - 1)
    return TimeSeries(time_s=t[idx].copy(), value=v[idx].copy())
