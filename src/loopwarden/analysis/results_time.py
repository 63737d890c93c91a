"""Frozen results in time: step metrics and series, the load-disturbance response, the
actuator effort and the saturated responses.  Re-exported by :mod:`.results`.
"""

from __future__ import annotations

import typing
from dataclasses import dataclass

if typing.TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load numpy
    import numpy as np
    from numpy.typing import NDArray


# --------------------------------------------------------------------------- time response
@dataclass(frozen=True, slots=True, kw_only=True)
class StepMetrics:
    """Closed-loop reference step response y(t), r = 1(t)."""

    final_value: float
    overshoot_pct: float                           # 0 when no overshoot
    peak_time_s: float | None
    rise_time_s: float | None                      # 10–90 %, interpolated; None if never
    settling_time_s: float                         # last exit from the band; inf if never
    settling_band: float                           # fraction of |final value|, e.g. 0.02
    horizon_s: float                               # simulated length
    ramp_error_final: float                        # e(t_end) for r = t (per unit slope)
    exact_delay: bool                              # True: delay simulated exactly
    u_peak: float | None = None                    # max |u| of the controller output


@dataclass(frozen=True, slots=True, kw_only=True)
class TimeSeries:
    """Sampled signal for plots (renderers draw it; they never recompute it)."""

    time_s: NDArray[np.float64]
    value: NDArray[np.float64]


@dataclass(frozen=True, slots=True, kw_only=True)
class StepResult:
    """What :func:`loopwarden.analysis.time_response.step_response` returns."""

    metrics: StepMetrics
    step: TimeSeries                               # y(t) for r = 1(t)
    ramp_error: TimeSeries                         # e(t) = t − y(t) for r = t


# --------------------------------------------------------------------------- disturbance
@dataclass(frozen=True, slots=True, kw_only=True)
class DisturbanceResponse:
    """Response of the plant output y to a step load disturbance of height ``size``.

    ``at`` is ``"plant_input"`` or ``"plant_output"`` (y then includes the step itself).
    ``peak`` = max |y| (output units) at ``peak_time_s`` (None: approached only as
    t → ∞, a monotone response); ``static_deviation`` = y(∞) (0 with integral action);
    ``ie`` = ∫y dt and ``iae`` = ∫|y| dt (output·s; ±inf / inf when y(∞) ≠ 0);
    ``recovery_time_s`` = the last time |y − y(∞)| exceeds ``recovery_level`` =
    ``settling_band`` × the disturbance's static effect |size·P(0)| (|size| at the output;
    the peak when P(0) is not finite or zero).  ``gain_peak`` = max |P·S| (|S| at the
    output) for ω ≤ ``band_rad_s`` (the whole axis when None) at ``gain_peak_rad_s``.
    Sampled loops: every figure at the sampling instants, ``ie`` = T·Σ y[k].
    """

    at: str
    size: float
    peak: float
    peak_time_s: float | None
    static_deviation: float
    ie: float
    iae: float
    recovery_time_s: float
    recovery_level: float
    settling_band: float
    gain_peak: float
    gain_peak_rad_s: float
    band_rad_s: float | None
    horizon_s: float
    u_peak: float                                   # max |u| of the controller output
    exact_delay: bool = False                       # the delay simulated exactly
    sampled: bool = False


@dataclass(frozen=True, slots=True, kw_only=True)
class Effort:
    """Measurement noise to the actuator and the actuator signal's peaks.

    ``ks_peak`` = max |K·S| over ω (K the controller, S = 1/(1 + L)) at
    ``ks_peak_rad_s`` (``inf``: the supremum is approached as ω → ∞; sampled loops: up to
    the Nyquist frequency); ``controller_hf_gain`` = |K(∞)| (sampled: |K(e^{jπ})| at the
    Nyquist frequency); ``u_peak_step`` = max |u| for a unit reference step and
    ``u_peak_disturbance`` = max |u| for the design's disturbance step (None: no
    ``[disturbance]`` table, or the closed loop is not stable).
    """

    ks_peak: float
    ks_peak_rad_s: float
    controller_hf_gain: float
    u_peak_step: float | None
    u_peak_disturbance: float | None


# --------------------------------------------------------------------------- saturation
@dataclass(frozen=True, slots=True, kw_only=True)
class SaturatedStep:
    """The reference step of height ``step`` with the actuator's limits.

    Settling in the design's band (fraction of the final value) as the linear step;
    ``windup_cost_s`` = settling − ``linear_settling_time_s`` (the linear step's);
    ``u_peak`` = max |u| of the controller's demand before the limits;
    ``saturated_time_s`` = the time the actuator output differs from the demand.
    ``settling_time_s`` is ``inf`` when the response does not settle within the horizon
    (e.g. the limits cannot hold the final value).
    """

    step: float
    settling_time_s: float
    overshoot_pct: float
    linear_settling_time_s: float
    linear_overshoot_pct: float
    windup_cost_s: float
    u_peak: float
    saturated_time_s: float
    horizon_s: float


@dataclass(frozen=True, slots=True, kw_only=True)
class SaturatedLoad:
    """The ``[disturbance]`` load step with the actuator's limits.

    ``peak`` = max |y| (output units); ``recovery_time_s`` = last time |y − y∞| exceeds the
    linear response's ``recovery_level`` (y∞ the linear static deviation; ``inf``: not
    recovered within the horizon).  ``linear_*`` are the same figures of the same
    simulation without limits, so both carry the same time step (peaks read on the
    simulation grid: within a few 1e-6 of ``disturbance.peak``, which is refined on the exact
    response).
    """

    peak: float
    linear_peak: float
    recovery_time_s: float
    linear_recovery_time_s: float
    u_peak: float
    saturated_time_s: float


@dataclass(frozen=True, slots=True, kw_only=True)
class SaturationCurves:
    """Series for the plots: saturated and linear y, demand u and actuator output u_a."""

    step: TimeSeries
    step_linear: TimeSeries
    step_u: TimeSeries
    step_u_actuator: TimeSeries
    load: TimeSeries | None = None
    load_linear: TimeSeries | None = None
    load_u_actuator: TimeSeries | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Saturation:
    """Actuator limits, the controller's anti-windup and the saturated responses."""

    min_value: float
    max_value: float
    rate_limit_per_s: float | None
    anti_windup: str
    tracking_time_s: float | None                  # back-calculation only
    method: str                                    # "rk4" (continuous) or "sampled"
    step_s: float                                  # the fixed step (sampled: the period)
    reference: SaturatedStep
    load: SaturatedLoad | None                     # None: no [disturbance] table
    curves: SaturationCurves | None = None
