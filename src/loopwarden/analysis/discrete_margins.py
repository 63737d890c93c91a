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
:func:`~loopwarden.lti_discrete.unit_circle_phase_rad`, with the same bracketing solver
as the continuous margins.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import optimize

from ..lti import ComplexArray, FloatArray, Zpk
from ..lti_discrete import (
    DiscreteLoop,
    at_z_one,
    unit_circle_log_magnitude,
    unit_circle_phase_rad,
)
from .margins import (
    dedupe,
    gain_crossing_list,
    gain_crossings_on,
    margins_from_crossings,
    phase_crossing,
    phase_crossings_on,
    valid_steps,
)
from .results import Margins, Sensitivity
from .sensitivity import (
    PEAK_FUNCTIONS,
    peak_candidates,
    peak_values_at,
    sensitivity_from_peaks,
)

__all__ = ["closed_loop_bandwidth", "compute_discrete_margins",
           "compute_discrete_sensitivity", "refined_peak", "unit_circle_grid"]

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
    vals = fn(l_of_w(w))
    best_val, best_w = -math.inf, float(w[0])
    for at, value in ends:
        if value > best_val:
            best_val, best_w = value, at
    if not np.all(np.isfinite(vals)):
        i = int(np.flatnonzero(~np.isfinite(vals))[0])
        return math.inf, float(w[i])
    floor = best_val * (1.0 + 1e-12) if best_val > -math.inf else -math.inf
    u = np.log(w)

    def neg(x: float) -> float:
        return -float(fn(l_of_w(np.array([math.exp(x)])))[0])

    for i in peak_candidates(vals):
        if vals[i] > max(best_val, floor):
            best_val, best_w = float(vals[i]), float(w[i])
        a, b = u[max(i - 1, 0)], u[min(i + 1, u.size - 1)]
        if b <= a:
            continue
        res = optimize.minimize_scalar(neg, bounds=(a, b), method="bounded",
                                       options={"xatol": 1e-12})
        if -res.fun > max(best_val, floor):
            best_val, best_w = float(-res.fun), float(math.exp(res.x))
    return best_val, best_w


def _on_circle_angles(zpk: Zpk) -> FloatArray:
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
    axis = _on_circle_angles(zpk)
    if axis.size:
        phi = phi[~np.isin(phi, axis)]
    return phi


def _interior(phi: FloatArray) -> FloatArray:
    return phi[phi < math.pi * (1.0 - _NYQUIST_GAP)]


def _gain_crossings(rat: Zpk, phi: FloatArray) -> FloatArray:
    return gain_crossings_on(lambda p: unit_circle_log_magnitude(rat, p), phi,
                             valid_steps(phi, _on_circle_angles(rat)))


def _phase_crossings(rat: Zpk, phi: FloatArray) -> FloatArray:
    return dedupe(phase_crossings_on(lambda p: unit_circle_phase_rad(rat, p), phi,
                                     valid_steps(phi, _on_circle_angles(rat))))


def _real_value(rat: Zpk, z: float) -> float | None:
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
    rat = loop.rational
    T = loop.period_s
    if rat.gain == 0:
        return Margins(gain_margin_db=math.inf, gain_margin_lower_db=None,
                       phase_margin_deg=math.inf, gain_crossover_rad_s=None,
                       phase_crossover_rad_s=None, delay_margin_s=math.inf, gain_crossings=(),
                       phase_crossings=(), delay_margin_samples=math.inf)
    phi = _interior(unit_circle_grid(rat))
    phi_gc = list(_gain_crossings(rat, phi))
    l_pi = _real_value(rat, -1.0)
    if l_pi is not None and abs(math.log(abs(l_pi))) <= 1e-9:
        phi_gc.append(math.pi)                       # |L| = 1 exactly at the Nyquist frequency
    phi_gc_arr = np.asarray(phi_gc, dtype=float)
    gains = gain_crossing_list(phi_gc_arr / T, unit_circle_phase_rad(rat, phi_gc_arr))

    phi_pc = _phase_crossings(rat, phi)
    mags = np.exp(unit_circle_log_magnitude(rat, phi_pc))
    phases = [phase_crossing(float(p / T), float(m)) for p, m in zip(phi_pc, mags, strict=True)]
    l_one = _real_value(rat, 1.0)
    if l_one is not None and l_one < 0:
        phases.append(phase_crossing(0.0, abs(l_one)))
    if l_pi is not None and l_pi < 0:
        phases.append(phase_crossing(math.pi / T, abs(l_pi)))
    phases.sort(key=lambda c: c.frequency_rad_s)
    return margins_from_crossings(gains, phases, period_s=T)


