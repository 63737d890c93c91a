"""Typed, frozen results of the loop analysis.

Units are in the field names.  ``math.inf`` means "infinite" (e.g. no phase crossover, so
an infinite gain margin); ``None`` means "not applicable".  NaN never appears in a result:
a quantity that could not be computed raises :class:`loopwarden.errors.AnalysisError`
and the rule that needs it reports an ``error`` finding.
"""

from __future__ import annotations

import typing
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

if typing.TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load numpy
    import numpy as np
    from numpy.typing import NDArray


# --------------------------------------------------------------------------- stability
@dataclass(frozen=True, slots=True, kw_only=True)
class Stability:
    """Closed-loop stability of one loop.

    ``method`` is ``"poles"`` (rational loop: eigenvalues of the closed-loop state matrix)
    or ``"nyquist"`` (loop with transport delay or measured plant: encirclement count).
    ``domain`` ``"z"`` marks a sampled loop: poles are in z, "right half-plane" counts
    read "outside the unit circle" and "imaginary axis" reads "on the unit circle".
    """

    closed_loop_stable: bool
    method: str
    closed_loop_poles: tuple[complex, ...]        # empty for the Nyquist method
    open_loop_rhp_poles: int                       # P, open-loop poles with Re > 0
    open_loop_imag_axis_poles: int                 # poles on the imaginary axis (indented)
    rhp_closed_loop_poles: int | None              # Z = N + P; None: not finite (neutral)
    clockwise_encirclements: int | None            # N (Nyquist method only)
    marginal: bool = False                         # a closed-loop pole on the boundary
    note: str = ""
    domain: str = "s"                              # "z": sampled loop, poles in z
    # The certificate (see analysis/roots.py): roots polished on the exact characteristic
    # function, and the argument principle's count of roots in each region checked.
    certified: bool = True                         # False: roots and counts disagree
    unstable_roots_counted: int | None = None      # argument principle: Re s > 0 (|z| > 1)
    search_abscissa_rad_s: float | None = None     # delay loops: every root with
                                                   # Re s > −this is in closed_loop_poles
    roots_right_of_search_counted: int | None = None   # argument principle for that line
    slow_abscissa_rad_s: float | None = None       # slow region Re s > −this (z: the
                                                   # circle |z| = e^{−this·T})
    slow_roots_found: int | None = None
    slow_roots_counted: int | None = None          # argument principle for the slow region
    polish_iterations: int = 0


@dataclass(frozen=True, slots=True, kw_only=True)
class Cancellation:
    """An unstable or imaginary-axis pole of one block cancelled by a zero of another."""

    pole: complex
    zero: complex
    pole_block: str                                # "plant", "sensor", "controller[2] lead"
    zero_block: str
    distance: float                                # |pole − zero|, rad/s


@dataclass(frozen=True, slots=True, kw_only=True)
class InternalStability:
    internally_stable: bool
    cancellations: tuple[Cancellation, ...]
    note: str = ""


# --------------------------------------------------------------------------- margins
@dataclass(frozen=True, slots=True, kw_only=True)
class GainCrossing:
    """A frequency where |L(jω)| = 1."""

    frequency_rad_s: float
    phase_margin_deg: float                        # 180° + ∠L, wrapped to (−180, 180]
    delay_margin_s: float                          # extra delay that reaches −1 here


@dataclass(frozen=True, slots=True, kw_only=True)
class PhaseCrossing:
    """A frequency where ∠L(jω) = −180° (mod 360°), ω = 0 and ω = ∞ included."""

    frequency_rad_s: float                         # may be 0.0 or math.inf
    magnitude: float                               # |L| there
    gain_margin_db: float                          # −20·log10|L|; > 0 upper, < 0 lower


@dataclass(frozen=True, slots=True, kw_only=True)
class Margins:
    gain_margin_db: float                          # smallest upper margin; inf if none
    gain_margin_lower_db: float | None             # gain-reduction margin (≤ 0 dB) or None
    phase_margin_deg: float                        # smallest over all crossings; inf if none
    gain_crossover_rad_s: float | None             # where phase_margin_deg is measured
    phase_crossover_rad_s: float | None            # where gain_margin_db is measured
    delay_margin_s: float                          # min over crossings; inf if none
    gain_crossings: tuple[GainCrossing, ...]
    phase_crossings: tuple[PhaseCrossing, ...]
    delay_margin_samples: float | None = None      # sampled loop: delay margin / period
    # Closed-loop unstable loop (see analysis/stabilising_gain.py): gain_margin_db is then
    # the gain change to the nearest stable gain range (negative: reduce the gain).
    stable_gain_found: bool | None = None          # None: the loop is stable
    stable_gain_range_db: tuple[float, float] | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Sensitivity:
    peak_sensitivity: float                        # Ms = max |S(jω)|, ω ∈ [0, ∞]
    peak_sensitivity_rad_s: float                  # where (0.0 or math.inf allowed)
    peak_complementary: float                      # Mt = max |T(jω)|
    peak_complementary_rad_s: float
    disk_margin: float                             # balanced α = 1 / max |S − 1/2|
    disk_gain_low: float                           # guaranteed gain range (factor)
    disk_gain_high: float                          # math.inf when α ≥ 2
    disk_phase_deg: float                          # guaranteed ± phase


