"""The one peak refiner: suprema of functions of a loop's frequency response.

Every peak the analysis reports (|S|, |T|, |S − 1/2|, |K·S|, a disturbance gain) is found
the same way: the function is evaluated on the loop's analysis grid, the largest grid
maxima (and every one within 0.1 % of the best: the grid value of a peak is low by its
curvature times the squared spacing, never by more) are refined between their grid
neighbours by bounded scalar maximisation in ``ln ω``, and values known exactly at the ends
of the frequency range (ω = 0, ω = ∞ or the Nyquist frequency) compete with the interior:
an interior value must beat them by more than rounding (1e−12, relative) to replace them.

The scalar maximiser between neighbours is golden section, run on all brackets of all
functions at once (one evaluation of L per step: ``method="golden"``), or scipy's bounded
Brent minimiser per bracket (``method="brent"``).  Both stop at the tolerance of
``scipy.optimize.minimize_scalar(method="bounded", xatol=1e−12)``.  The peak values agree
to rounding, but where a flat peak lies is decided only to about 1e−8 (relative) by
function values (the value changes by rounding over that width), so the two place it a
few 1e−8 apart.  Each caller keeps the maximiser it had, so that the reported peak
frequencies stay as they were: golden for the continuous |S|, |T|, |S − 1/2|; Brent for
the sampled and measured loops and for the effort and disturbance peaks.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
from numpy.typing import NDArray
from scipy import optimize

from ..lti import ComplexArray, FloatArray

__all__ = ["golden_max", "peak_candidates", "refined_peaks"]

#: How many of the largest grid maxima are refined at least, and at most.
_CANDIDATES = 6
_MAX_CANDIDATES = 12
_XATOL = 1e-12
_TIE_RTOL = 1e-12
#: Golden-section steps at most (each shrinks a bracket by 0.618).
_MAX_GOLDEN = 100

PeakFunction = Callable[[ComplexArray], FloatArray]
#: Exact values at the ends of the range: ``(frequency, value)`` pairs.
EndValues = Sequence[tuple[float, float]]


def peak_candidates(vals: FloatArray) -> NDArray[np.int_]:
    """Grid maxima to refine: the largest few and any other within 0.1 % of the best."""
    interior = np.flatnonzero(np.r_[True, vals[1:] >= vals[:-1]]
                              & np.r_[vals[:-1] >= vals[1:], True])
    ranked = interior[np.argsort(vals[interior])[::-1]]
    close = vals[ranked] >= 0.999 * vals[ranked[0]] if ranked.size else ranked.astype(bool)
    keep = np.arange(ranked.size) < _CANDIDATES
    return ranked[(keep | close)][:_MAX_CANDIDATES]


def golden_max(fn: Callable[[FloatArray], FloatArray], a: FloatArray,
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


def _refine_golden(fns: Sequence[PeakFunction], brackets: list[tuple[FloatArray, FloatArray]],
                   l_of_w: Callable[[FloatArray], ComplexArray]
                   ) -> list[tuple[FloatArray, FloatArray]]:
    """Every bracket of every function refined together: one evaluation of L per step."""
    owner = np.concatenate([np.full(a.size, k) for k, (a, _) in enumerate(brackets)])
    a = np.concatenate([br[0] for br in brackets])
    b = np.concatenate([br[1] for br in brackets])
    live = b > a
    ru, rf = np.zeros(a.size), np.full(a.size, -np.inf)
    if live.any():
        own = owner[live]
        groups = [(fn, np.flatnonzero(own == k)) for k, fn in enumerate(fns)]
        groups = [(fn, sel) for fn, sel in groups if sel.size]

        def many(x: FloatArray) -> FloatArray:
            lv = l_of_w(np.exp(x))
            out = np.empty(x.size)
            for fn, sel in groups:
                out[sel] = fn(lv[sel])
            return out

        ru[live], rf[live] = golden_max(many, a[live], b[live])
    return [(ru[owner == k], rf[owner == k]) for k in range(len(brackets))]


def _refine_brent(fns: Sequence[PeakFunction], brackets: list[tuple[FloatArray, FloatArray]],
                  l_of_w: Callable[[FloatArray], ComplexArray]
                  ) -> list[tuple[FloatArray, FloatArray]]:
    """Every bracket refined on its own by scipy's bounded minimiser (of −fn)."""
    out = []
    for fn, (a, b) in zip(fns, brackets, strict=True):
        ru, rf = np.zeros(a.size), np.full(a.size, -np.inf)

        def neg(x: float, fn: PeakFunction = fn) -> float:
            return -float(fn(l_of_w(np.array([math.exp(x)])))[0])

        for j in np.flatnonzero(b > a):
            res = optimize.minimize_scalar(neg, bounds=(a[j], b[j]), method="bounded",
                                           options={"xatol": _XATOL})
            ru[j], rf[j] = res.x, -res.fun
        out.append((ru, rf))
    return out


def refined_peaks(fns: Sequence[PeakFunction], w: FloatArray,
                  l_of_w: Callable[[FloatArray], ComplexArray], ends: Sequence[EndValues],
                  *, method: str = "golden") -> list[tuple[float, float]]:
    """Supremum of each ``fn(L(ω))`` and where it is attained (rad/s).

    ``w`` is the analysis grid (rad/s, ascending), ``l_of_w`` evaluates L at real
    frequencies, ``ends[i]`` the exact end values of ``fns[i]`` (may be empty).  A
    function that is infinite somewhere on the grid has the peak ``inf`` at the first such
    point.  ``method`` picks the scalar maximiser (module notes).
    """
    u = np.log(w)
    l_grid = l_of_w(w)
    vals_all = [fn(l_grid) for fn in fns]
    finite = [bool(np.all(np.isfinite(v))) for v in vals_all]
    live_fns = [fn for fn, ok in zip(fns, finite, strict=True) if ok]
    cands = [peak_candidates(v) for v, ok in zip(vals_all, finite, strict=True) if ok]
    brackets = [(u[np.maximum(i - 1, 0)], u[np.minimum(i + 1, u.size - 1)]) for i in cands]
    refine = _refine_golden if method == "golden" else _refine_brent
    refined = iter(refine(live_fns, brackets, l_of_w) if brackets else [])
    cand_iter = iter(cands)
    results: list[tuple[float, float]] = []
    for vals, ok, pairs in zip(vals_all, finite, ends, strict=True):
        best_val, best_w = -math.inf, float(w[0])
        for at, value in pairs:
            if value > best_val:
                best_val, best_w = value, at
        if not ok:
            results.append((math.inf, float(w[int(np.flatnonzero(~np.isfinite(vals))[0])])))
            continue
        floor = best_val * (1.0 + _TIE_RTOL) if best_val > -math.inf else -math.inf
        idx = next(cand_iter)
        ru, rf = next(refined)
        for j, i in enumerate(idx):
            if vals[i] > max(best_val, floor):
                best_val, best_w = float(vals[i]), float(w[i])
            if rf[j] > max(best_val, floor):
                best_val, best_w = float(rf[j]), float(math.exp(ru[j]))
        results.append((best_val, best_w))
    return results
