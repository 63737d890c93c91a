"""Certified closed-loop roots of continuous, delay and sampled loops.

Each function returns the roots polished on the exact characteristic function
(:mod:`.roots`) together with the argument principle's count for the region they claim to
cover, so that the caller can decide stability only when both agree.

* Rational loop: every root (their number is the degree of the characteristic
  polynomial); starting points are the eigenvalues of the block interconnection.
* Delay loop: every root right of the search line ``Re s = −σ``; starting points from a
  Chebyshev discretisation of the delay system's generator (or from a Padé loop when the
  loop has a direct feed-through around the delay); σ is chosen from the loop so that the
  dominant and slow roots are all inside.
* Sampled loop: every root in z; starting points are the eigenvalues of the sampled
  closed loop.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import AnalysisError
from ..lti import ComplexArray, Loop, Zpk
from .roots import (
    MAX_GENERATOR_SIZE,
    CharFunction,
    char_function,
    conjugate_pairs,
    count_outside_circle,
    count_right_of,
    delay_seeds,
    polish,
    z_char_function,
)

__all__ = ["RootSearch", "delay_roots", "rational_roots", "search_abscissa", "slow_count",
           "z_roots"]

#: The search line of a delay loop lies this many times the loop's highest crossover-like
#: frequency to the left of the imaginary axis.
SEARCH_FACTOR = 3.0
#: ... but no further than σ·T = this: the number of roots right of the line grows like
#: e^{σT}, and the roots that decide settling and tails lie well inside it.
MAX_SEARCH_DELAY_PRODUCT = 4.0
#: Iterations of the polish for a delay loop's seeds.
DELAY_ITERATIONS = 60
#: Two polished roots closer than this (relative) are one root found twice.
DUPLICATE_RTOL = 1e-8


@dataclass(frozen=True, slots=True, kw_only=True)
class RootSearch:
    """Roots polished on the exact characteristic function, and what covers them."""

    roots: ComplexArray
    iterations: int
    search_abscissa_rad_s: float | None = None     # delay: roots with Re s > −σ
    counted_right_of_search: int | None = None     # argument principle for that line


# --------------------------------------------------------------------------- rational
def rational_roots(loop: Loop, seeds: ComplexArray) -> RootSearch:
    """Every closed-loop root of a delay-free loop, from ``seeds`` (the eigenvalues)."""
    fn = char_function(loop)
    if seeds.size != fn.degree:
        raise AnalysisError(f"{seeds.size} starting points for a characteristic polynomial "
                            f"of degree {fn.degree}")
    if fn.gain == 0.0:
        return RootSearch(roots=np.sort_complex(fn.poles), iterations=0)
    roots, it = polish(fn, seeds)
    return RootSearch(roots=roots, iterations=it)


def z_roots(rational: Zpk, seeds: ComplexArray) -> RootSearch:
    """Every closed-loop root in z of ``1 + L(z) = 0``, from ``seeds`` (the eigenvalues)."""
    fn = z_char_function(rational)
    if seeds.size != fn.degree or fn.gain == 0.0:
        # The sampled plant's transfer kept fewer modes than its state space (or there is
        # no feedback): the eigenvalues are the roots; nothing to polish them on.
        return RootSearch(roots=np.sort_complex(seeds), iterations=0)
    roots, it = polish(fn, seeds)
    return RootSearch(roots=roots, iterations=it)


# --------------------------------------------------------------------------- delay
def search_abscissa(loop: Loop) -> float:
    """σ of the search line ``Re s = −σ`` for a delay loop (rad/s).

    ``SEARCH_FACTOR`` times the frequency beyond which ``|R(s)| ≤ 1`` everywhere (an upper
    bound of every gain crossover, so of the dominant roots' size), and at least
    ``SEARCH_FACTOR`` times the largest |root| of R below it, so that the roots near the
    loop's own slow poles and zeros are inside; at most ``MAX_SEARCH_DELAY_PRODUCT / T``.
    """
    from .frequency_grid import bound_frequency

    rat = loop.rational
    wb = bound_frequency(rat, 1.0) or 0.0
    roots = np.abs(np.concatenate([rat.zeros, rat.poles]))
    slow = roots[(roots > 0) & (roots <= wb)] if wb > 0 else roots[roots > 0]
    base = max(wb, float(slow.max()) if slow.size else 0.0, 1.0 / loop.delay_s)
    sigma = min(SEARCH_FACTOR * base, MAX_SEARCH_DELAY_PRODUCT / loop.delay_s)
    hf = abs(rat.high_frequency_gain())
    if 0.0 < hf < 1.0:
        # A biproper R under the delay: a chain of roots approaches Re s = ln|R(∞)|/T;
        # the line stays halfway to it, or infinitely many roots would be right of it.
        sigma = min(sigma, 0.5 * math.log(1.0 / hf) / loop.delay_s)
    return sigma


def _gap(sigma: float, avoid: ComplexArray) -> float:
    """σ moved (by at most ±10 %) to the middle of the widest gap among ``−Re avoid``."""
    lo, hi = 0.9 * sigma, 1.1 * sigma
    xs = np.sort(np.concatenate([[lo, hi], [-a.real for a in avoid if lo < -a.real < hi]]))
    k = int(np.argmax(np.diff(xs)))
    return float(0.5 * (xs[k] + xs[k + 1]))


def _generator_seeds(loop: Loop, nodes: int) -> ComplexArray:
    from .closed_loop import delay_split

    sp = delay_split(loop)
    duw = sp.d[1, 1]
    if duw != 0.0:
        raise AnalysisError("direct feed-through around the delay")
    a1 = sp.b[:, 1:2] @ sp.c[1:2, :]
    return delay_seeds(sp.a, a1, loop.delay_s, nodes)


def _pade_seeds(loop: Loop, order: int) -> ComplexArray:
    from .closed_loop import closed_loop_poles
    from .time_response import _pade

    padded = Loop(plant=loop.plant * _pade(loop.delay_s, order), controller=loop.controller,
                  sensor=loop.sensor, stages=loop.stages)
    return closed_loop_poles(padded)


def _nodes(rat: Zpk, sigma: float, delay_s: float) -> int:
    """Chebyshev nodes that resolve every root right of ``Re s = −σ``.

    Such roots have ``|R(s)|·e^{σT} ≥ 1``, so ``|Im s|`` stays below the frequency Ω where
    ``|R|`` falls under ``e^{−σT}``; the discretisation is accurate for ``|s|·T`` up to
    about the number of nodes.
    """
    from .frequency_grid import bound_frequency

    omega = bound_frequency(rat, math.exp(-sigma * delay_s))
    if omega is None:
        omega = 4.0 * sigma
    return int(min(400, max(16, math.ceil(1.2 * omega * delay_s) + 12)))


def _dedupe(roots: ComplexArray) -> ComplexArray:
    keep: list[complex] = []
    for r in roots:
        if all(abs(r - k) > DUPLICATE_RTOL * max(abs(r), 1e-12) for k in keep):
            keep.append(complex(r))
    return np.asarray(keep, dtype=complex)


def delay_roots(loop: Loop) -> RootSearch:
    """Every root of ``1 + R(s)e^{−sT} = 0`` right of the search line, certified by count.

    The line is fixed first (clear of the open-loop poles) and the argument principle
    counts the roots right of it; the discretisation is then refined (more Chebyshev
    nodes) until as many polished roots are found there, or its size limit is reached.
    The caller compares the two numbers.
    """
    fn = char_function(loop)
    sigma = _gap(search_abscissa(loop), fn.poles)
    counted, _ = count_right_of(fn, sigma)
    n_states = max(1, fn.poles.size)
    found = np.zeros(0, dtype=complex)
    iterations = 0
    nodes = _nodes(loop.rational, sigma, loop.delay_s)
    for _ in range(4):
        try:
            seeds = _generator_seeds(loop, nodes)
        except AnalysisError:
            seeds = _pade_seeds(loop, min(nodes, 40))
        seeds = seeds[np.isfinite(seeds)]
        seeds = seeds[seeds.real > -1.5 * sigma - 1.0 / loop.delay_s]
        # Seeds of spurious generator eigenvalues find no root and wander: a good seed
        # converges (cubically) in a few steps, so the iteration is kept short here.
        roots, it = polish(fn, seeds, abandon_left_of=-2.0 * sigma - 2.0 / loop.delay_s,
                           max_iterations=DELAY_ITERATIONS)
        iterations += it
        ok = fn.is_root(roots)
        found = _dedupe(roots[ok & (roots.real > -sigma)])
        if found.size >= counted or n_states * (2 * nodes + 1) > MAX_GENERATOR_SIZE:
            break
        nodes *= 2
    return RootSearch(roots=conjugate_pairs(found), iterations=iterations,
                      search_abscissa_rad_s=sigma, counted_right_of_search=counted)


# --------------------------------------------------------------------------- slow region
def slow_certificate(fn: CharFunction, roots: ComplexArray, zeros: ComplexArray, *,
                     period_s: float | None = None, search_abscissa: float | None = None,
                     ) -> tuple[dict[str, float | int | None], list[str]]:
    """The slow region's count: fields for :class:`~.results.Stability` and problems.

    The region is ``Re s > −σ`` with σ = ω_dom/3 (:func:`.slow_pairs.slow_abscissa`; for a
    sampled loop the disc's outside ``|z| > e^{−σT}``), where every slow pair's pole lies.
    For a delay loop it stays inside the search line.
    """
    from .slow_pairs import slow_abscissa

    stable = roots[(roots.real < 0) if period_s is None else (np.abs(roots) < 1.0)]
    sigma = slow_abscissa(stable, zeros, period_s=period_s)
    if sigma is None or fn.gain == 0.0:
        return {}, []
    if search_abscissa is not None:
        sigma = min(sigma, 0.9 * search_abscissa)
    try:
        found, counted, sigma = slow_count(fn, sigma, period_s=period_s, roots=roots)
    except AnalysisError as exc:
        return {"slow_abscissa_rad_s": sigma}, [f"the slow region's count failed ({exc})"]
    fields: dict[str, float | int | None] = {
        "slow_abscissa_rad_s": sigma, "slow_roots_found": found, "slow_roots_counted": counted}
    problems = []
    if found != counted:
        problems.append(f"{found} root(s) found in the slow region (Re s > {-sigma:.6g}) but "
                        f"the argument principle counts {counted} there")
    return fields, problems


def slow_count(fn: CharFunction, sigma: float, *, period_s: float | None = None,
               roots: ComplexArray) -> tuple[int, int, float]:
    """(roots found, roots counted) in the slow region and the σ used.

    Continuous: ``Re s > −σ``; sampled: ``|z| > e^{−σT}``.  σ is moved into a gap between
    roots first so that the boundary passes clear of every root.
    """
    if period_s is None:
        sigma = _gap(sigma, np.concatenate([roots, fn.poles]))
        counted = count_right_of(fn, sigma)[0]
        found = int(np.sum(roots.real > -sigma))
        return found, counted, sigma
    s_roots = np.log(np.where(roots == 0, 1e-300, roots)) / period_s
    s_poles = np.log(np.where(fn.poles == 0, 1e-300, fn.poles)) / period_s
    sigma = _gap(sigma, np.concatenate([s_roots, s_poles]))
    rho = math.exp(-sigma * period_s)
    counted = count_outside_circle(fn, rho)[0]
    found = int(np.sum(np.abs(roots) > rho))
    return found, counted, sigma