# --------------------------------------------------------------------------- tracking
@dataclass(frozen=True, slots=True, kw_only=True)
class Tracking:
    """Error constants of the loop L (error e = r − H·y)."""

    system_type: int                               # net poles of L at s = 0
    kp: float | None                               # position constant; inf for type ≥ 1
    kv: float | None                               # velocity constant (1/s)
    ka: float | None                               # acceleration constant (1/s²)
    step_error: float | None                       # 1/(1 + Kp)
    ramp_error: float | None                       # 1/Kv (per unit ramp slope); inf type 0
    parabola_error: float | None                   # 1/Ka
    # Fields the data do not decide (a measured plant: the constant of the loop's own type
    # needs the plant's DC gain): None, shown as null; why: analysis.absence.
    # (A tracking part that failed keeps 0.0 placeholders, listed here too, because the
    # step plots read ramp_error as a number whenever a step response exists.)
    unknown: tuple[str, ...] = ()


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


# --------------------------------------------------------------------------- boost
@dataclass(frozen=True, slots=True, kw_only=True)
class SlowPair:
    """A slow closed-loop pole nearly cancelled by a closed-loop zero."""

    pole: complex
    zero: complex
    residue: float                                 # step-response residue of the pole
    time_constant_s: float                         # 1/|Re pole|
    tail_time_s: float                             # time for the tail to enter the band
    ramp_residue: float                            # residue of the ramp-error response
    ramp_tail_time_s: float
    tail_samples: float | None = None              # sampled loop: tail_time_s / period
    domain: str = "s"                              # "z": pole and zero are in z


@dataclass(frozen=True, slots=True, kw_only=True)
class SlowTail:
    pairs: tuple[SlowPair, ...]
    settling_time_s: float                         # with the tail (as simulated)
    settling_time_without_tail_s: float            # tail terms removed from the response
    criteria: str                                  # how "slow" and "close" were decided


@dataclass(frozen=True, slots=True, kw_only=True)
class StageCrossoverCost:
    crossover_rad_s: float
    phase_cost_deg: float                          # phase the stage adds there (≤ 0 for lag)
    zero_ratio: float                              # stage zero / crossover frequency


@dataclass(frozen=True, slots=True, kw_only=True)
class Boost:
    """A low-frequency boost stage (its low-frequency gain exceeds its high-frequency gain)."""

    stage: int                                     # controller stage index (1-based)
    stage_name: str
    zero_rad_s: float | None
    pole_rad_s: float | None
    dc_boost: float                                # |stage(0)| / |stage(∞)|
    band_2x_rad_s: float | None                    # improvement ≥ 2 for ω below this
    band_3db_rad_s: float | None                   # improvement ≥ √2 for ω below this
    improvement_at_reference_band: float | None    # factor at requirements.reference_band
    costs: tuple[StageCrossoverCost, ...]


@dataclass(frozen=True, slots=True, kw_only=True)
class RequirementLimit:
    """A hard limit of the review that the integral alternative is also judged against.

    Built by the rule-set layer from the effective limits (rule set, tightened by the
    design's ``[requirements]`` and ``[limits]``); the analysis only compares numbers.
    ``figure`` names a figure of :data:`loopwarden.analysis.integral_alternative.FIGURES`.
    """

    rule: str                                      # rule id, e.g. "margin.phase"
    figure: str                                    # e.g. "phase_margin_deg"
    bound: str                                     # "min" or "max"
    value: float
    unit: str
    source: str                                    # where the limit came from
    nominal_only: bool = False                     # the rule judges the nominal plant only


@dataclass(frozen=True, slots=True, kw_only=True)
class RequirementCheck:
    """One :class:`RequirementLimit` judged on the integral alternative of one variant."""

    rule: str
    figure: str
    bound: str
    limit: float
    value: float | None                            # None: not computed for this loop
    unit: str
    met: bool | None                               # None: could not be judged


