"""Closed-loop stability: eigenvalues for rational loops, a Nyquist count for delay loops.

Rational loop
    The closed-loop poles are the eigenvalues of the delay-free interconnection
    (:func:`~.closed_loop.closed_loop_poles`, every block realised, so modes that cancel in
    ``L`` are kept).  A pole with ``|Re λ| ≤ 1e−9·max(|λ|, 1e−3·max|λ|)`` is on the
    imaginary axis: the loop is then *marginal*, which is not stable.

Delay loop
    The characteristic equation ``1 + R(s)·e^(−sT) = 0`` has infinitely many roots, so the
    count is taken from the Nyquist principle ``Z = N + P`` on the D-contour: up the
    imaginary axis with small semicircles to the right of imaginary-axis open-loop poles
    (integrators, undamped modes), closed by an outer arc.  The outer radius is chosen from
    a bound of ``|R(s)|`` valid on the whole arc, so beyond it ``1 + L`` stays in a disc
    that excludes 0 and contributes only its end points.  The contour is refined until every
    step of ``1 + L`` is short compared with its distance from 0, so no encirclement is
    lost between samples.  A biproper rational part with ``|R(∞)| ≥ 1`` under a delay makes
    a neutral system (infinitely many roots at or right of the imaginary axis): unstable.

Pole–zero pairs that cancel exactly in ``L`` are removed before the contour is drawn; the
modes they hide are added back to the count (right-half-plane) or make the loop marginal
(imaginary axis).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..errors import AnalysisError, IllPosedLoopError
from ..lti import ComplexArray, FloatArray, Loop, Zpk
from .certify import slow_certificate
from .closed_loop import closed_loop_poles
from .frequency_grid import AXIS_RTOL, bound_frequency, loop_grid
from .results import Stability
from .roots import char_function

__all__ = ["NyquistCount", "closed_loop_stability", "nyquist_count", "open_loop_pole_counts",
           "poles_stable"]

#: Relative tolerance of "on the imaginary axis" for closed-loop eigenvalues.
EIG_RTOL = 1e-9
#: Pole–zero pairs closer than this (relative) cancel exactly in L.
EXACT_CANCEL_RTOL = 1e-9
#: |1 + L| below this on the contour: a closed-loop root on the imaginary axis.
MARGINAL_RETURN_DIFFERENCE = 1e-8
#: A contour step is accepted when |ΔF| ≤ this · min|F| at its ends (F = 1 + L).
_STEP_RTOL = 0.25
_MAX_POINTS = 2_000_000
_MAX_ROUNDS = 60
#: |L| on an indentation semicircle is at least about this (no closed-loop root inside).
_ARC_GAIN = 1e6
_MAX_UNIFORM = 50_000


def open_loop_pole_counts(zpk: Zpk) -> tuple[int, int]:
    """``(right-half-plane poles, imaginary-axis poles)`` of ``zpk``, multiplicities counted."""
    p = zpk.poles
    axis = np.abs(p.real) <= AXIS_RTOL * np.abs(p)
    return int(np.sum(~axis & (p.real > 0))), int(np.sum(axis))


# --------------------------------------------------------------------------- poles
def _all_poles(loop: Loop) -> ComplexArray:
    """Closed-loop poles of the delay-free loop, every mode kept."""
    blocks = (*(loop.stages or (loop.controller,)), loop.plant, loop.sensor)
    if all(b.is_proper for b in blocks):
        return closed_loop_poles(loop)
    # An improper block has no state-space realisation; the characteristic polynomial of
    # the uncancelled product keeps every mode just the same.
    rat = loop.rational
    den = np.real(np.poly(rat.poles)) if rat.poles.size else np.ones(1)
    num = rat.gain * (np.real(np.poly(rat.zeros)) if rat.zeros.size else np.ones(1))
    n = max(den.size, num.size)
    char = np.pad(den, (n - den.size, 0)) + np.pad(num, (n - num.size, 0))
    char = np.trim_zeros(char, "f")
    if char.size == 0:
        raise IllPosedLoopError("the loop is not well posed: 1 + L(s) vanishes identically")
    return np.sort_complex(np.roots(char))


def _axis_tolerance(poles: ComplexArray) -> FloatArray:
    """Per pole: ``|Re λ|`` at most this counts as on the imaginary axis."""
    mags = np.abs(poles)
    rho = float(mags.max()) if mags.size else 1.0
    return EIG_RTOL * np.maximum(mags, 1e-3 * rho)


def poles_stable(poles: ComplexArray) -> bool:
    """True when every closed-loop pole is clear of the imaginary axis on its left
    (the classification of :func:`closed_loop_stability` for rational loops)."""
    tol = _axis_tolerance(poles)
    return not bool(np.any(poles.real >= -tol))


def _pole_stability(loop: Loop) -> Stability:
    """Rational loop: every root polished on the exact characteristic function, and the
    right-half-plane count of the Nyquist principle compared with the roots found."""
    from .certify import rational_roots

    eig = _all_poles(loop)
    rhp_ol, axis_ol = open_loop_pole_counts(loop.rational)
    problems: list[str] = []
    iterations = 0
    try:
        search = rational_roots(loop, eig)
        poles, iterations = search.roots, search.iterations
    except AnalysisError as exc:
        poles = eig
        problems.append(f"the roots could not be polished ({exc})")
    tol = _axis_tolerance(poles)
    unstable = int(np.sum(poles.real > tol))
    marginal = bool(np.any(np.abs(poles.real) <= tol))
    note = ""
    if marginal:
        on_axis = poles[np.abs(poles.real) <= tol]
        note = ("closed-loop pole(s) on the imaginary axis: "
                + ", ".join(f"{complex(p):.6g}" for p in on_axis if p.imag >= 0))
    counted: int | None = None
    try:
        nc = nyquist_count(loop)
        counted = nc.rhp_closed_loop_poles
    except AnalysisError as exc:
        problems.append(f"the argument-principle count failed ({exc})")
    if counted is not None and not marginal and counted != unstable:
        problems.append(f"{unstable} right-half-plane root(s) found but the argument "
                        f"principle counts {counted}")
    slow: dict = {}  # type: ignore[type-arg]
    if not problems and not marginal:
        slow, more = slow_certificate(char_function(loop), poles, _reference_zeros(loop))
        problems += more
    certified = not problems
    if problems:
        note = "; ".join([note, *problems] if note else problems)
    return Stability(
        closed_loop_stable=certified and unstable == 0 and not marginal, method="poles",
        closed_loop_poles=tuple(complex(p) for p in poles),
        open_loop_rhp_poles=rhp_ol, open_loop_imag_axis_poles=axis_ol,
        rhp_closed_loop_poles=unstable, clockwise_encirclements=None,
        marginal=marginal, note=note, certified=certified,
        unstable_roots_counted=counted, polish_iterations=iterations, **slow,
    )


def _reference_zeros(loop: Loop) -> ComplexArray:
    """Zeros of the reference-to-output response: those of C_r·P and the sensor's poles."""
    return np.concatenate([loop.reference_forward.zeros, loop.sensor.poles])


