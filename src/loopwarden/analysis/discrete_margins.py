"""Margins, sensitivity peaks and bandwidth of a sampled loop, on the unit circle.

The frequency response of a sampled loop is ``L(e^{jωT})`` for ω ∈ (0, π/T]; it repeats
beyond the Nyquist frequency π/T.  Because L has real coefficients, ``L(−1)`` is real:
the phase at the Nyquist frequency is exactly 0° or −180°, so a phase crossing *at* π/T
is common (every loop with ``L(−1) < 0``, e.g. the held integrator ``kT/(z − 1)``, whose
gain margin ``2/(kT)`` lies there) and is counted exactly, like ω = 0 when ``L(1) < 0``.

Crossings are bracketed on a grid in ``φ = ωT`` that resolves every root (a log grid
down to well below the slowest root, a uniform grid for delays ``z^{−n}``, clusters across
roots close to the unit circle, points approaching roots on it) and refined on the
continuous functions ``ln|L|`` and the factor-wise phase of
:func:`~loopwarden.lti_discrete.unit_circle_phase_rad` by the code every kind of loop
shares (:mod:`.loop_figures` over :class:`~.loop_response.SampledResponse`); this module
holds the unit-circle grid and the exact values at z = ±1, and keeps the sampled-loop
entry points as thin wrappers.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from ..lti import ComplexArray, FloatArray, Zpk
from ..lti_discrete import DiscreteLoop, at_z_one
from .peak_search import refined_peaks
from .results import Margins, Sensitivity
from .sensitivity import peak_values_at

__all__ = ["closed_loop_bandwidth", "compute_discrete_margins",
           "compute_discrete_sensitivity", "end_values", "interior", "on_circle_angles",
           "real_value", "refined_peak", "unit_circle_grid"]

POINTS_PER_DECADE = 100
UNIFORM_POINTS = 2000
#: A root with |ln|r|| below this fraction of |ln r| is close to the unit circle.
NEAR_CIRCLE = 0.3
#: |ln|r|| at or below this: the root is on the unit circle.
ON_CIRCLE = 1e-9
#: The interior search stops this far (relative) below π; π itself is judged exactly.
_NYQUIST_GAP = 1e-7


def refined_peak(fn: Callable[[ComplexArray], FloatArray], w: FloatArray,
                 l_of_w: Callable[[FloatArray], ComplexArray],
                 ends: tuple[tuple[float, float], ...] = ()) -> tuple[float, float]:
    """Supremum of ``fn(L(ω))`` over the grid ``w`` (rad/s, ascending) and exact end values.

    The largest grid maxima (and every one within 0.1 % of the best: a grid value is low
    by the peak's curvature times the squared spacing, never more) are refined by bounded
    scalar maximisation in ln ω between their neighbours.  ``ends`` holds
    ``(frequency, value)`` pairs known exactly (e.g. ω = 0 and the Nyquist frequency); an
    interior value must beat them by more than rounding (1e−12) to replace them.
    """
    return refined_peaks([fn], w, l_of_w, [ends], method="brent")[0]


def on_circle_angles(zpk: Zpk) -> FloatArray:
    roots = np.concatenate([zpk.zeros, zpk.poles])
    roots = roots[np.abs(roots) > 0]
    lam = np.log(roots.astype(complex))
    on = np.abs(lam.real) <= ON_CIRCLE
    return np.unique(np.abs(lam[on].imag))


def unit_circle_grid(zpk: Zpk, points_per_decade: int = POINTS_PER_DECADE,
                     uniform: int = UNIFORM_POINTS) -> FloatArray:
    """Sorted angles φ in (0, π] that resolve ``zpk`` on the unit circle (rad).

    A log grid from two decades below the slowest root (``|ln r|``, and the asymptotic
    crossover ``|c|^{1/m}`` of m poles at z = 1) to π; ``uniform`` equal steps over
    (0, π]; 321 points across ``arg r ± 8·|ln|r||`` for every root close to the circle and
    points at relative distances 1e−12 … 1e−1 on both sides of roots on it (never the
    root's angle itself).
    """
    roots = np.concatenate([zpk.zeros, zpk.poles])
    roots = roots[np.abs(roots) > 0]
    lam = np.log(roots.astype(complex))
    chars = list(np.abs(lam[np.abs(lam) > 1e-12]))
    m, c = at_z_one(zpk)
    if m != 0 and c != 0:
        chars.append(abs(c) ** (1.0 / m))
    chars_arr = np.asarray(chars, dtype=float)
    chars_arr = chars_arr[np.isfinite(chars_arr) & (chars_arr > 0)]
    lo = min(1e-5, float(chars_arr.min()) / 100.0) if chars_arr.size else 1e-5
    lo = max(lo, 1e-12)
    n = int(math.ceil(points_per_decade * math.log10(math.pi / lo))) + 1
    parts = [np.logspace(math.log10(lo), math.log10(math.pi), n),
             np.linspace(0.0, math.pi, uniform + 1)[1:]]
    sigma, theta = np.abs(lam.real), np.abs(lam.imag)
    offsets = np.linspace(-8.0, 8.0, 321)
    approach = np.logspace(-12, -1, 111)
    for s, t, r in zip(sigma, theta, np.abs(lam), strict=True):
        if t <= 0:
            continue
        if s <= ON_CIRCLE:
            parts += [t * (1.0 - approach), t * (1.0 + approach)]
        elif s < NEAR_CIRCLE * r:
            parts.append(t + s * offsets)
    phi = np.unique(np.concatenate(parts))
    phi = phi[(phi > 0) & (phi <= math.pi)]
    axis = on_circle_angles(zpk)
    if axis.size:
        phi = phi[~np.isin(phi, axis)]
    return phi


def interior(phi: FloatArray) -> FloatArray:
    return phi[phi < math.pi * (1.0 - _NYQUIST_GAP)]


def real_value(rat: Zpk, z: float) -> float | None:
    """``L(z)`` at z = ±1 when finite and non-zero there (it is real), else None."""
    if np.any(np.abs(rat.poles - z) <= 1e-12) or np.any(np.abs(rat.zeros - z) <= 1e-12):
        return None
    return float(np.real(rat(np.array([z], dtype=complex))[0]))


def compute_discrete_margins(loop: DiscreteLoop) -> Margins:
    """Gain, phase and delay margins of ``L(z)`` over every crossing in [0, π/T].

    Returns
    -------
    Margins
        As :func:`~loopwarden.analysis.margins.compute_margins`, with frequencies in rad/s
        (ω = φ/T); ``phase_crossover_rad_s`` may be exactly the Nyquist frequency π/T (or
        0).  ``delay_margin_s`` is the smallest ``PM_i[rad]/ω_i`` and
        ``delay_margin_samples`` the same in periods: the extra delay ``e^{−jωτ}`` that
        takes L onto −1 (exact for whole samples ``z^{−d}``).
    """
    from .loop_figures import loop_margins
    from .loop_response import SampledResponse

    return loop_margins(SampledResponse(loop))


def end_values(rat: Zpk, z: float) -> tuple[float, float, float]:
    """``(|S|, |T|, |S − 1/2|)`` at z = ±1 (a pole there: L infinite; a zero: L = 0)."""
    if np.any(np.abs(rat.poles - z) <= 1e-12) and not np.any(np.abs(rat.zeros - z) <= 1e-12):
        return 0.0, 1.0, 0.5
    value = real_value(rat, z)
    if value is None:
        return 1.0, 0.0, 0.5
    return peak_values_at(value)


def compute_discrete_sensitivity(loop: DiscreteLoop) -> Sensitivity:
    """Ms, Mt and the balanced disk margin over ω ∈ [0, π/T] (both ends exact).

    A peak at the Nyquist frequency is reported at π/T (not ``inf``: the response repeats
    beyond it).  Conventions otherwise as
    :func:`~loopwarden.analysis.sensitivity.compute_sensitivity`.
    """
    from .loop_figures import loop_sensitivity
    from .loop_response import SampledResponse

    return loop_sensitivity(SampledResponse(loop))


def closed_loop_bandwidth(loop: DiscreteLoop) -> float | None:
    """Lowest ω (rad/s) where ``|T(e^{jωT})|`` falls to ``|T(1)|/√2`` (−3 dB), T = L/(1+L).

    None when it stays above that level up to the Nyquist frequency, or when ``T(1) = 0``
    (no transmission at DC, so no low-frequency level to fall from).
    """
    from .loop_figures import closed_loop_bandwidth as bandwidth
    from .loop_response import SampledResponse

    resp = SampledResponse(loop)
    return bandwidth(resp, resp.full_grid())
