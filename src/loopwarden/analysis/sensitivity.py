"""Sensitivity peaks and the balanced disk margin.

``S = 1/(1 + L)``, ``T = L/(1 + L)``.  The peaks are suprema over ω ∈ [0, ∞]: the exact
limits at ω = 0 and ω = ∞ are included (a peak there is reported at 0.0 or ``math.inf``,
where python-control's ``linfnorm`` returns inf), the interior maximum is found on
:func:`~.frequency_grid.loop_grid` and refined around the best grid maxima by the one peak
refiner (:mod:`.peak_search`, golden section on all maxima of |S|, |T| and |S − 1/2| at
once).  The computation is written once for every kind of loop in :mod:`.loop_figures`;
:func:`compute_sensitivity` is its continuous-loop entry.

Balanced disk margin (Seiler, Packard & Gahinet, "An Introduction to Disk Margins",
IEEE Control Systems Magazine 40(5), 2020 [memory]): ``α = 1/max|S − 1/2|``; the loop
tolerates every simultaneous gain and phase change in the disk, in particular gains in
``[(2−α)/(2+α), (2+α)/(2−α)]`` and phases within ``±2·atan(α/2)``.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from ..lti import ComplexArray, FloatArray, Loop
from .peak_search import peak_candidates
from .results import Sensitivity

__all__ = ["PEAK_FUNCTIONS", "compute_sensitivity", "disk_ranges", "end_limits",
           "peak_candidates", "peak_values_at", "sensitivity_from_peaks"]


def end_limits(loop: Loop) -> tuple[tuple[float, float, float], tuple[float, float, float]]:
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
    from .loop_figures import loop_sensitivity
    from .loop_response import ContinuousResponse

    return loop_sensitivity(ContinuousResponse(loop), w)