# --------------------------------------------------------------------------- Nyquist
@dataclass(frozen=True, slots=True, kw_only=True)
class NyquistCount:
    """Result of the Nyquist count ``Z = N + P`` on the indented D-contour."""

    open_loop_rhp_poles: int           # P, every right-half-plane pole of C·P·H
    open_loop_imag_axis_poles: int     # indented (or hidden by an exact cancellation)
    clockwise_encirclements: int       # N, of −1 by L
    rhp_closed_loop_poles: int         # Z
    hidden_axis_modes: int             # imaginary-axis poles cancelled exactly in L
    min_return_difference: float       # min |1 + L| on the contour
    contour_points: int


@dataclass(frozen=True, slots=True)
class _Piece:
    """Part of the contour: ``s = j·t`` (lin), ``s = j·e^t`` (log), ``c + ρ·e^{jt}`` (arc)."""

    kind: str
    t: FloatArray
    center: complex = 0j
    radius: float = 0.0

    def s(self, t: FloatArray) -> ComplexArray:
        if self.kind == "lin":
            return 1j * t
        if self.kind == "log":
            return 1j * np.exp(t)
        return self.center + self.radius * np.exp(1j * t)


def _split_cancelled(zpk: Zpk) -> tuple[Zpk, ComplexArray]:
    """``zpk`` without exactly cancelling pole–zero pairs, and the cancelled poles."""
    zeros = list(zpk.zeros)
    kept, hidden = [], []
    for p in zpk.poles:
        if zeros:
            d = np.abs(np.asarray(zeros) - p)
            j = int(np.argmin(d))
            if d[j] <= EXACT_CANCEL_RTOL * abs(p):
                hidden.append(p)
                zeros.pop(j)
                continue
        kept.append(p)
    return Zpk(np.asarray(zeros, dtype=complex), np.asarray(kept, dtype=complex),
               zpk.gain), np.asarray(hidden, dtype=complex)


