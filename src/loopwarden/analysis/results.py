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
from .results_compensation import (  # noqa: F401  (re-exported: the old import path stays valid)
    Boost,
    IntegralAlternative,
    RequirementCheck,
    RequirementLimit,
    SlowPair,
    SlowTail,
    StageCrossoverCost,
)
from .results_loop import (  # noqa: F401  (re-exported: the old import path stays valid)
    Cancellation,
    GainCrossing,
    InternalStability,
    Margins,
    PhaseCrossing,
    Sensitivity,
    Stability,
    Tracking,
)
from .results_time import (  # noqa: F401  (re-exported: the old import path stays valid)
    DisturbanceResponse,
    Effort,
    SaturatedLoad,
    SaturatedStep,
    Saturation,
    SaturationCurves,
    StepMetrics,
    StepResult,
    TimeSeries,
)


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
