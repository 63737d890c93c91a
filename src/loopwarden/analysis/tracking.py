"""Steady-state tracking: system type and the error constants Kp, Kv, Ka.

The error is ``e = r − H·y`` and the loop is ``L = C·P·H·e^{−s·delay}``; the delay is 1 at
s = 0, so only the rational part matters.  Everything is read from the zeros, poles and
gain of L (exact counting of the poles at the origin, no evaluation at a small s).
"""

from __future__ import annotations

import math

from ..lti import Loop, Zpk
from .results import Tracking

__all__ = ["compute_tracking", "error_constant"]


def error_constant(system_type: int, coefficient: float, order: int) -> float:
    """``lim s^order · L(s)`` as s → 0 for a loop of the given type.

    Parameters
    ----------
    system_type : int
        Net number of poles of L at s = 0 (negative when L has net zeros there).
    coefficient : float
        ``lim s^type · L(s)`` as s → 0 (finite and non-zero).
    order : int
        0 for Kp, 1 for Kv (1/s), 2 for Ka (1/s²).

    Returns
    -------
    float
        ``coefficient`` when ``order == system_type``, ``±inf`` when the type is higher
        (sign of the coefficient), 0 when it is lower.
    """
    if system_type == order:
        return coefficient
    if system_type > order:
        return math.copysign(math.inf, coefficient)
    return 0.0


def _inverse(x: float) -> float:
    """1/x with 1/0 = inf and 1/±inf = 0 (steady-state errors, never NaN)."""
    if x == 0.0:
        return math.inf
    if math.isinf(x):
        return 0.0
    return 1.0 / x


def compute_tracking(loop: Loop) -> Tracking:
    """System type and error constants of the loop.

    Parameters
    ----------
    loop : Loop
        The feedback loop; the transport delay does not change the constants.

    Returns
    -------
    Tracking
        ``system_type`` = net poles of L at s = 0; ``kp`` (dimensionless), ``kv`` (1/s),
        ``ka`` (1/s²), each ``inf`` where the type is higher and 0 where it is lower;
        ``step_error = 1/(1 + Kp)``, ``ramp_error = 1/Kv`` (per unit ramp slope, s),
        ``parabola_error = 1/Ka`` (per unit of r = t²/2, s²).  A division by zero gives
        ``inf`` (e.g. ``Kp = −1``, which puts a closed-loop pole at the origin).

    Notes
    -----
    The constants describe the error ``r − H·y`` seen by the controller; with a sensor of
    DC gain H(0) ≠ 1 the output error ``r − y`` differs.  ``kp``, ``kv``, ``ka`` and the
    type are those of L; with a 2-DOF pid (setpoint weights b, c ≠ 1) the three errors
    are those of the reference path (e.g. b ≠ 1 on a type-2 loop leaves the ramp error
    (1 − b)·ti instead of 0).
    """
    lo = loop.rational
    system_type = lo.origin_poles
    coefficient = lo.low_frequency_coefficient()
    if coefficient == 0.0:
        # L ≡ 0 (a zero gain somewhere): no loop, no error reduction at all.
        return Tracking(system_type=0, kp=0.0, kv=0.0, ka=0.0, step_error=1.0,
                        ramp_error=math.inf, parabola_error=math.inf)
    kp = error_constant(system_type, coefficient, 0)
    kv = error_constant(system_type, coefficient, 1)
    ka = error_constant(system_type, coefficient, 2)
    errors = (_inverse(1.0 + kp), _inverse(kv), _inverse(ka))
    gap = loop.reference_gap
    if gap is not None and gap.gain != 0.0:
        errors = _weighted_errors(loop, gap, system_type, coefficient)
    return Tracking(
        system_type=system_type,
        kp=kp,
        kv=kv,
        ka=ka,
        step_error=errors[0],
        ramp_error=errors[1],
        parabola_error=errors[2],
    )


def _leading(n: int, coefficient: float) -> tuple[int, float]:
    """``1 + G`` near s = 0 as ``a·s^(−p)``, for G of type n with coefficient c."""
    if n > 0:
        return n, coefficient
    if n == 0:
        return 0, 1.0 + coefficient
    return 0, 1.0


def _weighted_errors(loop: Loop, gap: Zpk, system_type: int, coefficient: float
                     ) -> tuple[float, float, float]:
    """Steady-state errors of ``r − H·y`` with a 2-DOF first stage [derived].

    With ``C₁ − C_r = Δ`` (:attr:`.Loop.reference_gap`) and ``G = C₂···Cₖ·P·H``,
    ``E/R = (1 + Δ·G)/(1 + C₁·G)``; near s = 0 numerator and denominator are ``a·s^(−p)``
    and the error to ``r = t^k/k!`` is ``lim (E/R)/s^k``: 0, ``a_N/a_D`` or ∞.
    """
    g = loop.plant * loop.sensor
    for st in loop.stages[1:]:
        g = g * st
    dg = gap * g
    p_n, a_n = _leading(dg.origin_poles, dg.low_frequency_coefficient())
    p_d, a_d = _leading(system_type, coefficient)
    out = []
    for k in range(3):
        power = p_d - p_n - k
        if power > 0:
            out.append(0.0)
        elif power < 0 or a_d == 0.0:
            out.append(math.inf)
        else:
            out.append(a_n / a_d)
    return out[0], out[1], out[2]