def _refine(piece: _Piece, fn: Callable[[ComplexArray], ComplexArray]) -> ComplexArray:
    """Bisect the piece's steps until each is short against its distance from 0."""
    t = piece.t
    f = fn(piece.s(t))
    for _ in range(_MAX_ROUNDS):
        af = np.abs(f)
        near = np.minimum(af[:-1], af[1:])
        dt = np.diff(t)
        bad = ((np.abs(np.diff(f)) > _STEP_RTOL * near) & (near > MARGINAL_RETURN_DIFFERENCE)
               & (dt > 1e-13 * np.maximum(1.0, np.abs(t[:-1]))))
        if not bad.any():
            return f
        mid = 0.5 * (t[:-1][bad] + t[1:][bad])
        t = np.concatenate([t, mid])
        f = np.concatenate([f, fn(piece.s(mid))])
        order = np.argsort(t, kind="stable")
        t, f = t[order], f[order]
        if t.size > _MAX_POINTS:
            break
    raise AnalysisError("the Nyquist contour could not be resolved (1 + L varies too fast)")


def _indentation_radius(red: Zpk, center: complex, mult: int, delay_s: float) -> float:
    """Radius of the semicircle right of an imaginary-axis pole of multiplicity ``mult``.

    Small against the distance to every other root, against ``1/T`` (the delay barely
    turns on it) and such that ``|L| ≈ |c|/ρ^mult ≥ 1e6`` on it, where ``c`` is the
    residue-like coefficient ``lim (s − center)^mult · L(s)``: no root of ``1 + L`` fits
    inside.
    """
    poles = list(red.poles)
    for _ in range(mult):
        poles.pop(int(np.argmin(np.abs(np.asarray(poles) - center))))
    rest_p = np.asarray(poles, dtype=complex)
    others = np.concatenate([red.zeros, rest_p])
    coef = abs(red.gain) * float(np.prod(np.abs(center - red.zeros))
                                 / np.prod(np.abs(center - rest_p)))
    limits = [1e-3 * float(np.min(np.abs(others - center)))] if others.size else []
    if delay_s > 0:
        limits.append(1e-3 / delay_s)
    if coef > 0:
        limits.append((coef / _ARC_GAIN) ** (1.0 / mult))
    if center != 0:
        limits.append(1e-3 * abs(center))
    return min(limits) if limits else 1e-6


def _outer_radius(red: Zpk, delay_s: float) -> tuple[float, complex]:
    """Radius beyond which ``1 + L`` stays in a disc around ``c`` that excludes 0."""
    rd, k = red.relative_degree, red.gain
    if rd > 0:
        level, c = 0.5, 1.0 + 0j
    elif delay_s > 0:
        level, c = 0.5 * (1.0 + abs(k)), 1.0 + 0j        # |L| < 1 keeps Re(1 + L) > 0
    else:
        c = complex(1.0 + k)
        if c == 0:
            raise IllPosedLoopError("the loop is not well posed: 1 + L(∞) = 0")
        level = abs(k) + 0.5 * abs(c)                    # then |L − k| ≤ |1 + k|/2
    r = bound_frequency(red, level)
    if r is None:
        raise AnalysisError("no radius found beyond which the loop gain is bounded")
    return r, c


