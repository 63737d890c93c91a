"""The sampled closed loop in state space: stability, internal stability, tracking, step.

The closed loop is assembled from a realisation of every controller block (each realised
separately) and the exact sampled plant (:class:`~loopwarden.lti_discrete.SampledPlant`,
delay buffer included), so every mode of the interconnection is kept, also those that
cancel in ``L(z)``.  Signals at the sampling instants: reference r[k], error
e = r − ym, controller output u, measured ym and plant output y (both from the sampled
plant, which sees u through the hold).

The step response is exact at the sampling instants: ``x[k] = (I − A^k)(I − A)^{−1}B``,
so ``y[k] = y∞ − C A^k x∞``, evaluated by powers of A.  What happens between the
instants (ripple of the continuous output) is not part of it.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import linalg

from ..errors import AnalysisError, IllPosedLoopError
from ..lti import Zpk
from ..lti_discrete import DiscreteLoop, at_z_one, lti_series
from .internal import cancellations
from .results import (
    InternalStability,
    Stability,
    StepMetrics,
    StepResult,
    Tracking,
)
from .time_response import output_of_powers, plot_series
from .tracking import error_constant

__all__ = ["DiscreteClosedLoop", "discrete_closed_loop", "discrete_internal_stability",
           "discrete_stability", "discrete_step_response", "discrete_tracking"]

Matrix = NDArray[np.float64]

#: | |λ| − 1 | below this (relative): a closed-loop pole on the unit circle.
CIRCLE_TOL = 1e-9
#: The count of unstable roots is taken on |z| = 1 + this (clear of integrators at z = 1).
COUNT_RADIUS_MARGIN = 1e-7
#: A zero within this relative distance of a pole cancels it (as in continuous time).
CANCEL_RTOL = 1e-3
HORIZON_TAIL_FRACTION = 0.01
MAX_EXTENSIONS = 6
MAX_SAMPLES = 2_000_000
MIN_SAMPLES = 200


@dataclass(frozen=True, slots=True)
class DiscreteClosedLoop:
    """``x[k+1] = A x[k] + B r[k]``; outputs ``[ym, y, u] = C x + D r``."""

    a: Matrix
    b: Matrix
    c: Matrix
    d: Matrix

    @property
    def order(self) -> int:
        return int(self.a.shape[0])


def discrete_closed_loop(loop: DiscreteLoop) -> DiscreteClosedLoop:
    """The closed loop r → [ym, y, u] of a sampled loop, every mode kept.

    Raises
    ------
    AnalysisError
        When the loop is not well posed (``1 + L(∞) = 0``: the controller's and the
        sampled plant's direct feedthroughs cancel).
    """
    ac, bc, cc, dc = lti_series(loop.stages or (loop.controller,))
    sp = loop.sampled
    ap, bp, cp, dp = sp.a, sp.b, sp.c, sp.d
    nc, npl = ac.shape[0], ap.shape[0]
    q = 1.0 + float(dc[0, 0] * dp[0, 0])
    if abs(q) < 1e-12:
        raise IllPosedLoopError("the sampled loop is not well posed: 1 + L(∞) = 0")
    # u = (Cc xc − Dc Cym xp + Dc r) / q
    ku = np.hstack([cc, -dc[0, 0] * cp[0:1]]) / q
    kr = float(dc[0, 0]) / q
    n = nc + npl
    A = np.zeros((n, n))
    B = np.zeros((n, 1))
    # e = r − ym = r − Cym xp − Dym u
    e_x = np.hstack([np.zeros((1, nc)), -cp[0:1]]) - dp[0, 0] * ku
    e_r = 1.0 - dp[0, 0] * kr
    A[:nc, :nc] = ac
    A[:nc, :] += bc @ e_x
    B[:nc] = bc * e_r
    A[nc:, nc:] = ap
    A[nc:, :] += bp @ ku
    B[nc:] = bp * kr
    y_x = np.hstack([np.zeros((2, nc)), cp]) + dp @ ku
    C = np.vstack([y_x, ku])
    D = np.vstack([dp * kr, [[kr]]])
    return DiscreteClosedLoop(A, B, C, D)


def _circle_counts(roots: NDArray[np.complex128]) -> tuple[int, int]:
    """(outside the unit circle, on it) with the tolerance :data:`CIRCLE_TOL`."""
    mag = np.abs(roots)
    on = np.abs(mag - 1.0) <= CIRCLE_TOL
    return int(np.sum(~on & (mag > 1.0))), int(np.sum(on))


def discrete_stability(loop: DiscreteLoop) -> Stability:
    """Closed-loop stability from the eigenvalues of the sampled closed loop.

    Stable when every pole lies strictly inside the unit circle; a pole on it (within
    1e−9) makes the loop marginal, which is not stable.  The counts of ``Stability``
    read "outside the unit circle" / "on the unit circle" (``domain = "z"``).
    """
    from .certify import slow_certificate, z_roots
    from .roots import count_outside_circle, z_char_function

    cl = discrete_closed_loop(loop)
    eig = np.sort_complex(linalg.eigvals(cl.a)) if cl.order else np.zeros(0, complex)
    problems: list[str] = []
    search = z_roots(loop.rational, eig)
    poles = search.roots
    outside, on = _circle_counts(poles)
    counted: int | None = None
    fn = z_char_function(loop.rational)
    if fn.degree == poles.size and fn.gain != 0.0:
        try:
            counted = count_outside_circle(fn, 1.0 + COUNT_RADIUS_MARGIN)[0]
        except AnalysisError as exc:
            problems.append(f"the argument-principle count failed ({exc})")
        beyond = int(np.sum(np.abs(poles) > 1.0 + COUNT_RADIUS_MARGIN))
        if counted is not None and counted != beyond:
            problems.append(f"{beyond} root(s) found outside |z| = 1 + "
                            f"{COUNT_RADIUS_MARGIN:g} but the argument principle counts "
                            f"{counted} there")
    open_poles = np.concatenate([loop.controller.poles, loop.sampled.poles])
    ol_out, ol_on = _circle_counts(open_poles)
    rho = float(np.max(np.abs(poles))) if poles.size else 0.0
    note = (f"sampled loop: {poles.size} closed-loop poles in z, largest |z| = {rho:.6g} "
            "(stable inside the unit circle)")
    if on:
        note += "; pole(s) on the unit circle: " + ", ".join(
            f"{complex(p):.6g}" for p in poles if abs(abs(p) - 1.0) <= CIRCLE_TOL
            and p.imag >= 0)
    slow: dict = {}  # type: ignore[type-arg]
    if not problems and on == 0 and counted is not None:
        zeros = np.concatenate([loop.controller.zeros, loop.sampled.transfer(output=1).zeros])
        slow, more = slow_certificate(fn, poles, zeros, period_s=loop.period_s)
        problems += more
    if problems:
        note += "; " + "; ".join(problems)
    return Stability(
        closed_loop_stable=not problems and outside == 0 and on == 0, method="poles",
        closed_loop_poles=tuple(complex(p) for p in poles),
        open_loop_rhp_poles=ol_out, open_loop_imag_axis_poles=ol_on,
        rhp_closed_loop_poles=outside, clockwise_encirclements=None,
        marginal=on > 0, note=note, domain="z", certified=not problems,
        unstable_roots_counted=counted, polish_iterations=search.iterations, **slow,
    )


def _critical(root: complex) -> bool:
    return bool(abs(root) >= 1.0 - CIRCLE_TOL)


def discrete_internal_stability(blocks: Sequence[tuple[str, Zpk]]) -> InternalStability:
    """Pole-zero cancellations on or outside the unit circle between blocks in z.

    The z-domain counterpart of :func:`~loopwarden.analysis.internal.internal_stability`:
    a pole with ``|p| ≥ 1`` of one block cancelled (within 1e−3 relative) by a zero of
    another, or a zero with ``|z| ≥ 1`` cancelled by a pole, hides a mode the loop cannot
    see.  Each zero cancels at most one pole, nearest first; a pair is reported once.
    """
    found = cancellations(blocks, _critical, CANCEL_RTOL)
    note = ("; ".join(f"pole {c.pole:.6g} of {c.pole_block} cancelled by zero {c.zero:.6g} "
                      f"of {c.zero_block}" for c in found)
            or "no pole-zero cancellation on or outside the unit circle between blocks")
    return InternalStability(internally_stable=not found, cancellations=tuple(found),
                             note=note)


def discrete_tracking(loop: DiscreteLoop) -> Tracking:
    """System type and the discrete error constants of ``L(z)``.

    ``system_type`` = net poles of L at z = 1; ``Kp = L(1)``,
    ``Kv = lim (z − 1) L(z) / T`` (1/s), ``Ka = lim (z − 1)² L(z) / T²`` (1/s²), each
    ``inf`` where the type is higher and 0 where lower; steady-state errors as in
    continuous time (``1/(1 + Kp)``, ``1/Kv`` per unit slope, ``1/Ka``).
    """
    m, c = at_z_one(loop.rational)
    if c == 0.0:
        return Tracking(system_type=0, kp=0.0, kv=0.0, ka=0.0, step_error=1.0,
                        ramp_error=math.inf, parabola_error=math.inf)
    T = loop.period_s
    coefficient = c / T ** m if m > 0 else c
    kp = error_constant(m, coefficient, 0)
    kv = error_constant(m, coefficient, 1)
    ka = error_constant(m, coefficient, 2)
    return Tracking(system_type=m, kp=kp, kv=kv, ka=ka, step_error=_inverse(1.0 + kp),
                    ramp_error=_inverse(kv), parabola_error=_inverse(ka))


def _inverse(x: float) -> float:
    """1/x with 1/0 = inf and 1/±inf = 0 (steady-state errors, never NaN)."""
    if x == 0.0:
        return math.inf
    return 0.0 if math.isinf(x) else 1.0 / x


# --------------------------------------------------------------------------- step
def _sampled_metrics(t: NDArray[np.float64], y: NDArray[np.float64], e: NDArray[np.float64],
                     final: float, band: float) -> StepMetrics:
    """Metrics read at the sampling instants (no interpolation between them)."""
    yn = y / final
    k_peak = int(np.argmax(yn))
    overshoot = 100.0 * (float(yn[k_peak]) - 1.0)
    has_overshoot = overshoot > 1e-7
    reach10 = np.flatnonzero(yn >= 0.1)
    reach90 = np.flatnonzero(yn >= 0.9)
    rise = (float(t[reach90[0]] - t[reach10[0]]) if reach10.size and reach90.size else None)
    outside = np.flatnonzero(np.abs(yn - 1.0) > band)
    if outside.size == 0:
        settling = 0.0
    elif outside[-1] == yn.size - 1:
        settling = math.inf
    else:
        settling = float(t[outside[-1] + 1])
    return StepMetrics(
        final_value=final, overshoot_pct=overshoot if has_overshoot else 0.0,
        peak_time_s=float(t[k_peak]) if has_overshoot else None, rise_time_s=rise,
        settling_time_s=settling, settling_band=band, horizon_s=float(t[-1]),
        ramp_error_final=float(e[-1]), exact_delay=True,
    )


def discrete_step_response(loop: DiscreteLoop, band: float) -> StepResult:
    """Sampled response of the plant output y to a unit reference step, and ramp error.

    Parameters
    ----------
    loop : DiscreteLoop
        A closed-loop stable sampled loop.
    band : float
        Settling band as a fraction of ``|y∞|``.

    Returns
    -------
    StepResult
        Metrics at the sampling instants kT: overshoot of the largest sample, rise time
        from the first sample at or above 10 % to the first at or above 90 %, settling
        time = the first instant after the last sample outside the band (s);
        ``ramp_error_final`` = kT − y[k] at the last sample for r[k] = kT.  The horizon
        lasts until the step has settled with a quiet last fifth and the ramp error's
        decaying part is below 1e−2·band of its value (or of T when it tends to 0).

    Raises
    ------
    AnalysisError
        Unstable closed loop, zero DC gain, or not settled within 2·10⁶ samples.
    """
    if not band > 0:
        raise AnalysisError(f"settling band must be positive, got {band}")
    cl = discrete_closed_loop(loop)
    n = cl.order
    eig = linalg.eigvals(cl.a) if n else np.zeros(0)
    if n and np.max(np.abs(eig)) >= 1.0:
        raise AnalysisError("the sampled closed loop is not stable: no settled step response")
    c_y, d_y = cl.c[1:2], float(cl.d[1, 0])
    x_inf = np.linalg.solve(np.eye(n) - cl.a, cl.b) if n else np.zeros((0, 1))
    final = float((c_y @ x_inf)[0, 0]) + d_y if n else d_y
    if final == 0.0 or not math.isfinite(final):
        raise AnalysisError("the sampled closed loop has zero DC gain from reference to "
                            "output: step metrics are undefined")
    T = loop.period_s
    rho = float(np.max(np.abs(eig))) if n else 0.0
    floor = HORIZON_TAIL_FRACTION * band
    samples = MIN_SAMPLES
    if rho > 0:
        # Until the slowest mode (amplitude taken as 10·|y∞|) is below the floor.
        samples = max(samples, math.ceil(math.log(floor / 10.0) / math.log(rho)))
    a1 = x_inf * T
    b1 = -np.linalg.solve(np.eye(n) - cl.a, a1) if n else np.zeros((0, 1))
    for _ in range(MAX_EXTENSIONS + 1):
        samples = min(samples, MAX_SAMPLES)
        k = np.arange(samples + 1, dtype=float)
        t = k * T
        if n:
            powers = output_of_powers(cl.a, np.hstack([x_inf, b1]), c_y, samples + 1)
        else:
            powers = np.zeros((samples + 1, 2))
        y = final - powers[:, 0]
        y_ramp = (float((c_y @ a1)[0, 0]) * k + float((c_y @ b1)[0, 0]) - powers[:, 1]
                  + d_y * T * k) if n else d_y * T * k
        e = t - y_ramp
        metrics = _sampled_metrics(t, y, e, final, band)
        quiet = np.abs(y[t >= 0.8 * t[-1]] / final - 1.0).max() <= 0.5 * band
        # e[k] = (its steady trend) + C A^k b₁: the last sample's ramp transient is exact.
        ramp_tail = abs(float(powers[-1, 1])) if n else 0.0
        ramp_quiet = ramp_tail <= floor * max(abs(float(e[-1])), T)
        if metrics.settling_time_s <= 0.75 * t[-1] and quiet and ramp_quiet:
            # The controller output at the same instants: u[k] = u∞ − C_u A^k x∞.
            c_u, d_u = cl.c[2:3], float(cl.d[2, 0])
            u = (float((c_u @ x_inf)[0, 0]) + d_u
                 - output_of_powers(cl.a, x_inf, c_u, samples + 1)[:, 0]) if n \
                else np.full(t.shape, d_u)
            metrics = dataclasses.replace(metrics, u_peak=float(np.max(np.abs(u))))
            return StepResult(metrics=metrics, step=plot_series(t, y), ramp_error=plot_series(t, e))
        if samples >= MAX_SAMPLES:
            break
        samples *= 2
    raise AnalysisError(f"the sampled step response has not settled within "
                        f"{samples * T:.4g} s ({samples} samples)")
