"""Closed-loop roots polished on the exact characteristic function, and counted.

The closed-loop roots of a loop ``L = k·∏(s − z)/∏(s − p)·e^{−sT}`` are the zeros of

    f(s) = ∏(s − p) · (1 + L(s)) = ∏(s − p) + k·∏(s − z)·e^{−sT},

with every block's own zeros and poles (uncancelled, so a mode that cancels in L stays a
root).  ``f`` is never expanded into polynomial coefficients: it is evaluated factor by
factor through ``log L``, so a loop whose roots span many decades keeps full relative
accuracy, and no product overflows.

Roots are found in two steps:

1. starting points from an eigenvalue problem (the block interconnection for rational and
   sampled loops, a Chebyshev discretisation of the delay system's generator for delay
   loops);
2. a simultaneous Newton iteration with mutual repulsion (Ehrlich–Aberth) on ``f``: each
   approximation ``x_i`` moves by ``N_i/(1 − N_i·Σ_{j≠i} 1/(x_i − x_j))`` with
   ``N_i = f(x_i)/f'(x_i)``.  The repulsion keeps two approximations from settling on the
   same root, so clusters and repeated roots come out with their multiplicity.

The answer is then *certified*: the argument principle (a Nyquist count taken on the
boundary of a region) must give the same number of roots in that region as the list.  See
:mod:`loopwarden.analysis.stability` for how the count decides stability.

The same functions serve loops in z (sampled loops): there is no delay factor, and the
regions are discs ``|z| > ρ`` instead of half-planes ``Re s > −σ``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..errors import AnalysisError
from ..lti import ComplexArray, FloatArray, Loop, Zpk

__all__ = [
    "CharFunction",
    "char_function",
    "conjugate_pairs",
    "count_outside_circle",
    "count_right_of",
    "delay_seeds",
    "polish",
]

#: Relative size of the last Newton correction at which a root counts as converged.
CONVERGED_RTOL = 4e-15
MAX_ITERATIONS = 400
#: Largest generator discretisation (states × nodes) for delay-loop starting points.
MAX_GENERATOR_SIZE = 1600


@dataclass(frozen=True, slots=True)
class CharFunction:
    """``f(s) = ∏(s − p) + gain·∏(s − z)·e^{−s·delay_s}`` from its factors (see module)."""

    zeros: ComplexArray
    poles: ComplexArray
    gain: float
    delay_s: float = 0.0

    @property
    def degree(self) -> int:
        """Number of roots of a delay-free ``f`` (a polynomial): max(#poles, #zeros)."""
        return int(max(self.poles.size, self.zeros.size))

    def log_loop(self, s: ComplexArray) -> ComplexArray:
        """``log L(s)`` (any branch): a sum of logarithms, so it never overflows."""
        s = np.asarray(s, dtype=complex)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = np.full(s.shape, np.log(complex(self.gain)), dtype=complex)
            if self.zeros.size:
                out = out + np.sum(np.log(s[..., None] - self.zeros), axis=-1)
            if self.poles.size:
                out = out - np.sum(np.log(s[..., None] - self.poles), axis=-1)
        if self.delay_s:
            out = out - s * self.delay_s
        return out

    def loop(self, s: ComplexArray) -> ComplexArray:
        """``L(s)``; ``inf`` where it would overflow."""
        lg = self.log_loop(s)
        with np.errstate(over="ignore", invalid="ignore"):
            return np.exp(lg)

    def log_derivative(self, s: ComplexArray) -> ComplexArray:
        """``Φ(s) = L'(s)/L(s) = Σ 1/(s − z) − Σ 1/(s − p) − T``."""
        s = np.asarray(s, dtype=complex)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = np.full(s.shape, -self.delay_s, dtype=complex)
            if self.zeros.size:
                out = out + np.sum(1.0 / (s[..., None] - self.zeros), axis=-1)
            if self.poles.size:
                out = out - np.sum(1.0 / (s[..., None] - self.poles), axis=-1)
        return out

    def newton_ratio(self, s: ComplexArray) -> ComplexArray:
        """``f(s)/f'(s)``, computed without forming f.

        With ``A = Σ 1/(s − p)`` and ``B = Σ 1/(s − z) − T``:
        ``f'/f = (A + L·B)/(1 + L)``, or ``(A/L + B)/(1/L + 1)`` where ``|L| > 1``.
        """
        s = np.asarray(s, dtype=complex)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            a = (np.sum(1.0 / (s[..., None] - self.poles), axis=-1) if self.poles.size
                 else np.zeros(s.shape, dtype=complex))
            b = (np.sum(1.0 / (s[..., None] - self.zeros), axis=-1) if self.zeros.size
                 else np.zeros(s.shape, dtype=complex)) - self.delay_s
            lg = self.log_loop(s)
            big = lg.real > 0.0
            g = np.exp(np.where(big, -lg, lg))             # 1/L where |L| > 1, else L
            dlog = np.where(big, (a * g + b) / (g + 1.0), (a + g * b) / (1.0 + g))
            return 1.0 / dlog

    def hidden_modes(self) -> ComplexArray:
        """Poles of L cancelled exactly (1e−9 relative) by its zeros: roots of f at which
        ``1 + L`` does not vanish (a mode the loop cannot see)."""
        zeros = list(self.zeros)
        out = []
        for p in self.poles:
            if zeros:
                d = np.abs(np.asarray(zeros) - p)
                j = int(np.argmin(d))
                if d[j] <= 1e-9 * max(abs(p), 1e-300):
                    out.append(p)
                    zeros.pop(j)
        return np.asarray(out, dtype=complex)

    def is_root(self, s: ComplexArray, rtol: float = 1e-6) -> NDArray[np.bool_]:
        """True where ``f(s) = 0`` to ``rtol``: ``|1 + L| ≤ rtol·(1 + |L|)``, or s is a
        hidden mode (:meth:`hidden_modes`)."""
        s = np.asarray(s, dtype=complex)
        lv = self.loop(s)
        with np.errstate(invalid="ignore"):
            ok = np.isfinite(lv) & (np.abs(1.0 + lv) <= rtol * (1.0 + np.abs(lv)))
        for h in self.hidden_modes():
            ok |= np.abs(s - h) <= 1e-9 * max(abs(h), 1e-300)
        return ok & np.isfinite(s)


def char_function(loop: Loop) -> CharFunction:
    """The characteristic function of a continuous loop (every block's roots, delay exact)."""
    rat = loop.rational
    return CharFunction(rat.zeros, rat.poles, rat.gain, loop.delay_s)


def z_char_function(rational: Zpk) -> CharFunction:
    """The characteristic function of a loop in z: ``L(z)`` with no delay factor."""
    return CharFunction(rational.zeros, rational.poles, rational.gain, 0.0)


# --------------------------------------------------------------------------- polishing
def _separate(seeds: ComplexArray) -> ComplexArray:
    """Seeds with exact duplicates moved apart a little (the repulsion needs x_i ≠ x_j)."""
    x = np.array(seeds, dtype=complex)
    scale = max(1.0, float(np.max(np.abs(x)))) if x.size else 1.0
    for i in range(1, x.size):
        same = np.abs(x[:i] - x[i]) <= 1e-13 * max(abs(x[i]), 1e-3 * scale)
        if same.any():
            k = int(np.sum(same))
            x[i] += 1e-8 * max(abs(x[i]), 1e-3 * scale) * np.exp(1j * (0.7 + 2.1 * k))
    return x


def _cluster_seeds(fn: CharFunction, seeds: ComplexArray) -> ComplexArray:
    """Seeds that sit on an open-loop pole moved out to where the roots near it are.

    A seed on top of a pole of L (of multiplicity m, or a tight cluster of m poles at c)
    is a poor start: there ``f ≈ k·∏(s − z)·e^{−sT}`` varies slowly and Newton crawls.
    The roots that leave such a cluster solve ``(s − c)^m ≈ −C`` with
    ``C = k·∏(c − z)/∏_{others}(c − p)·e^{−cT}`` (the root-locus departure near a
    cluster), so the seeds are put on that circle, evenly spaced from ``arg(−C)/m``.
    """
    x = np.array(seeds, dtype=complex)
    p = fn.poles
    if p.size == 0 or x.size == 0:
        return x
    scale = max(1.0, float(np.max(np.abs(p))))
    done = np.zeros(p.size, dtype=bool)
    for i in range(p.size):
        if done[i]:
            continue
        tol = 1e-6 * max(abs(p[i]), 1e-6 * scale)
        members = np.flatnonzero(np.abs(p - p[i]) <= tol)
        done[members] = True
        near = np.flatnonzero(np.abs(x - p[i]) <= 10.0 * tol)
        if near.size == 0:
            continue
        c = complex(np.mean(p[members]))
        m = members.size
        others = np.delete(p, members)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_c = (np.log(complex(fn.gain)) + np.sum(np.log(c - fn.zeros))
                     - np.sum(np.log(c - others)) - c * fn.delay_s)
        if not np.isfinite(log_c):
            continue
        if log_c.real / m > 700.0:
            continue
        radius = math.exp(log_c.real / m)
        gap = float(np.min(np.abs(others - c))) if others.size else math.inf
        # Beyond the nearest other pole the local picture no longer holds: keep the seeds.
        if not 0.0 < radius < 0.5 * gap:
            continue
        base = (log_c.imag + math.pi) / m
        picks = np.floor(np.arange(near.size) * m / near.size) if near.size < m else \
            np.arange(near.size)
        x[near] = c + radius * np.exp(1j * (base + 2.0 * math.pi * picks / m))
    return x


def polish(fn: CharFunction, seeds: ComplexArray, *,
           max_iterations: int = MAX_ITERATIONS,
           abandon_left_of: float | None = None) -> tuple[ComplexArray, int]:
    """Polish ``seeds`` into roots of ``fn`` by the Ehrlich–Aberth iteration.

    For a rational loop pass exactly ``fn.degree`` seeds; for a delay loop pass the seeds
    of the roots wanted (the iteration then works on ``f`` deflated by the other
    approximations, so each converges to a root of its own).  With ``abandon_left_of``
    an approximation that moves left of that abscissa stops iterating (a delay loop's
    roots far left are not wanted).

    Returns
    -------
    (roots, iterations)
        Roots sorted by real part, conjugate pairs made exact, and the number of
        iterations used (``max_iterations`` when some root converged only linearly, as a
        multiple root does: the count decides whether the list can be trusted).
    """
    x = _separate(_cluster_seeds(fn, np.asarray(seeds, dtype=complex)))
    if x.size == 0:
        return x, 0
    scale = max(float(np.max(np.abs(x))), 1e-300)
    floor = 1e-12 * scale
    active = np.ones(x.size, dtype=bool)
    last = np.full(x.size, np.inf)
    it = 0
    for it in range(1, max_iterations + 1):  # noqa: B007 - the count is returned
        idx = np.flatnonzero(active)
        xi = x[idx]
        ratio = fn.newton_ratio(xi)
        far = _log_newton(fn, xi, ratio)
        with np.errstate(divide="ignore", invalid="ignore"):
            diff = xi[:, None] - x[None, :]
            diff[np.arange(idx.size), idx] = np.inf
            rep = np.sum(1.0 / diff, axis=1)
            corr = ratio / (1.0 - ratio * rep)
        bad = ~np.isfinite(corr)
        if bad.any():
            # f'/f underflowed (deep inside a cluster of poles, where f is nearly flat):
            # the step's limit as f/f' → ∞ is the pure repulsion −1/Σ.
            with np.errstate(divide="ignore", invalid="ignore"):
                corr[bad] = -1.0 / rep[bad]
            still = ~np.isfinite(corr)
            corr[still] = -1e-7 * np.maximum(np.abs(xi[still]), floor) * (0.6 + 0.8j)
        x[idx] = xi - corr
        size = np.abs(corr)
        rel = size / np.maximum(np.abs(x[idx]), floor)
        # Converged, or down at the rounding noise of f and no longer shrinking.
        done = (rel <= CONVERGED_RTOL) | ((rel <= 1e-11) & (size >= 0.5 * last[idx]))
        done &= ~bad & ~far           # a step far from any root says nothing about one
        last[idx] = size
        if abandon_left_of is not None:
            done |= x[idx].real < abandon_left_of
        active[idx[done]] = False
        if not active.any():
            break
    return conjugate_pairs(x), it


#: Where |ln |L|| exceeds this, the polish steps on ln(−L) instead of on f.
FAR_LOG_GAIN = 20.0


def _log_newton(fn: CharFunction, x: ComplexArray, ratio: ComplexArray) -> NDArray[np.bool_]:
    """Replace, in place, the Newton ratio by ``ln(−L)/Φ`` where ``|L|`` is huge.

    Deep inside a cluster of poles (|L| ≫ 1) f is nearly constant and Newton on it only
    crawls; Newton on ``ln(−L(s)) = 0`` (principal branch, ``Φ = L'/L``) walks straight to
    where ``|L| = 1``, where the roots are.  Returns where it was applied.
    """
    lg = fn.log_loop(x)
    far = np.isfinite(lg) & (lg.real > FAR_LOG_GAIN)
    if far.any():
        phi = fn.log_derivative(x[far])
        target = lg[far].real + 1j * np.angle(-np.exp(1j * lg[far].imag))
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio[far] = target / phi
    return far


def conjugate_pairs(x: ComplexArray) -> ComplexArray:
    """Snap numerically real roots to the axis and make conjugate partners exact."""
    x = np.array(x, dtype=complex)
    mag = np.maximum(np.abs(x), 1e-300)
    real = np.abs(x.imag) <= 1e-13 * mag
    x[real] = x[real].real
    upper = np.flatnonzero(x.imag > 0)
    lower = list(np.flatnonzero(x.imag < 0))
    for i in upper:
        if not lower:
            break
        cand = np.asarray(lower)
        j = int(cand[np.argmin(np.abs(x[cand] - np.conj(x[i])))])
        if abs(x[j] - np.conj(x[i])) <= 1e-6 * mag[i]:
            mid = 0.5 * (x[i] + np.conj(x[j]))
            x[i], x[j] = mid, np.conj(mid)
            lower.remove(j)
    order = np.lexsort((x.imag, x.real))
    return x[order]


# --------------------------------------------------------------------------- delay seeds
def _cheb(n: int) -> tuple[FloatArray, FloatArray]:
    """Chebyshev extremal nodes ``cos(iπ/n)`` and their differentiation matrix."""
    x = np.cos(np.pi * np.arange(n + 1) / n)
    c = np.ones(n + 1)
    c[0] = c[-1] = 2.0
    c *= (-1.0) ** np.arange(n + 1)
    dx = x[:, None] - x[None, :]
    d = np.outer(c, 1.0 / c) / (dx + np.eye(n + 1))
    d -= np.diag(np.sum(d, axis=1))
    return x, d


def delay_seeds(a0: FloatArray, a1: FloatArray, delay_s: float, nodes: int) -> ComplexArray:
    """Approximate rightmost roots of ``det(sI − A0 − A1·e^{−sT}) = 0``.

    Eigenvalues of the pseudospectral (Chebyshev collocation) discretisation of the
    infinitesimal generator of ``x' = A0 x(t) + A1 x(t − T)`` on ``[−T, 0]``: block row 0
    is the boundary condition ``φ'(0) = A0 φ(0) + A1 φ(−T)``, the other rows differentiate
    the collocation polynomial.  Roots with ``|s|·T`` well below ``nodes`` are accurate to
    many digits; the exact function polishes them afterwards.
    """
    from scipy import linalg

    n = a0.shape[0]
    _, d = _cheb(nodes)
    d = d * (2.0 / delay_s)          # θ = T(x − 1)/2 ∈ [−T, 0], x_0 = 1 ↔ θ = 0
    m = np.kron(d, np.eye(n))
    m[:n, :] = 0.0
    m[:n, :n] = a0
    m[:n, nodes * n:] = a1
    return linalg.eigvals(m)


# --------------------------------------------------------------------------- counts
def count_right_of(fn: CharFunction, sigma: float) -> tuple[int, float]:
    """Number of roots of ``fn`` with ``Re s > −σ``, by the Nyquist principle.

    The loop shifted by σ, ``L(s' − σ)`` (roots moved right by σ, gain times
    ``e^{σT}``), is counted on the indented D-contour
    (:func:`loopwarden.analysis.stability.nyquist_count`).

    Returns
    -------
    (count, min |1 + L| on the line)
        A small second value means a root lies on or next to the line.
    """
    from .stability import nyquist_count

    if sigma * fn.delay_s > 60.0:
        raise AnalysisError("search line too far left for the delay (e^{σT} overflows)")
    shifted = Zpk._checked(fn.zeros + sigma, fn.poles + sigma,
                           fn.gain * math.exp(sigma * fn.delay_s))
    one = Zpk.constant(1.0)
    nc = nyquist_count(Loop(plant=shifted, controller=one, sensor=one, delay_s=fn.delay_s,
                            stages=(one,)))
    return nc.rhp_closed_loop_poles, nc.min_return_difference


def _circle_values(fn: CharFunction, rho: float) -> ComplexArray:
    from .stability import _Piece, _refine

    piece = _Piece("arc", np.linspace(0.0, 2.0 * math.pi, 513), 0j, rho)
    return _refine(piece, lambda z: 1.0 + fn.loop(z))


def count_outside_circle(fn: CharFunction, rho: float) -> tuple[int, float]:
    """Number of roots of a z-domain ``fn`` (a polynomial) with ``|z| > ρ``.

    Argument principle on ``|z| = ρ``: roots inside = winding of ``1 + L`` + poles of L
    inside.  Returns the count outside and ``min |1 + L|`` on the circle.
    """
    values = _circle_values(fn, rho)
    if not np.all(np.isfinite(values)):
        raise AnalysisError(f"1 + L(z) is not finite on the circle |z| = {rho:.6g}")
    with np.errstate(divide="ignore", invalid="ignore"):
        turns = float(np.sum(np.angle(values[1:] / values[:-1]))) / (2.0 * math.pi)
    if abs(turns - round(turns)) > 1e-6:
        raise AnalysisError(f"winding number {turns:.6f} on |z| = {rho:.6g} is not an integer")
    inside = int(round(turns)) + int(np.sum(np.abs(fn.poles) < rho))
    return fn.degree - inside, float(np.min(np.abs(values)))