@dataclass(frozen=True, slots=True, kw_only=True)
class IntegralAlternative:
    """The loop with one boost stage's pole moved to the origin, re-tuned by one gain.

    One alternative controller per design: the same ``gain_factor`` and snippet on every
    plant variant, each variant's figures on its own plant.
    """

    stage: int
    gain_factor: float                             # overall gain multiplier applied
    closed_loop_stable: bool
    margins: Margins
    sensitivity: Sensitivity
    tracking: Tracking
    step: StepMetrics
    slow_pairs: tuple[SlowPair, ...]
    snippet_toml: str                              # ready to paste into a design file
    target_phase_margin_deg: float | None = None   # max(current PM, rule-set minimum)
    meets_target: bool | None = None               # False: best reachable PM reported
    requirements: tuple[RequirementCheck, ...] = ()  # the review's limits on this variant
    meets: tuple[str, ...] = ()                    # rule ids of the limits it meets
    fails: tuple[str, ...] = ()                    # rule ids of the limits it breaches
    slow_pairs_error: str | None = None            # why slow pairs were not computed
    sizing_variant: str | None = None              # the variant that limits the gain
    # With a [disturbance] table: the load step's ∫y dt and ∫|y| dt (output·s) of this
    # alternative and of the current controller on the same variant (None: no table, an
    # unstable loop, or not computed; ``disturbance_error`` then says why).
    disturbance_ie: float | None = None
    disturbance_iae: float | None = None
    current_disturbance_ie: float | None = None
    current_disturbance_iae: float | None = None
    disturbance_error: str | None = None


# --------------------------------------------------------------------------- curves
@dataclass(frozen=True, slots=True, kw_only=True)
class Curves:
    """Data for plots, computed once by the analysis."""

    frequency_rad_s: NDArray[np.float64]
    open_loop: NDArray[np.complex128]              # L(jω)
    step: TimeSeries
    ramp_error: TimeSeries
    improvement: dict[int, NDArray[np.float64]]    # per boost stage, on frequency_rad_s


# --------------------------------------------------------------------------- sampled, measured
@dataclass(frozen=True, slots=True, kw_only=True)
class SampledInfo:
    """How a sampled loop was formed, and its sample rate against its bandwidth."""

    period_s: float
    method: str                                    # discretisation of continuous stages
    prewarp_rad_s: float | None
    compute_delay_samples: int
    plant_delay_samples: float                     # transport delay / period (may be fractional)
    nyquist_rad_s: float                           # π / period
    sample_rate_rad_s: float                       # 2π / period
    closed_loop_bandwidth_rad_s: float | None      # |T| first falls 3 dB below |T(1)|;
                                                   # None: not below the Nyquist frequency
    sample_rate_ratio: float                       # sample rate / bandwidth (≤ 2 if None)
    note: str                                      # the inter-sample caveat


@dataclass(frozen=True, slots=True, kw_only=True)
class FrequencyCoverage:
    """What a measured frequency response covers, and what it leaves undecided.

    ``uncovered`` maps check names to why the measured range does not decide them (a
    crossing outside the range): those checks are reported as ``error``.
    """

    file: str
    sha256: str
    frequency_min_rad_s: float
    frequency_max_rad_s: float
    points: int
    unstable_poles: int                            # declared open-loop RHP poles (P)
    integrators: int                               # poles of L at s = 0 (controller + declared)
    loop_gain_at_min: float                        # |L| at the lowest measured frequency
    loop_gain_at_max: float                        # |L| at the highest
    assumptions: str
    uncovered: Mapping[str, str] = field(default_factory=lambda: MappingProxyType({}))
    # Figures set by a bound that holds outside the range, not by a measured crossing or
    # peak (check names): their values are conservative ("at least" / "at most").
    bounded: tuple[str, ...] = ()


@dataclass(frozen=True, slots=True, kw_only=True)
class PoleZeroMap:
    """Roots for the pole-zero map, in s (or in z for a sampled loop)."""

    closed_loop_zeros: tuple[complex, ...]         # zeros of reference → plant output
    open_loop_poles: tuple[complex, ...]           # poles of L (its rational part)


# --------------------------------------------------------------------------- aggregate
@dataclass(frozen=True, slots=True, kw_only=True)
class LoopAnalysis:
    """Everything the rules need about one plant variant."""

    variant: str
    stability: Stability
    internal: InternalStability
    margins: Margins
    sensitivity: Sensitivity
    tracking: Tracking
    step: StepMetrics | None                       # None: could not simulate (see errors)
    slow_tail: SlowTail | None                     # None: no model to compute it from
    boosts: tuple[Boost, ...]
    integral_alternatives: tuple[IntegralAlternative, ...]
    curves: Curves | None
    errors: dict[str, str]                         # part name → why it could not be computed
    sampling: SampledInfo | None = None            # sampled loops only
    coverage: FrequencyCoverage | None = None      # measured plants only
    not_applicable: Mapping[str, str] = field(     # check name → why it does not apply here
        default_factory=lambda: MappingProxyType({}))
    pole_zero: PoleZeroMap | None = None           # None: measured plant (no model)
    # Check name → why the analysis could not decide it (a part failed numerically; its
    # result is a placeholder, see analysis/undecided.py): those checks report ``error``.
    undecided: Mapping[str, str] = field(default_factory=lambda: MappingProxyType({}))
    disturbance: DisturbanceResponse | None = None  # None: no [disturbance] or not computed
    effort: Effort | None = None                    # None: not computed (see errors)
    saturation: Saturation | None = None            # None: no [actuator] or not computed
