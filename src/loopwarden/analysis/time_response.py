"""Closed-loop reference step and ramp responses, exact also for loops with a delay.

Rational loops are solved exactly: for a Hurwitz closed-loop matrix A the step response is
``y(t) = C (I − e^{At}) x∞ + D`` with ``x∞ = −A⁻¹B``, sampled on a fine uniform grid by
powers of ``e^{Ah}`` and evaluated at any other instant with one matrix exponential, so
crossing and peak times are refined by root finding, not read off the grid.

Loops with a transport delay are simulated without any rational approximation of the
delay: the loop is cut at the delayed plant input (:func:`.closed_loop.delay_split`), the
step is ``h = delay/N`` with integer N so that the delay is exactly N samples of a buffer,
and the delay-free part is discretised exactly for an input that is linear over each step
(first-order hold on the delayed signal; the reference step and ramp are represented
exactly).  Jumps of the controller output (a proportional path seeing the reference step)
are kept as left and right values, so the delayed jump is not smeared over a step.  The
samples are advanced 64 at a time by one linear solve, which gives the same numbers as a
step-by-step loop at a small fraction of the cost.

A Padé copy of the delay is used only to estimate how long to simulate; the horizon is
extended when the simulated response has not clearly settled.

This module holds the entry points (:func:`step_response`, :func:`delay_step`); the grids
are in :mod:`.time_grid`, the exact rational response in :mod:`.time_rational`, the delay
simulation in :mod:`.time_delay_sim` and the figures read off a response in
:mod:`.time_metrics` (all re-exported here).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from numpy.typing import NDArray

from ..errors import AnalysisError
from ..lti import FloatArray, Loop
from .closed_loop import (
    closed_loop,
    closed_loop_poles,
    delay_split,
    reference_to_output,
)
from .results import StepResult
from .time_delay_sim import (  # noqa: F401  (re-exported: the old import path stays valid)
    DELAY_BLOCK,
    _BlockMaps,
    _delay_block_maps,
    _foh_discretise,
    _inside,
    _simulate_delay,
    simulate_delay_runs,
)
from .time_grid import (  # noqa: F401  (re-exported: the old import path stays valid)
    _AMPLITUDES,
    HORIZON_TAIL_FRACTION,
    RATIONAL_MAX_STEPS,
    RATIONAL_STEP_PER_RAD,
    RATIONAL_STEPS,
    Segments,
    _compute_mode_amplitudes,
    _horizon,
    _mode_amplitudes,
    _pade,
    _ramp_error_steady,
    grid_segments,
    grid_steps,
    segment_times,
)
from .time_metrics import (  # noqa: F401  (re-exported: the old import path stays valid)
    PLOT_POINTS,
    _first_reach,
    _metrics,
    _peak,
    _settled,
    crossing_time,
    plot_series,
    settling_time,
)
from .time_rational import (  # noqa: F401  (re-exported: the old import path stays valid)
    _RESPONSES,
    RationalResponse,
    output_of_powers,
)

__all__ = [
    "RationalResponse",
    "crossing_time",
    "grid_segments",
    "grid_steps",
    "segment_times",
    "settling_time",
    "step_response",
]


#: Fewest and most steps of the delay simulation.
DELAY_MIN_STEPS = 20_000


DELAY_MAX_STEPS = 2_000_000


#: Interpolation error allowed per mode, as a fraction of the band: a mode of amplitude a
#: and frequency ω held linear over a step errs by about a·(ωh)²/8.
DELAY_HOLD_TOL = 1e-3


#: Order of the Padé copy used only for the horizon of delay loops.
PADE_ORDER = 6


#: Horizon doublings allowed when the response has not settled.
MAX_EXTENSIONS = 6


# --------------------------------------------------------------------------- public
def step_response(loop: Loop, band: float) -> StepResult:
    """Closed-loop response of y to a unit reference step, and the ramp-tracking error.

    Parameters
    ----------
    loop : Loop
        A closed-loop stable loop (the caller checks stability first).
    band : float
        Settling band as a fraction of ``|y∞|``, e.g. 0.02.

    Returns
    -------
    StepResult
        Metrics computed on the fine grid (times in s, overshoot in % of ``|y∞|``,
        ``ramp_error_final`` = ``t − y`` at the horizon end for r = t, per unit slope) and
        the step and ramp-error series thinned to at most ~4000 points for plots.

    Raises
    ------
    AnalysisError
        When a rational closed loop has a pole with Re ≥ 0 (hidden modes included), when
        the final value is zero or not finite, when the response has not settled
        after extending the horizon, or when the delay is too short compared with the
        horizon to be held as a whole number of steps.
    """
    if not band > 0:
        raise AnalysisError(f"settling band must be positive, got {band}")
    ss = closed_loop(loop)
    if not loop.has_delay and ss.order and np.max(closed_loop_poles(loop).real) >= 0:
        raise AnalysisError("the closed loop is not stable: no settled step response")
    rational = RationalResponse.of_loop(loop)
    try:
        final = rational.final_value
    except np.linalg.LinAlgError as exc:
        raise AnalysisError("the closed loop has a pole at s = 0: no final value") from exc
    if final == 0.0 or not math.isfinite(final):
        raise AnalysisError("the closed loop has zero DC gain from reference to output "
                            "(or no finite one): step metrics are undefined")

    if loop.has_delay:
        t_ref = reference_to_output(loop.with_plant(loop.plant * _pade(loop.delay_s,
                                                                       PADE_ORDER)))
    else:
        t_ref = reference_to_output(loop)
    poles, amp = _mode_amplitudes(t_ref)
    horizon = _horizon(poles, amp, final, band, _ramp_error_steady(t_ref))

    for _ in range(MAX_EXTENSIONS + 1):
        if loop.has_delay:
            t, y, e, u_peak = _delay_run(loop, horizon, poles, amp, final, band)
        else:
            segments = grid_segments(t_ref, horizon, final, band)
            t, y, e = rational.on_segments(segments)
        if _settled(t, y, final, band):
            break
        horizon *= 2.0
    else:
        raise AnalysisError(f"the step response has not settled within {horizon / 2:.4g} s")
    if not loop.has_delay:
        # The controller output on the same exact grid (the u row of the closed loop).
        u_resp = RationalResponse(ss.a, ss.b, ss.c[1:2], float(ss.d[1, 0]))
        u_peak = float(np.max(np.abs(u_resp.on_segments(segments)[1])))

    metrics = dataclasses.replace(
        _metrics(t, y, e, final, band, loop.has_delay, None if loop.has_delay else rational),
        u_peak=u_peak)
    return StepResult(metrics=metrics, step=plot_series(t, y), ramp_error=plot_series(t, e))


def _delay_run(loop: Loop, horizon: float, poles: NDArray[np.complex128], amp: FloatArray,
               final: float, band: float
               ) -> tuple[FloatArray, FloatArray, FloatArray, float]:
    """Choose h = delay/N fine enough for every significant mode, then simulate.

    Returns t, the step response, the ramp error and the step's largest |u| (either side
    of every sample, so a jump of u counts).
    """
    h, steps = delay_step(loop, horizon, poles, amp, final, band)
    t, y, u_plus, u_minus = simulate_delay_runs(delay_split(loop), loop.delay_s, h, steps)
    u_peak = float(max(np.max(np.abs(u_plus[:, 0])), np.max(np.abs(u_minus[:, 0]))))
    return t, y[:, 0], t - y[:, 1], u_peak


def delay_step(loop: Loop, horizon: float, poles: NDArray[np.complex128], amp: FloatArray,
               final: float, band: float) -> tuple[float, int]:
    """Step h = delay/N of the exact delay simulation and the number of steps.

    ``poles`` and ``amp`` are the modes of a Padé copy and their step amplitudes, ``final``
    the scale of the response (the band is ``band·|final|``).
    """
    floor = HORIZON_TAIL_FRACTION * band * abs(final)
    tol = DELAY_HOLD_TOL * band * abs(final)
    # Padé poles far beyond its order/delay are artefacts of the approximation.
    limit = 2.0 * PADE_ORDER / loop.delay_s
    h_target = horizon / DELAY_MIN_STEPS
    for p, a in zip(poles, amp, strict=True):
        if a > floor and 0 < abs(p) < limit:
            h_target = min(h_target, math.sqrt(8.0 * tol / a) / abs(p))
    h_target = max(h_target, horizon / DELAY_MAX_STEPS)
    n_delay = max(1, math.floor(loop.delay_s / h_target))
    h = loop.delay_s / n_delay
    steps = math.ceil(horizon / h)
    if steps > DELAY_MAX_STEPS:
        raise AnalysisError(
            f"the delay ({loop.delay_s:.3g} s) is too short against the {horizon:.3g} s "
            f"horizon to simulate it exactly ({steps} steps needed)")
    return h, steps
