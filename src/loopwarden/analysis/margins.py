"""Gain, phase and delay margins over every crossing of the loop.

Crossings are located as sign changes on :func:`~.frequency_grid.loop_grid` and refined
on continuous functions of ``u = ln ω`` by a bracketing solver run on all brackets at
once (a few bisections, then Illinois false position: the root never leaves its
bracket, as with ``scipy.optimize.brentq``, but a delay loop's hundreds of crossings cost
one vectorised evaluation per iteration instead of a Python loop):

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
from collections.abc import Callable, Sequence

import numpy as np

from ..lti import FloatArray, Loop, Zpk
from . import frequency_grid
from .frequency_grid import (
    bound_frequency,
    imaginary_axis_frequencies,
    log_magnitude,
    loop_grid,
    magnitude_bound,
    span_points,
)
from .frequency_grid import phase as loop_phase
from .results import GainCrossing, Margins, PhaseCrossing

__all__ = ["bracketed_roots", "compute_margins", "dedupe", "endpoint_crossings",
           "gain_crossing_list", "gain_crossings_on", "gain_crossover_frequencies",
           "margins_from_crossings",
           "phase_crossing", "phase_crossings_on", "phase_crossover_frequencies", "plot_grid",
           "valid_steps", "wrap_phase_margin_deg"]

#: Tolerance of the crossing refinement in u = ln ω (so relative in ω).
_XTOL = 1e-14
_BISECTIONS = 6
_MAX_ITER = 200
#: Crossings closer than this (relative) are one crossing found from two grid steps.
_SAME_CROSSING_RTOL = 1e-9


def wrap_phase_margin_deg(phase_deg: FloatArray | float) -> FloatArray:
    """``180° + phase`` wrapped to (−180°, 180°]."""
    x = 180.0 + np.asarray(phase_deg, dtype=float)
    return x - 360.0 * np.ceil((x - 180.0) / 360.0)


def bracketed_roots(fn: Callable[[FloatArray, FloatArray], FloatArray],
                    a: FloatArray, b: FloatArray, xtol: float = _XTOL, *,
                    bisections: int = _BISECTIONS, max_iter: int = _MAX_ITER) -> FloatArray:
    """Roots of ``fn(u, i)`` in every bracket ``[a_i, b_i]``, all brackets at once.

    ``fn(u, i)`` evaluates the function of bracket ``i`` (integer array) at ``u``; each
    bracket must hold a sign change or a zero at an end.  ``bisections`` bisections (none
    for brackets already short, e.g. a sweep's grid steps), then Illinois false position,
    at most ``max_iter`` steps in all; the iterate never leaves the bracket.  Converged when
    a step moves less than ``xtol·max(1, |u|)``.
    """
    a = np.array(a, dtype=float)
    b = np.array(b, dtype=float)
    n = a.size
    everyone = np.arange(n)
    fa, fb = fn(a, everyone), fn(b, everyone)
    root = np.where(fa == 0, a, np.where(fb == 0, b, 0.5 * (a + b)))
    active = (fa != 0) & (fb != 0)
    side = np.zeros(n, dtype=int)
    for it in range(max_iter):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        ai, bi, fai, fbi = a[idx], b[idx], fa[idx], fb[idx]
        mid = 0.5 * (ai + bi)
        if it < bisections:
            c = mid
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                c = (ai * fbi - bi * fai) / (fbi - fai)
            outside = ~np.isfinite(c) | (c <= np.minimum(ai, bi)) | (c >= np.maximum(ai, bi))
            c = np.where(outside, mid, c)
        fc = fn(c, idx)
        step = np.abs(c - root[idx])
        root[idx] = c
        hit = fc == 0
        same_b = (np.sign(fc) == np.sign(fbi)) & ~hit
        same_a = ~same_b & ~hit
        # Illinois: halve the value kept at the end that did not move twice in a row.
        fa[idx[same_b & (side[idx] == -1)]] *= 0.5
        fb[idx[same_a & (side[idx] == 1)]] *= 0.5
        b[idx[same_b]], fb[idx[same_b]] = c[same_b], fc[same_b]
        a[idx[same_a]], fa[idx[same_a]] = c[same_a], fc[same_a]
        side[idx[same_b]] = -1
        side[idx[same_a]] = 1
        width = np.abs(b[idx] - a[idx])
        tol = xtol * np.maximum(1.0, np.abs(c))
        converged = hit | (width <= tol) | ((it >= bisections) & (step <= tol))
        active[idx[converged]] = False
    return root


def valid_steps(w: FloatArray, axis: FloatArray) -> FloatArray:
    """Mask of grid steps ``[w_i, w_{i+1}]`` that contain no imaginary-axis root."""
    seg = np.searchsorted(axis, w)
    return seg[:-1] == seg[1:]


def dedupe(w: FloatArray) -> FloatArray:
    """Sorted frequencies with those within a relative 1e−9 of the previous one dropped."""
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
    return gain_crossings_on(lambda x: log_magnitude(rat, x), w,
                             valid_steps(w, imaginary_axis_frequencies(rat)))


def gain_crossings_on(log_mag: Callable[[FloatArray], FloatArray], w: FloatArray,
                      valid: FloatArray) -> FloatArray:
    """Roots of the continuous ``log_mag`` (``ln|L|``) inside the span of grid ``w``.

    ``w`` is ascending and positive (rad/s, or rad for a sampled loop's ``φ = ωT``);
    ``valid`` masks the grid steps that may hold a crossing (:func:`valid_steps`).  Steps
    with a non-finite end are skipped.  Returns the roots ascending, deduplicated.
    """
    f = log_mag(w)
    above = f > 0
    steps = valid & (above[:-1] != above[1:]) & np.isfinite(f[:-1]) & np.isfinite(f[1:])
    idx = np.flatnonzero(steps)

    def fn(u: FloatArray, _: FloatArray) -> FloatArray:
        return log_mag(np.exp(u))

    return dedupe(np.exp(bracketed_roots(fn, np.log(w[idx]), np.log(w[idx + 1]))))


def phase_crossings_on(phase: Callable[[FloatArray], FloatArray], w: FloatArray,
                       valid: FloatArray | None = None) -> FloatArray:
    """Every point where the continuous ``phase`` (rad) passes −π mod 2π within grid ``w``.

    ``w`` is ascending and positive; ``valid`` (optional) masks the grid steps that may
    hold a crossing.  A step in which the phase turns several times yields every
    crossing.  Returned in grid-step order, not deduplicated.
    """
    g = (phase(w) + math.pi) / (2.0 * math.pi)
    lo = np.minimum(g[:-1], g[1:])
    hi = np.maximum(g[:-1], g[1:])
    # Integers n with lo < n ≤ hi: each is one crossing of the phase through −π + 2πn.
    first = np.floor(lo) + 1.0
    count = np.floor(hi) - first + 1.0
    if valid is not None:
        count[~valid] = 0.0
    count = np.maximum(count, 0.0).astype(int)
    step = np.repeat(np.arange(count.size), count)
    offsets = np.arange(step.size) - np.repeat(np.cumsum(count) - count, count)
    targets = first[step] + offsets

    def fn(u: FloatArray, i: FloatArray) -> FloatArray:
        return (phase(np.exp(u)) + math.pi) / (2.0 * math.pi) - targets[i]

    return np.exp(bracketed_roots(fn, np.log(w[step]), np.log(w[step + 1])))


def _phase_crossings_on(rat: Zpk, delay_s: float, w: FloatArray) -> FloatArray:
    """Phase crossings inside the span of grid ``w`` (rad/s)."""
    return phase_crossings_on(lambda x: loop_phase(rat, x) - x * delay_s, w,
                              valid_steps(w, imaginary_axis_frequencies(rat)))


def phase_crossover_frequencies(loop: Loop, w: FloatArray | None = None) -> FloatArray:
    """Frequencies 0 < ω < ∞ (rad/s) where ∠L = −180° mod 360°, ascending.

    Every one for a rational loop.  For a delay loop, whose crossings never end, the grid
    is extended until :func:`~.frequency_grid.magnitude_bound` shows that every crossing
    beyond it has ``|L|`` no larger than the largest ``|L| ≤ 1`` found, so the upper gain
    margin is decided by a listed crossing.
    """
    rat = loop.rational
    if rat.gain == 0:
        return np.zeros(0)
    if w is None:
        w = loop_grid(loop)
    found = [_phase_crossings_on(rat, loop.delay_s, w)]
    end = float(w[-1])
    while loop.has_delay and rat.relative_degree > 0:
        mags = np.exp(log_magnitude(rat, np.concatenate(found)))
        upper = mags[mags <= 1.0]
        m_up = float(upper.max()) if upper.size else 0.0
        if m_up > 0 and m_up >= magnitude_bound(rat, end):
            break
        new_end = (bound_frequency(rat, m_up) if m_up > 0 else None) or 2.0 * end
        new_end = max(new_end, 1.01 * end)
        if new_end > 1e300:
            break
        ext = np.concatenate([[end], span_points(loop, end, new_end)])
        found.append(_phase_crossings_on(rat, loop.delay_s, ext))
        end = new_end
    return dedupe(np.concatenate(found))


def endpoint_crossings(loop: Loop) -> list[PhaseCrossing]:
    """Phase crossings at ω = 0 and ω = ∞ where L is finite and negative real there.

    For a biproper rational part with a delay, ``L(jω)`` keeps turning with ``|L| → |k|``;
    the crossings accumulate at ω = ∞ and the entry there carries that limit.
    """
    rat = loop.rational
    out = []
    if rat.origin_poles == 0:
        c0 = rat.low_frequency_coefficient()
        if c0 < 0:
            out.append(phase_crossing(0.0, abs(c0)))
    if rat.relative_degree == 0 and (loop.has_delay or rat.gain < 0):
        out.append(phase_crossing(math.inf, abs(rat.gain)))
    return out


def phase_crossing(w: float, magnitude: float) -> PhaseCrossing:
    """The crossing at ``w`` (rad/s) with ``|L| = magnitude``; GM ``inf`` where |L| = 0."""
    gm_db = -20.0 * math.log10(magnitude) if magnitude > 0 else math.inf
    return PhaseCrossing(frequency_rad_s=w, magnitude=magnitude, gain_margin_db=gm_db)


def gain_crossing_list(w_gc: FloatArray, phase_rad: FloatArray) -> tuple[GainCrossing, ...]:
    """A :class:`GainCrossing` per frequency ``w_gc`` (rad/s) with ``∠L = phase_rad`` there.

    Phase margin ``180° + ∠L`` wrapped to (−180°, 180°]; delay margin
    ``(PM mod 360°)[rad]/ω`` (s).
    """
    pm = wrap_phase_margin_deg(np.degrees(phase_rad))
    dm = np.radians(np.mod(pm, 360.0)) / w_gc if w_gc.size else np.zeros(0)
    return tuple(GainCrossing(frequency_rad_s=float(x), phase_margin_deg=float(p),
                              delay_margin_s=float(d)) for x, p, d in zip(w_gc, pm, dm,
                                                                          strict=True))


def margins_from_crossings(gains: Sequence[GainCrossing], phases: Sequence[PhaseCrossing],
                           *, listed_above: float | None = None,
                           period_s: float | None = None) -> Margins:
    """The loop's margins chosen from its crossings (conventions of :func:`compute_margins`).

    ``phases`` in the order to list them.  ``listed_above``: list only the phase crossings
    with ``|L|`` at least this factor times that of the crossing setting the upper margin
    (the selection itself uses them all).  ``period_s``: a sampled loop's period, for
    ``delay_margin_samples``.
    """
    upper = [c for c in phases if c.magnitude <= 1.0]
    lower = [c for c in phases if c.magnitude > 1.0]
    gm = min(upper, key=lambda c: c.gain_margin_db) if upper else None
    gm_low = max(lower, key=lambda c: c.gain_margin_db) if lower else None
    if listed_above is not None and gm is not None:
        phases = [c for c in phases if c.magnitude >= listed_above * gm.magnitude]
    # The wrapped margin is the smallest phase rotation, either way, that reaches −1 at that
    # crossing; the loop's margin is the crossing where that rotation is smallest.
    worst = min(gains, key=lambda c: abs(c.phase_margin_deg)) if gains else None
    dm_s = min((c.delay_margin_s for c in gains), default=math.inf)
    return Margins(
        gain_margin_db=gm.gain_margin_db if gm else math.inf,
        gain_margin_lower_db=gm_low.gain_margin_db if gm_low else None,
        phase_margin_deg=worst.phase_margin_deg if worst else math.inf,
        gain_crossover_rad_s=worst.frequency_rad_s if worst else None,
        phase_crossover_rad_s=gm.frequency_rad_s if gm else None,
        delay_margin_s=dm_s,
        gain_crossings=tuple(gains),
        phase_crossings=tuple(phases),
        delay_margin_samples=dm_s / period_s if period_s is not None else None,
    )


def compute_margins(loop: Loop, w: FloatArray | None = None) -> Margins:
    """Gain, phase and delay margins of ``L = C·P·H·e^(−sT)`` over every crossing.

    ``w`` is the analysis grid (rad/s; default :func:`~.frequency_grid.loop_grid`), passed
    in when the caller has it already.

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
    distance to instability only for a stable loop.  A delay loop has infinitely many
    phase crossings; those listed are the ones whose ``|L|`` is at least 1e−3 times that
    of the crossing setting the upper margin (the others are more than 60 dB from
    mattering), found as :func:`phase_crossover_frequencies` describes.
    """
    from .loop_figures import loop_margins
    from .loop_response import ContinuousResponse

    return loop_margins(ContinuousResponse(loop), w)


def plot_grid(loop: Loop) -> FloatArray:
    """Frequencies (rad/s) for the open-loop plots: at most 2000, resonances resolved."""
    return frequency_grid.plot_grid(loop)
