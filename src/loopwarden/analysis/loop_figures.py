"""Margins, sensitivity peaks and bandwidth, written once over :class:`LoopResponse`.

* :func:`loop_margins`: every gain crossing (``ln|L| = 0``) and phase crossing
  (``∠L = −180°`` mod 360°) on the loop's grid, refined by the bracketing solver of
  :mod:`.margins`, plus the crossings the loop knows exactly at the ends of its range;
  the margins are chosen from them by :func:`~.margins.margins_from_crossings`.
* :func:`loop_peaks`: the suprema of |S|, |T| and |S − 1/2| by the one refiner
  (:func:`~.peak_search.refined_peaks`), the loop's exact end values competing.
* :func:`closed_loop_bandwidth`: the lowest frequency where ``|T|`` falls 3 dB below its
  value at ω = 0.

Frequencies are rad/s for every kind of loop (a sampled loop's ω = φ/T).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from ..lti import FloatArray
from .loop_response import LoopResponse
from .margins import (
    gain_crossing_list,
    gain_crossings_on,
    margins_from_crossings,
    phase_crossing,
)
from .peak_search import refined_peaks
from .results import Margins, Sensitivity
from .sensitivity import PEAK_FUNCTIONS, sensitivity_from_peaks

__all__ = ["closed_loop_bandwidth", "loop_margins", "loop_peaks", "loop_sensitivity"]


def loop_margins(resp: LoopResponse, x: FloatArray | None = None) -> Margins:
    """Gain, phase and delay margins of the loop over every crossing on grid ``x``.

    ``x`` is in the loop's own variable (``resp.grid()``, the default).  Conventions as
    :func:`~loopwarden.analysis.margins.compute_margins`; a sampled loop also gets
    ``delay_margin_samples``.
    """
    if resp.gain_is_zero:
        return margins_from_crossings((), (), period_s=resp.period_s)
    if x is None:
        x = resp.grid()
    x_gc = gain_crossings_on(resp.log_magnitude, x, resp.valid_steps(x))
    exact = resp.exact_gain_crossings()
    if exact.size:
        x_gc = np.concatenate([x_gc, exact])
    gains = gain_crossing_list(x_gc / resp.scale, resp.phase_rad(x_gc))
    x_pc = resp.phase_crossover_frequencies(x)
    mags = np.exp(resp.log_magnitude(x_pc))
    phases = [phase_crossing(float(p / resp.scale), float(m))
              for p, m in zip(x_pc, mags, strict=True)]
    phases = sorted(phases + resp.end_phase_crossings(), key=lambda c: c.frequency_rad_s)
    return margins_from_crossings(gains, phases, listed_above=resp.listed_above,
                                  period_s=resp.period_s)


def loop_peaks(resp: LoopResponse, x: FloatArray | None = None
               ) -> list[tuple[float, float]]:
    """``(peak, ω)`` of |S|, |T| and |S − 1/2| over the loop's range, its ends included.

    ``x``: the grid in the loop's own variable (default ``resp.grid()``).
    """
    w = (resp.grid() if x is None else x) / resp.scale
    ends = resp.end_values()
    per_fn = [tuple((at, vals[i]) for at, vals in ends) for i in range(3)]
    return refined_peaks(PEAK_FUNCTIONS, w, resp.value, per_fn,
                         method=getattr(resp, "peak_method", "golden"))


def loop_sensitivity(resp: LoopResponse, x: FloatArray | None = None) -> Sensitivity:
    """Ms, Mt and the balanced disk margin (conventions of
    :func:`~loopwarden.analysis.sensitivity.compute_sensitivity`)."""
    s_peak, t_peak, (d_max, _) = loop_peaks(resp, x)
    return sensitivity_from_peaks(s_peak, t_peak, d_max)


def closed_loop_bandwidth(resp: LoopResponse, w: FloatArray | None = None) -> float | None:
    """Lowest ω (rad/s) on or after grid ``w`` (rad/s) where ``|T|`` falls to ``|T(0)|/√2``.

    None when it stays above that level over the whole grid, or when ``T(0)`` is zero or
    unknown (no low-frequency level to fall from).
    """
    ends = resp.end_values()
    if not ends:
        return None
    t_dc = ends[0][1][1]
    if not t_dc > 0 or not math.isfinite(t_dc):
        return None
    level = t_dc / math.sqrt(2.0)
    if w is None:
        w = resp.grid() / resp.scale
    t_mag = PEAK_FUNCTIONS[1]

    def t_abs(x: FloatArray) -> FloatArray:
        return t_mag(resp.value(x))

    below = np.flatnonzero(t_abs(w) < level)
    if below.size == 0:
        return None
    k = int(below[0])
    if k == 0:
        return float(w[0])

    def g(u: float) -> float:
        return float(t_abs(np.array([math.exp(u)]))[0] - level)

    u = optimize.brentq(g, math.log(w[k - 1]), math.log(w[k]), xtol=1e-14, rtol=1e-14)
    return float(math.exp(u))
