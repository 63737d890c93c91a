"""Frequency grids that resolve every feature of a loop's frequency response.

The margin, sensitivity and Nyquist computations search a grid for sign changes and
maxima and then refine on the continuous functions.  Refinement cannot find what the grid
never saw, so the grid must see everything: the whole band where the loop does anything
(from the roots, the asymptotic crossovers and the delay), dense clusters across every
lightly damped resonance or anti-resonance, points approaching every imaginary-axis root,
and for loops with a transport delay a uniform spacing fine enough for the −ωT phase.

Conventions: frequencies in rad/s, ω > 0; "the rational part" is ``L`` without its delay.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from ..lti import FloatArray, Loop, Zpk

__all__ = [
    "AXIS_RTOL",
    "DEFAULT_POINTS_PER_DECADE",
    "bound_frequency",
    "characteristic_frequencies",
    "delay_grid_end",
    "frequency_range",
    "imaginary_axis_frequencies",
    "log_magnitude",
    "loop_grid",
    "phase",
    "response",
    "magnitude_bound",
    "span_points",
]

#: A root with |Re r| ≤ AXIS_RTOL·|r| counts as lying on the imaginary axis.
AXIS_RTOL = 1e-9
DEFAULT_POINTS_PER_DECADE = 100
#: Complex roots with damping ratio below this get a dense cluster of grid points.
LIGHT_DAMPING = 0.3
#: Half-width of a resonance cluster in units of |Re r|, and points per unit.
_CLUSTER_HALF_WIDTH = 8.0
_CLUSTER_POINTS_PER_UNIT = 20
#: ω·T step of the uniform grid of a delay loop, rad.
DELAY_STEP_RAD = 0.1
#: At most this many uniform points for a delay; beyond it the spacing grows.
MAX_DELAY_POINTS = 20_000
#: A loop gain this far (relative) below what matters is negligible: 60 dB.
NEGLIGIBLE_GAIN = 1e-3


def imaginary_axis_frequencies(zpk: Zpk) -> FloatArray:
    """Distinct frequencies ω > 0 (rad/s) of the zeros and poles on the imaginary axis."""
    roots = np.concatenate([zpk.zeros, zpk.poles])
    on_axis = (np.abs(roots.real) <= AXIS_RTOL * np.abs(roots)) & (roots.imag > 0)
    return np.unique(roots[on_axis].imag)


def characteristic_frequencies(loop: Loop, *, with_delay: bool = True) -> FloatArray:
    """Frequencies (rad/s) where the loop's behaviour changes.

    The magnitudes of the non-zero roots, the asymptotic gain crossovers ``|c0|^(1/m)`` of
    the low-frequency asymptote ``c0·s^(−m)`` and ``|k|^(1/r)`` of the high-frequency one
    ``k·s^(−r)``, and ``1/T`` for a delay ``T`` (when ``with_delay``).
    """
    rat = loop.rational
    roots = np.concatenate([rat.zeros, rat.poles])
    chars = list(np.abs(roots[roots != 0]))
    if rat.gain != 0:
        m = rat.origin_poles
        if m != 0:
            chars.append(abs(rat.low_frequency_coefficient()) ** (1.0 / m))
        rd = rat.relative_degree
        if rd != 0:
            chars.append(abs(rat.gain) ** (1.0 / rd))
    if with_delay and loop.has_delay:
        chars.append(1.0 / loop.delay_s)
    arr = np.asarray(chars, dtype=float)
    return arr[np.isfinite(arr) & (arr > 0)]


def frequency_range(loop: Loop) -> tuple[float, float]:
    """Log-grid limits (rad/s): two decades beyond the characteristic frequencies and at
    least ``[1e-4, 1e4]·scale``, ``scale`` their geometric centre (1 rad/s if none)."""
    chars = characteristic_frequencies(loop)
    if chars.size == 0:
        return 1e-4, 1e4
    low, high = float(chars.min()), float(chars.max())
    scale = math.sqrt(low * high)
    return min(low / 100.0, 1e-4 * scale), max(high * 100.0, 1e4 * scale)


#: Frequencies evaluated per block by the vectorised evaluators (points × roots matrices).
_CHUNK = 2048


def _blocks(w: FloatArray) -> list[slice]:
    return [slice(i, i + _CHUNK) for i in range(0, max(w.size, 1), _CHUNK)]


def log_magnitude(zpk: Zpk, w_rad_s: FloatArray) -> FloatArray:
    """``ln|G(jω)|`` summed factor by factor (no overflow for high orders).

    Vectorised over the roots: one ``ln|jω − r|`` matrix per block of frequencies.
    """
    w = np.asarray(w_rad_s, dtype=float)
    flat = w.ravel()
    out = np.full(flat.shape, math.log(abs(zpk.gain)) if zpk.gain != 0 else -math.inf)
    if zpk.gain == 0 or (zpk.zeros.size == 0 and zpk.poles.size == 0):
        return out.reshape(w.shape)
    roots = np.concatenate([zpk.zeros, zpk.poles])
    sign = np.concatenate([np.ones(zpk.zeros.size), -np.ones(zpk.poles.size)])
    with np.errstate(divide="ignore", invalid="ignore"):
        for blk in _blocks(flat):
            terms = np.log(np.abs(1j * flat[blk, None] - roots[None, :]))
            # ±inf terms (ω on a root) must not meet as inf − inf in a dot product.
            finite = np.isfinite(terms)
            if finite.all():
                out[blk] += terms @ sign
            else:
                out[blk] += np.where(finite, terms, 0.0) @ sign
                out[blk] += np.where(~finite, terms * sign, 0.0).sum(axis=1)
    return out.reshape(w.shape)


def phase(zpk: Zpk, w_rad_s: FloatArray) -> FloatArray:
    """Continuous phase of ``G(jω)`` for ω ≥ 0 (rad), as :meth:`Zpk.phase_rad`.

    Same branches per factor (``π − atan2(ω − Im r, Re r)`` for a right-half-plane root),
    vectorised over the roots.
    """
    w = np.asarray(w_rad_s, dtype=float)
    flat = w.ravel()
    out = np.full(flat.shape, -math.pi if zpk.gain < 0 else 0.0)
    roots = np.concatenate([zpk.zeros, zpk.poles])
    if roots.size == 0:
        return out.reshape(w.shape)
    sign = np.concatenate([np.ones(zpk.zeros.size), -np.ones(zpk.poles.size)])
    rhp = roots.real > 0
    for blk in _blocks(flat):
        dw = flat[blk, None] - roots.imag[None, :]
        ang = np.where(rhp, math.pi - np.arctan2(dw, roots.real), np.arctan2(dw, -roots.real))
        out[blk] += ang @ sign
    return out.reshape(w.shape)


def response(zpk: Zpk, w_rad_s: FloatArray) -> NDArray[np.complex128]:
    """``G(jω)`` evaluated factor by factor, vectorised over the roots.

    Each zero is paired with a pole, ``(jω − z)/(jω − p)``, before the product is taken, so
    the intermediate values stay near the result's size (no overflow at high orders).
    """
    w = np.asarray(w_rad_s, dtype=float)
    flat = w.ravel()
    out = np.full(flat.shape, zpk.gain, dtype=complex)
    z, p = zpk.zeros, zpk.poles
    m = min(z.size, p.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        for blk in _blocks(flat):
            s = 1j * flat[blk, None]
            parts = [(s - z[None, :m]) / (s - p[None, :m])]
            if p.size > m:
                parts.append(1.0 / (s - p[None, m:]))
            if z.size > m:
                parts.append(s - z[None, m:])
            out[blk] *= np.prod(np.concatenate(parts, axis=1), axis=1)
    return out.reshape(w.shape)


def magnitude_bound(zpk: Zpk, r: float) -> float:
    """An upper bound of ``|G(s)|`` over every complex ``s`` with ``|s| = r > max|p|``.

    ``|G(s)| ≤ |k|·r^(−rd)·Π(1 + |z|/r) / Π(1 − |p|/r)``; for a proper ``G`` it decreases
    towards ``|G(∞)|`` as ``r`` grows (strictly for ``rd ≥ 1``).
    """
    pm = np.abs(zpk.poles)
    if r <= (pm.max() if pm.size else 0.0):
        return math.inf
    log_b = (math.log(abs(zpk.gain)) - zpk.relative_degree * math.log(r)
             + float(np.sum(np.log1p(np.abs(zpk.zeros) / r)))
             - float(np.sum(np.log1p(-pm / r))))
    return math.exp(min(log_b, 700.0))


def bound_frequency(zpk: Zpk, level: float) -> float | None:
    """A frequency beyond which ``|G(s)| ≤ level`` for every ``|s| ≥`` it (rad/s).

    Found by doubling from ``2·max|root|`` on :func:`magnitude_bound`, so it overshoots
    the smallest such radius by at most a factor 2.  None when ``|G|`` does not fall below
    ``level`` (biproper with ``|G(∞)| ≥ level``, or improper); 0 when ``G = 0``.
    """
    if zpk.gain == 0:
        return 0.0
    if zpk.relative_degree < 0 or (zpk.relative_degree == 0 and abs(zpk.gain) >= level):
        return None
    roots = np.abs(np.concatenate([zpk.zeros, zpk.poles]))
    r = max(2.0 * float(roots.max()) if roots.size else 0.0, 1e-300)
    while r < 1e300:
        if magnitude_bound(zpk, r) <= level:
            return r
        r *= 2.0
    return None


def delay_grid_end(loop: Loop) -> float:
    """Where the grid of a delay loop ends (rad/s), at least two turns of the delay phase.

    Beyond it :func:`magnitude_bound` guarantees ``|L| ≤ 1e−3·min(1, max|L|)`` for a
    strictly proper rational part (crossings there are at least 60 dB from mattering);
    for a biproper one, whose ``|L|`` tends to ``|k| = |L(j∞)| < 1`` while the delay keeps
    turning it, ``|L| ≤ min(1.01·|k|, (1 + |k|)/2)``: no gain crossing lies beyond, and
    phase crossings there are within 0.09 dB of the limit carried by the ω = ∞ entry.
    """
    rat = loop.rational
    lo, hi = frequency_range(loop)
    log_grid = np.logspace(math.log10(lo), math.log10(hi), 400)
    peak = float(np.max(np.exp(log_magnitude(rat, log_grid)))) if rat.gain != 0 else 0.0
    level = NEGLIGIBLE_GAIN * min(1.0, peak) if peak > 0 else NEGLIGIBLE_GAIN
    if rat.relative_degree == 0:
        k = abs(rat.gain)
        level = max(level, min(1.01 * k, 0.5 * (1.0 + k)))
    w_neg = bound_frequency(rat, level)
    if w_neg is None:                                   # improper or neutral
        w_neg = hi
    return max(w_neg, 4.0 * math.pi / loop.delay_s)


def span_points(loop: Loop, lo: float, hi: float,
                points_per_decade: int = DEFAULT_POINTS_PER_DECADE) -> FloatArray:
    """Log points and uniform delay points (``Δω·T = 0.1``, at most 20 000) in (lo, hi]."""
    n = int(math.ceil(points_per_decade * math.log10(hi / lo))) + 1
    parts = [np.logspace(math.log10(lo), math.log10(hi), n)[1:]]
    if loop.has_delay:
        u = _uniform_delay_points(loop.delay_s, hi - lo, MAX_DELAY_POINTS) + lo
        parts.append(u[u <= hi])
    return np.unique(np.concatenate(parts))


def _resonance_points(zpk: Zpk, lo: float, offsets: FloatArray,
                      approach: FloatArray) -> list[FloatArray]:
    """Clusters ``Im r + |Re r|·offsets`` across lightly damped roots, and points
    ``Im r·(1 ± approach)`` on both sides of imaginary-axis roots."""
    out: list[FloatArray] = []
    roots = np.concatenate([zpk.zeros, zpk.poles])
    for r in np.unique(roots[roots.imag > 0]):
        sigma, b = abs(r.real), r.imag
        if sigma <= AXIS_RTOL * abs(r):
            out.append(b * (1.0 - approach))
            out.append(b * (1.0 + approach))
        elif sigma < LIGHT_DAMPING * abs(r):
            out.append(b + sigma * offsets)
    return [x[x >= lo] for x in out]


def _uniform_delay_points(delay_s: float, end: float, max_points: int) -> FloatArray:
    step = max(DELAY_STEP_RAD / delay_s, end / max_points)
    return np.arange(1, int(end / step) + 1) * step


def _finish(parts: list[FloatArray], zpk: Zpk, lo: float, hi: float) -> FloatArray:
    w = np.unique(np.concatenate(parts))
    w = w[(w >= lo) & (w <= hi)]
    # Never evaluate exactly on an imaginary-axis root (|L| is 0 or ∞ there).
    axis = imaginary_axis_frequencies(zpk)
    if axis.size:
        w = w[~np.isin(w, axis)]
    return w


def loop_grid(loop: Loop, points_per_decade: int = DEFAULT_POINTS_PER_DECADE) -> FloatArray:
    """The analysis grid of a loop: sorted, unique frequencies ω > 0 in rad/s.

    A log grid over :func:`frequency_range` with ``points_per_decade``; a cluster with
    spacing ``|Re r|/20`` over ``Im r ± 8|Re r|`` for every root with damping ratio below
    0.3; points at relative distances 1e−12 … 1e−1 on both sides of every imaginary-axis
    root (never the root itself).  For a delay loop the grid ends at
    :func:`delay_grid_end` and holds uniform points with ``Δω·T = 0.1`` (coarser if that
    would exceed 20 000 points).
    """
    rat = loop.rational
    lo, hi = frequency_range(loop)
    if loop.has_delay:
        hi = delay_grid_end(loop)
    n_cluster = int(2 * _CLUSTER_HALF_WIDTH * _CLUSTER_POINTS_PER_UNIT) + 1
    parts = [np.array([lo]), span_points(loop, lo, hi, points_per_decade),
             *_resonance_points(
                 rat, lo, np.linspace(-_CLUSTER_HALF_WIDTH, _CLUSTER_HALF_WIDTH, n_cluster),
                 np.logspace(-12, -1, 111))]
    return _finish(parts, rat, lo, hi)


def plot_range(loop: Loop) -> tuple[float, float]:
    """Plot limits (rad/s): two decades beyond the characteristic frequencies."""
    chars = characteristic_frequencies(loop)
    if chars.size == 0:
        return 1e-2, 1e2
    return float(chars.min()) / 100.0, float(chars.max()) * 100.0


def plot_grid(loop: Loop, max_points: int = 2000) -> FloatArray:
    """A moderate grid for plots (at most ``max_points`` frequencies, rad/s).

    Same construction as :func:`loop_grid` with fewer points: at most 1200 log points over
    :func:`plot_range`, 41 points across each lightly damped root (densest at its peak,
    reaching ±10·|Re r|), and for a delay loop up to 400 uniform points until ``|L|``
    falls below 0.01.
    """
    rat = loop.rational
    lo, hi = plot_range(loop)
    decades = math.log10(hi / lo)
    n = int(min(100.0 * decades, 1200.0)) + 1
    parts = [np.logspace(math.log10(lo), math.log10(hi), n),
             *_resonance_points(rat, lo, np.sinh(np.linspace(-3.0, 3.0, 41)),
                                np.logspace(-6, -1, 11))]
    if loop.has_delay:
        end = bound_frequency(rat, 0.01) or hi
        parts.append(_uniform_delay_points(loop.delay_s, min(end, hi), 400))
    w = _finish(parts, rat, lo, hi)
    if w.size > max_points:
        w = w[np.unique(np.linspace(0, w.size - 1, max_points).round().astype(int))]
    return w