def nyquist_count(loop: Loop) -> NyquistCount:
    """Count the closed-loop right-half-plane roots of ``1 + L(s)`` by the Nyquist principle.

    Works for rational and delay loops with a proper rational part; a delay loop must not
    be neutral (``|R(∞)| < 1``).  Z includes right-half-plane modes hidden by an exact
    pole–zero cancellation in ``L``.

    Raises
    ------
    AnalysisError
        Improper or neutral loop, ill-posed loop, or a contour that could not be resolved.
    """
    full = loop.rational
    delay = loop.delay_s
    if full.relative_degree < 0:
        raise AnalysisError("the loop transfer function is improper")
    if delay > 0 and full.relative_degree == 0 and abs(full.gain) >= 1.0:
        raise AnalysisError("neutral delay loop (|L(j∞)| ≥ 1)")
    rhp_all, axis_all = open_loop_pole_counts(full)
    if full.gain == 0:
        # No feedback: the closed-loop roots are the open-loop poles.
        return NyquistCount(open_loop_rhp_poles=rhp_all, open_loop_imag_axis_poles=axis_all,
                            clockwise_encirclements=0, rhp_closed_loop_poles=rhp_all,
                            hidden_axis_modes=axis_all, min_return_difference=1.0,
                            contour_points=0)
    red, hidden = _split_cancelled(full)
    hidden_axis = int(np.sum(np.abs(hidden.real) <= AXIS_RTOL * np.abs(hidden)))

    def fn(s: ComplexArray) -> ComplexArray:
        return 1.0 + red(s) * np.exp(-s * delay)

    outer, c = _outer_radius(red, delay)
    ap = red.poles[np.abs(red.poles.real) <= AXIS_RTOL * np.abs(red.poles)]
    m0 = int(np.sum(ap == 0))
    upper, mult = np.unique(ap[ap.imag > 0].imag, return_counts=True)

    grid = loop_grid(loop)
    lo = float(grid[0])
    extra = [np.logspace(math.log10(lo), math.log10(outer), 40 * max(1, int(
        math.log10(outer / lo))) + 1)]
    if delay > 0:
        n_uniform = min(_MAX_UNIFORM, int(outer * delay / 0.1) + 1)
        extra.append(np.linspace(0.0, outer, n_uniform + 1)[1:])
    axis_pts = np.unique(np.concatenate([grid, *extra]))

    pieces: list[_Piece] = []
    if m0:
        eps0 = _indentation_radius(red, 0j, m0, delay)
        pieces.append(_Piece("arc", np.linspace(0.0, 0.5 * math.pi, 33), 0j, eps0))
        start = eps0
    else:
        pieces.append(_Piece("lin", np.linspace(0.0, lo, 9)))
        start = lo
    breaks = [start]
    arcs = []
    for w0, m in zip(upper, mult, strict=True):
        eps = _indentation_radius(red, 1j * w0, int(m), delay)
        breaks += [w0 - eps, w0 + eps]
        arcs.append(_Piece("arc", np.linspace(-0.5 * math.pi, 0.5 * math.pi, 33), 1j * w0,
                           eps))
    breaks.append(max(outer, axis_pts[-1]))
    for i in range(len(breaks) // 2):
        a, b = breaks[2 * i], breaks[2 * i + 1]
        inside = axis_pts[(axis_pts > a) & (axis_pts < b)]
        pieces.append(_Piece("log", np.log(np.concatenate([[a], inside, [b]]))))
        if i < len(arcs):
            pieces.append(arcs[i])

    values = np.concatenate([_refine(p, fn) for p in pieces])
    min_rd = float(np.min(np.abs(values)))
    with np.errstate(divide="ignore", invalid="ignore"):
        half = float(np.nansum(np.angle(values[1:] / values[:-1])))
    winding = (2.0 * half - 2.0 * float(np.angle(values[-1] / c))) / (2.0 * math.pi)
    # With 1 + L vanishing on the contour (a root on the axis) the count is ambiguous and
    # the loop marginal; otherwise the refined contour must give an integer.
    if min_rd > MARGINAL_RETURN_DIFFERENCE and abs(winding - round(winding)) > 1e-6:
        raise AnalysisError(f"Nyquist winding number {winding:.6f} is not an integer")
    n_cw = -int(round(winding))
    return NyquistCount(
        open_loop_rhp_poles=rhp_all, open_loop_imag_axis_poles=axis_all,
        clockwise_encirclements=n_cw, rhp_closed_loop_poles=n_cw + rhp_all,
        hidden_axis_modes=hidden_axis, min_return_difference=min_rd,
        contour_points=int(values.size),
    )


def _nyquist_stability(loop: Loop, find_roots: bool = True) -> Stability:
    full = loop.rational
    rhp_ol, axis_ol = open_loop_pole_counts(full)
    if full.relative_degree < 0 or (full.relative_degree == 0 and abs(full.gain) >= 1.0):
        return Stability(
            closed_loop_stable=False, method="nyquist", closed_loop_poles=(),
            open_loop_rhp_poles=rhp_ol, open_loop_imag_axis_poles=axis_ol,
            rhp_closed_loop_poles=None, clockwise_encirclements=None, marginal=False,
            note=(f"neutral delay loop: |L(j∞)| = {abs(full.high_frequency_gain()):.4g} ≥ 1, "
                  "so the characteristic equation has infinitely many roots at or right of "
                  "the imaginary axis; a delay loop needs a strictly proper loop or "
                  "|L(j∞)| < 1"),
        )
    nc = nyquist_count(loop)
    marginal = nc.min_return_difference <= MARGINAL_RETURN_DIFFERENCE or nc.hidden_axis_modes > 0
    if find_roots:
        roots, extra = _delay_root_fields(loop, nc.rhp_closed_loop_poles, marginal)
    else:
        roots, extra = (), {"problems": []}
    parts = [f"Nyquist count on the D-contour ({nc.contour_points} points): "
             f"N = {nc.clockwise_encirclements} clockwise encirclements of −1, "
             f"P = {nc.open_loop_rhp_poles}, Z = N + P = {nc.rhp_closed_loop_poles}"]
    if axis_ol:
        parts.append(f"indented right of {axis_ol - nc.hidden_axis_modes} imaginary-axis "
                     "open-loop pole(s)")
    if nc.hidden_axis_modes:
        parts.append(f"{nc.hidden_axis_modes} imaginary-axis pole(s) cancelled in L stay "
                     "on the axis in closed loop")
    if nc.min_return_difference <= MARGINAL_RETURN_DIFFERENCE:
        parts.append("1 + L vanishes on the imaginary axis: a closed-loop root lies on it")
    problems = extra.pop("problems")
    parts += problems
    certified = not problems
    return Stability(
        closed_loop_stable=certified and nc.rhp_closed_loop_poles == 0 and not marginal,
        method="nyquist", closed_loop_poles=roots, open_loop_rhp_poles=rhp_ol,
        open_loop_imag_axis_poles=axis_ol, rhp_closed_loop_poles=nc.rhp_closed_loop_poles,
        clockwise_encirclements=nc.clockwise_encirclements, marginal=marginal,
        note="; ".join(parts), certified=certified,
        unstable_roots_counted=nc.rhp_closed_loop_poles, **extra,
    )


def _delay_root_fields(loop: Loop, rhp_counted: int, marginal: bool,
                       ) -> tuple[tuple[complex, ...], dict]:  # type: ignore[type-arg]
    """The roots right of the search line and the certificate's fields for a delay loop."""
    from .certify import delay_roots

    problems: list[str] = []
    try:
        search = delay_roots(loop)
    except (AnalysisError, ArithmeticError, ValueError, np.linalg.LinAlgError) as exc:
        problems.append(f"the closed-loop roots could not be found ({exc})")
        return (), {"problems": problems}
    roots = search.roots
    if search.counted_right_of_search != roots.size:
        problems.append(
            f"{roots.size} root(s) found right of Re s = {-search.search_abscissa_rad_s:.6g} "
            f"but the argument principle counts {search.counted_right_of_search} there")
    tol = _axis_tolerance(roots) if roots.size else np.zeros(0)
    found_rhp = int(np.sum(roots.real > tol))
    if not marginal and found_rhp != rhp_counted:
        problems.append(f"{found_rhp} right-half-plane root(s) found but the Nyquist count "
                        f"gives {rhp_counted}")
    slow: dict = {}  # type: ignore[type-arg]
    if not problems and not marginal:
        slow, more = slow_certificate(char_function(loop), roots, _reference_zeros(loop),
                                      search_abscissa=search.search_abscissa_rad_s)
        problems += more
    return tuple(complex(r) for r in roots), {
        "problems": problems, **slow,
        "search_abscissa_rad_s": search.search_abscissa_rad_s,
        "roots_right_of_search_counted": search.counted_right_of_search,
        "polish_iterations": search.iterations,
    }


def closed_loop_stability(loop: Loop, *, find_roots: bool = True) -> Stability:
    """Closed-loop stability of the loop: eigenvalues when rational, Nyquist with a delay.

    Returns
    -------
    Stability
        ``closed_loop_stable`` is True only when every closed-loop root lies in the open
        left half-plane; a root on the imaginary axis sets ``marginal`` (and is not
        stable).  ``rhp_closed_loop_poles`` is None for a neutral delay loop, whose count
        is not finite.  With ``find_roots=False`` a delay loop is decided by the Nyquist
        count alone and lists no roots (for searches over many gains; the review itself
        always certifies the roots).
    """
    if loop.has_delay:
        return _nyquist_stability(loop, find_roots)
    return _pole_stability(loop)