def _end_values(rat: Zpk, z: float) -> tuple[float, float, float]:
    """``(|S|, |T|, |S − 1/2|)`` at z = ±1 (a pole there: L infinite; a zero: L = 0)."""
    if np.any(np.abs(rat.poles - z) <= 1e-12) and not np.any(np.abs(rat.zeros - z) <= 1e-12):
        return 0.0, 1.0, 0.5
    value = _real_value(rat, z)
    if value is None:
        return 1.0, 0.0, 0.5
    return peak_values_at(value)


def compute_discrete_sensitivity(loop: DiscreteLoop) -> Sensitivity:
    """Ms, Mt and the balanced disk margin over ω ∈ [0, π/T] (both ends exact).

    A peak at the Nyquist frequency is reported at π/T (not ``inf``: the response repeats
    beyond it).  Conventions otherwise as
    :func:`~loopwarden.analysis.sensitivity.compute_sensitivity`.
    """
    rat = loop.rational
    T = loop.period_s

    def l_of_w(x: FloatArray) -> ComplexArray:
        return rat(np.exp(1j * np.asarray(x, dtype=float) * T))

    w = _interior(unit_circle_grid(rat)) / T
    zero, high = _end_values(rat, 1.0), _end_values(rat, -1.0)
    nyquist = math.pi / T

    s_mag, t_mag, d_mag = PEAK_FUNCTIONS
    s_peak = refined_peak(s_mag, w, l_of_w, ((0.0, zero[0]), (nyquist, high[0])))
    t_peak = refined_peak(t_mag, w, l_of_w, ((0.0, zero[1]), (nyquist, high[1])))
    d_max, _ = refined_peak(d_mag, w, l_of_w, ((0.0, zero[2]), (nyquist, high[2])))
    return sensitivity_from_peaks(s_peak, t_peak, d_max)


def closed_loop_bandwidth(loop: DiscreteLoop) -> float | None:
    """Lowest ω (rad/s) where ``|T(e^{jωT})|`` falls to ``|T(1)|/√2`` (−3 dB), T = L/(1+L).

    None when it stays above that level up to the Nyquist frequency, or when ``T(1) = 0``
    (no transmission at DC, so no low-frequency level to fall from).
    """
    rat = loop.rational
    T = loop.period_s
    t_dc = _end_values(rat, 1.0)[1]
    if not t_dc > 0 or not math.isfinite(t_dc):
        return None
    level = t_dc / math.sqrt(2.0)
    phi = unit_circle_grid(rat)

    def t_abs(p: FloatArray) -> FloatArray:
        lv = rat(np.exp(1j * p))
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.abs(lv / (1.0 + lv))

    below = np.flatnonzero(t_abs(phi) < level)
    if below.size == 0:
        return None
    k = int(below[0])
    if k == 0:
        return float(phi[0] / T)

    def g(u: float) -> float:
        return float(t_abs(np.array([math.exp(u)]))[0] - level)

    u = optimize.brentq(g, math.log(phi[k - 1]), math.log(phi[k]), xtol=1e-14, rtol=1e-14)
    return float(math.exp(u) / T)
