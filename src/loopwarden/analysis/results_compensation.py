"""Frozen results on slow compensation: slow pairs and their tail, boost bands, the
requirement limits and the integral alternative.  Re-exported by :mod:`.results`.
"""

from __future__ import annotations

import typing
from dataclasses import dataclass

if typing.TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load numpy
    pass
from .results_loop import Margins, Sensitivity, Tracking
from .results_time import StepMetrics


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
