"""Ms, Mt and the disk margin of every sample at once: the grid maximum of each, refined
by parabolic steps where it lies (split from :mod:`.sweep_response`)."""

from __future__ import annotations

import math

import numpy as np

from ..lti import FloatArray
from .sweep_models import SampleLoops
from .sweep_response import (
    _PARABOLA_STEPS,
    _dc_coefficient,
    _origin_counts,
    _point_values,
    _relative_degree,
)


# --------------------------------------------------------------------------- peaks
def _peak_functions(lv: np.ndarray) -> tuple[FloatArray, FloatArray, FloatArray]:
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = 1.0 / np.abs(1.0 + lv)
        return inv, np.abs(lv) * inv, 0.5 * np.abs(1.0 - lv) * inv


def _complex(lm: FloatArray, ph: FloatArray) -> np.ndarray:
    return np.exp(lm + 1j * ph)


def _grid_peak_functions(mag: FloatArray, re: FloatArray,
                         im: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
    """:func:`_peak_functions` from ``|L|`` and the real and imaginary parts of L (real
    arithmetic only: cheaper than complex numbers on the whole grid)."""
    im2 = im * im
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = 1.0 / np.sqrt((1.0 + re) ** 2 + im2)
        return inv, mag * inv, 0.5 * np.sqrt((1.0 - re) ** 2 + im2) * inv


def _peaks(fam: SampleLoops, w: FloatArray, mag: FloatArray, re: FloatArray,
           im: FloatArray) -> dict[str, FloatArray]:
    """Ms, Mt and the disk margin per row: the three peaks refined in one search (their
    brackets stacked, so each step evaluates L once for all of them)."""
    n = fam.size
    u = np.log(w)
    values = _grid_peak_functions(mag, re, im)
    ends = _peak_limits(fam)
    rows = np.arange(n)
    js = [np.clip(np.argmax(vals, axis=1), 1, w.size - 2) for vals in values]
    stacked_rows = np.tile(rows, 3)
    which = np.repeat(np.arange(3), n)

    def fn(x: FloatArray) -> FloatArray:
        lm, ph = _point_values(fam, stacked_rows, np.exp(x))
        parts = _peak_functions(_complex(lm, ph))
        return np.choose(which, parts)

    def around(offset: int) -> tuple[FloatArray, FloatArray]:
        return (np.concatenate([u[j + offset] for j in js]),
                np.concatenate([vals[rows, j + offset] for vals, j in zip(values, js,
                                                                          strict=True)]))

    (ua, fa), (um, fm), (ub, fb) = around(-1), around(0), around(1)
    best = _parabolic_max(fn, ua, um, ub, fa, fm, fb).reshape(3, n)
    out = [np.maximum(np.max(vals, axis=1), np.maximum(best[k], ends[k]))
           for k, vals in enumerate(values)]
    ms, mt, d = out
    with np.errstate(divide="ignore"):
        return {"peak_sensitivity": ms, "peak_complementary": mt, "disk_margin": 1.0 / d}


def _peak_limits(fam: SampleLoops) -> tuple[FloatArray, FloatArray, FloatArray]:
    """``(|S|, |T|, |S − 1/2|)`` suprema at ω = 0 and ω = ∞, per row (max of the two)."""
    m = _origin_counts(fam)
    c0 = _dc_coefficient(fam)
    with np.errstate(divide="ignore", invalid="ignore"):
        at0 = _peak_functions(c0.astype(complex))
    zero = [np.where(m > 0, big, np.where(m < 0, small, val))
            for big, small, val in zip((0.0, 1.0, 0.5), (1.0, 0.0, 0.5), at0, strict=True)]
    rd = _relative_degree(fam)
    if rd > 0:
        high = (np.ones(fam.size), np.zeros(fam.size), np.full(fam.size, 0.5))
    else:
        k = fam.fixed.gain * fam.gain
        plain = _peak_functions(k.astype(complex))
        ka = np.abs(k)
        with np.errstate(divide="ignore", invalid="ignore"):
            turning = (1.0 / (1.0 - ka), ka / (1.0 - ka), (1.0 + ka) / (2.0 * (1.0 - ka)))
        high = tuple(np.where(fam.delay_s > 0, np.where(ka < 1, t, math.inf), p)
                     for t, p in zip(turning, plain, strict=True))
    return tuple(np.maximum(z, h) for z, h in zip(zero, high, strict=True))  # type: ignore


def _parabolic_max(fn, a: FloatArray, m: FloatArray, b: FloatArray,  # type: ignore
                   fa: FloatArray, fm: FloatArray, fb: FloatArray) -> FloatArray:
    """Largest value of ``fn`` near the grid maximum ``m`` between ``a`` and ``b``.

    Successive parabolic interpolation kept inside the bracket (a golden step where the
    parabola's vertex falls outside or too close to a point): a smooth peak converges in a
    few steps; every value evaluated is a true value of ``fn``, so the result is never
    above the peak.
    """
    g = 0.5 * (3.0 - math.sqrt(5.0))
    a, m, b, fa, fm, fb = (np.array(x, dtype=float) for x in (a, m, b, fa, fm, fb))
    best = fm.copy()
    for _ in range(_PARABOLA_STEPS):
        d1, d2 = m - a, m - b
        num = d1 ** 2 * (fm - fb) - d2 ** 2 * (fm - fa)
        den = d1 * (fm - fb) - d2 * (fm - fa)
        with np.errstate(divide="ignore", invalid="ignore"):
            x = m - 0.5 * num / den
        tol = 1e-10 * np.maximum(1.0, np.abs(m))
        golden = np.where(b - m > m - a, m + g * (b - m), m - g * (m - a))
        bad = ~np.isfinite(x) | (x <= a + tol) | (x >= b - tol) | (np.abs(x - m) < tol)
        x = np.where(bad, golden, x)
        fx = fn(x)
        best = np.maximum(best, np.nan_to_num(fx, nan=-math.inf))
        better = fx >= fm
        right = x > m
        # New bracket: around the better of (x, m).
        na = np.where(better, np.where(right, m, a), np.where(right, a, x))
        nb = np.where(better, np.where(right, b, m), np.where(right, x, b))
        nfa = np.where(better, np.where(right, fm, fa), np.where(right, fa, fx))
        nfb = np.where(better, np.where(right, fb, fm), np.where(right, fx, fb))
        nm = np.where(better, x, m)
        nfm = np.where(better, fx, fm)
        a, b, fa, fb, m, fm = na, nb, nfa, nfb, nm, nfm
        if np.all(b - a < 1e-9 * np.maximum(1.0, np.abs(m))):
            break
    return best
