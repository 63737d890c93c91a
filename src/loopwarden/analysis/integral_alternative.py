"""The integral-action alternative to a low-frequency boost stage.

A lag ``(s+z)/(s+p)`` buys a finite DC boost z/p.  Moving its pole to the origin,
``(s+z)/s``, gives integral action instead: one system type higher (zero steady error for
the input that the lag only reduced), for about the same phase cost at crossover.  The
phase it costs is slightly larger, so one overall gain factor k is chosen so that the
phase margin is at least the current design's (or the rule set's minimum, if higher) and
the closed loop is stable.  Among the gains that meet this the highest is kept, since a
higher gain tracks better; k never exceeds 1, so the alternative does not buy tracking with
more loop gain (and bandwidth) than the current design has.

One controller serves every plant variant, so the alternative is one controller too
(:func:`design_alternatives`): one k for all variants, the worst variant's margin deciding,
then each variant reviewed with it and judged against the review's hard limits.  In a
sampled design a continuous stage gets its pole at s = 0 and is discretised with the
design's method (the pole lands on z = 1); a stage written in z gets its pole at z = 1.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence

import numpy as np

from ..design.model import Design, Sampling, Stage
from ..errors import AnalysisError
from ..lti import Loop
from ..lti_discrete import DiscreteLoop
from .discrete_margins import compute_discrete_margins, compute_discrete_sensitivity
from .discrete_response import (
    discrete_stability,
    discrete_step_response,
    discrete_tracking,
)
from .frequency_grid import loop_grid
from .integral_gain_search import (  # noqa: F401  (re-exported: the old import path stays valid)
    _NEWTON_ITER,
    _XTOL_U,
    GAIN_RANGE,
    GAIN_RTOL,
    GRID_PER_DECADE,
    _AllVariants,
    _best_reachable,
    _boundary,
    _choose_gain,
    _GainSearch,
    _integral_model,
    integral_loop,
    integral_stage,
    integral_stage_z,
    scaled,
)
from .integral_snippet import (  # noqa: F401  (re-exported: the old import path stays valid)
    _num,
    _num_z,
    _snippet,
    _toml_string,
)
from .margins import (
    compute_margins,
)
from .results import (
    Boost,
    IntegralAlternative,
    LoopAnalysis,
    Margins,
    RequirementCheck,
    RequirementLimit,
    SlowPair,
    StepResult,
)
from .sensitivity import compute_sensitivity
from .slow_pairs import slow_tail
from .stability import closed_loop_stability
from .time_response import step_response
from .tracking import compute_tracking

__all__ = ["FIGURES", "GAIN_RANGE", "alternative_over_variants", "design_alternatives",
           "integral_alternatives", "integral_loop", "integral_stage", "integral_stage_z",
           "judge", "scaled"]


def _target(current_deg: Sequence[float], min_phase_margin_deg: float | None) -> float:
    """max(rule-set minimum, the smallest finite current phase margin), 0° without either."""
    finite = [v for v in current_deg if math.isfinite(v)]
    candidates = ([min(finite)] if finite else []) + (
        [min_phase_margin_deg] if min_phase_margin_deg is not None else [])
    return max(candidates) if candidates else 0.0


#: Figures of an alternative that a requirement can name, with how to read them.
FIGURES: dict[str, Callable[[IntegralAlternative], float | None]] = {
    "phase_margin_deg": lambda a: a.margins.phase_margin_deg,
    "gain_margin_db": lambda a: a.margins.gain_margin_db,
    "delay_margin_s": lambda a: a.margins.delay_margin_s,
    "peak_sensitivity": lambda a: a.sensitivity.peak_sensitivity,
    "peak_complementary": lambda a: a.sensitivity.peak_complementary,
    "disk_margin": lambda a: a.sensitivity.disk_margin,
    "lowest_crossover_rad_s": lambda a: min(
        (c.frequency_rad_s for c in a.margins.gain_crossings), default=None),
    "highest_crossover_rad_s": lambda a: max(
        (c.frequency_rad_s for c in a.margins.gain_crossings), default=None),
    "overshoot_pct": lambda a: a.step.overshoot_pct,
    "settling_time_s": lambda a: a.step.settling_time_s,
    "rise_time_s": lambda a: math.inf if a.step.rise_time_s is None else a.step.rise_time_s,
    "system_type": lambda a: float(a.tracking.system_type),
    "kp": lambda a: a.tracking.kp,
    "kv": lambda a: a.tracking.kv,
    "ka": lambda a: a.tracking.ka,
    "step_error": lambda a: a.tracking.step_error,
    "ramp_error": lambda a: a.tracking.ramp_error,
    "parabola_error": lambda a: a.tracking.parabola_error,
    "tail_time_s": lambda a: None if a.slow_pairs_error is not None else max(
        (p.tail_time_s for p in a.slow_pairs), default=0.0),
}


def judge(alt: IntegralAlternative, limits: Sequence[RequirementLimit], *,
          nominal: bool) -> IntegralAlternative:
    """``alt`` with each limit judged on its figures: ``requirements``, ``meets``, ``fails``.

    A ``min`` limit is met when the figure is ≥ it, a ``max`` limit when it is ≤ it; a
    figure the loop does not give (slow pairs not computed) is neither.  Limits of rules
    that judge the nominal plant only are skipped on the other variants.
    """
    checks: list[RequirementCheck] = []
    for lim in limits:
        if lim.nominal_only and not nominal:
            continue
        get = FIGURES.get(lim.figure)
        value = get(alt) if get is not None else None
        met = None
        if value is not None:
            met = value >= lim.value if lim.bound == "min" else value <= lim.value
        checks.append(RequirementCheck(rule=lim.rule, figure=lim.figure, bound=lim.bound,
                                       limit=lim.value, value=value, unit=lim.unit, met=met))
    meets = tuple(dict.fromkeys(c.rule for c in checks if c.met))
    fails = tuple(dict.fromkeys(c.rule for c in checks if c.met is False))
    meets = tuple(r for r in meets if r not in fails)
    return dataclasses.replace(alt, requirements=tuple(checks), meets=meets, fails=fails)


def _review(tuned: Loop | DiscreteLoop, stage: Stage, k: float, target: float, met: bool,
            snippet: str, settling_band: float) -> IntegralAlternative:
    """Margins, peaks, tracking, step and slow pairs of one re-tuned loop."""
    step: StepResult
    if isinstance(tuned, DiscreteLoop):
        stable = discrete_stability(tuned).closed_loop_stable
        marg = compute_discrete_margins(tuned)
        sens = compute_discrete_sensitivity(tuned)
        track = discrete_tracking(tuned)
        step = discrete_step_response(tuned, settling_band)
    else:
        w_tuned = loop_grid(tuned)              # one analysis grid for margins and peaks
        stable = closed_loop_stability(tuned).closed_loop_stable
        marg = compute_margins(tuned, w_tuned)
        sens = compute_sensitivity(tuned, w_tuned)
        track = compute_tracking(tuned)
        step = step_response(tuned, settling_band)
    pairs: tuple[SlowPair, ...] = ()
    pairs_error = None
    try:
        # Any kind of loop: rational, delay (roots right of the search line) or sampled.
        pairs = slow_tail(tuned, step, settling_band).pairs
    except AnalysisError as exc:
        pairs_error = str(exc)
    return IntegralAlternative(
        stage=stage.index, gain_factor=k, closed_loop_stable=stable, margins=marg,
        sensitivity=sens, tracking=track, step=step.metrics, slow_pairs=pairs,
        snippet_toml=snippet, target_phase_margin_deg=target, meets_target=met,
        slow_pairs_error=pairs_error,
    )


def alternative_over_variants(loops: Sequence[Loop | DiscreteLoop], stages: Sequence[Stage],
                              stage_index: int, current_pm_deg: Sequence[float], *,
                              min_phase_margin_deg: float | None, settling_band: float,
                              sampling: Sampling | None = None,
                              names: Sequence[str] | None = None,
                              ) -> tuple[IntegralAlternative, ...]:
    """One integral-action alternative for a controller used on several plants.

    The boost stage ``stage_index`` gets its pole at the origin (z = 1 for a stage in z)
    in every loop, and ONE gain factor k ∈ [1e-3, 1] is chosen for all of them: the
    highest with every loop closed-loop stable and the smallest phase margin over the
    loops at least the target (the rule set's minimum or the smallest current margin,
    whichever is higher); else the k with the best smallest margin.  Each loop is then
    reviewed with that k.

    Parameters
    ----------
    loops : sequence of Loop or DiscreteLoop
        The current loop around each plant variant (nominal first).
    stages : sequence of Stage
        The design's controller stages.
    current_pm_deg : sequence of float
        The current phase margin of each loop (deg) that the target is taken from.
    min_phase_margin_deg : float or None
        The rule set's minimum phase margin, deg.
    settling_band : float
        Settling band for the step metrics, fraction of the final value.
    sampling : Sampling, optional
        The design's ``[sampling]`` when the loops are sampled.
    names : sequence of str, optional
        Variant names, for ``sizing_variant`` (the one with the smallest margin at k).

    Returns
    -------
    tuple of IntegralAlternative
        One per loop, all with the same ``gain_factor`` and snippet.
    """
    stage = next(st for st in stages if st.index == stage_index)
    target = _target(current_pm_deg, min_phase_margin_deg)
    bases = [integral_loop(lp, stages, stage_index, sampling) for lp in loops]
    k, met = _choose_gain(bases, target)
    snippet = _snippet(stage, _integral_model(stage, stage.model), k, target, met,
                       variants=len(loops))
    out = [_review(scaled(b, k), stage, k, target, met, snippet, settling_band) for b in bases]
    sizing = None
    if names is not None and out:
        worst = min(range(len(out)), key=lambda i: out[i].margins.phase_margin_deg)
        sizing = names[worst]
    return tuple(dataclasses.replace(a, sizing_variant=sizing) for a in out)


def integral_alternatives(loop: Loop | DiscreteLoop, stages: Sequence[Stage],
                          boosts: Sequence[Boost], margins: Margins, *,
                          min_phase_margin_deg: float | None, settling_band: float,
                          sampling: Sampling | None = None,
                          ) -> tuple[IntegralAlternative, ...]:
    """One integral-action alternative per boost stage of one loop, re-tuned by one gain.

    Parameters
    ----------
    loop, stages
        The current loop and its controller stages.
    boosts : sequence of Boost
        From :func:`.boost_band.find_boosts`; each names the stage to replace.
    margins : Margins
        The current loop's margins; its phase margin (deg) is the target unless
        ``min_phase_margin_deg`` is higher.  An infinite current margin makes the rule
        set's minimum (or 0° without one) the target.
    min_phase_margin_deg : float or None
        The rule set's minimum phase margin, deg.
    settling_band : float
        Settling band for the step metrics, fraction of the final value.
    sampling : Sampling, optional
        The design's ``[sampling]`` for a sampled loop.

    Returns
    -------
    tuple of IntegralAlternative
        Margins, sensitivity, tracking, step metrics and the remaining slow pairs of the
        re-tuned loop (empty, with ``slow_pairs_error`` saying why, where the slow-pair
        analysis is not available for the loop), the gain factor k ∈ [1e-3, 1], and a
        ``[[controller]]`` snippet in the stage's own form: a ``pi`` stage (kp =
        k·high-frequency gain, ti = 1/zero, s) for a continuous lag, a ``tf`` stage
        otherwise (``domain = "z"`` for a stage written in z).
    """
    out: list[IntegralAlternative] = []
    for boost in boosts:
        (alt,) = alternative_over_variants(
            [loop], stages, boost.stage, [margins.phase_margin_deg],
            min_phase_margin_deg=min_phase_margin_deg, settling_band=settling_band,
            sampling=sampling)
        out.append(alt)
    return tuple(out)


def _with_disturbance(design: Design, loop: Loop | DiscreteLoop, stage_index: int,
                      alt: IntegralAlternative, current: LoopAnalysis, band: float,
                      ) -> IntegralAlternative:
    """``alt`` with the load-disturbance IE and IAE of the alternative and of the current
    controller (the design's ``[disturbance]``; :mod:`.disturbance` as for the review)."""
    from .disturbance import load_response, sampled_load_response
    from .undecided import NUMERIC_ERRORS

    dist = design.disturbance
    if dist is None:
        return alt
    now = current.disturbance
    out = dataclasses.replace(alt, current_disturbance_ie=None if now is None else now.ie,
                              current_disturbance_iae=None if now is None else now.iae)
    if not alt.closed_loop_stable:
        return dataclasses.replace(out, disturbance_error="the alternative's closed loop "
                                   "is not stable")
    tuned = scaled(integral_loop(loop, design.controller, stage_index, design.sampling),
                   alt.gain_factor)
    try:
        with np.errstate(all="ignore"):
            if isinstance(tuned, DiscreteLoop):
                variant = next(v for v in design.variants if v.name == current.variant)
                resp = sampled_load_response(tuned, variant.model, dist.at, dist.size, band,
                                             dist.band_rad_s, design.sensor)
            else:
                resp = load_response(tuned, dist.at, dist.size, band, dist.band_rad_s)
    except NUMERIC_ERRORS as exc:
        return dataclasses.replace(out, disturbance_error=f"{type(exc).__name__}: {exc}")
    return dataclasses.replace(out, disturbance_ie=resp.ie, disturbance_iae=resp.iae)


def design_alternatives(design: Design, analyses: Sequence[LoopAnalysis], *,
                        min_phase_margin_deg: float | None, settling_band: float,
                        requirements: Sequence[RequirementLimit] = (),
                        ) -> tuple[LoopAnalysis, ...]:
    """The design's integral-action alternatives, attached to every variant's analysis.

    One alternative controller per boost stage for the whole design (see
    :func:`alternative_over_variants`), over the variants with a plant model (a measured
    plant has none to re-tune on), judged on each variant against ``requirements``.  The
    target margin is taken over the variants whose current loop is closed-loop stable.
    A failure is recorded as ``errors["integral_alternative"]`` on those variants.
    """
    indices = sorted({b.stage for a in analyses for b in a.boosts})
    modelled = [i for i, v in enumerate(design.variants) if v.measured is None]
    if not indices or not modelled:
        return tuple(analyses)
    loops = [design.loop(design.variants[i]) for i in modelled]
    current = [analyses[i].margins.phase_margin_deg for i in modelled
               if analyses[i].stability.closed_loop_stable]
    names = [design.variants[i].name for i in modelled]
    per_variant: dict[int, list[IntegralAlternative]] = {i: [] for i in modelled}
    error = None
    for index in indices:
        try:
            alts = alternative_over_variants(
                loops, design.controller, index, current,
                min_phase_margin_deg=min_phase_margin_deg, settling_band=settling_band,
                sampling=design.sampling, names=names)
        except (AnalysisError, ArithmeticError, ValueError, RuntimeError) as exc:
            error = f"{type(exc).__name__}: {exc}"
            continue
        for i, lp, alt in zip(modelled, loops, alts, strict=True):
            alt = _with_disturbance(design, lp, index, alt, analyses[i], settling_band)
            per_variant[i].append(judge(alt, requirements, nominal=i == 0))
    out = list(analyses)
    for i in modelled:
        errors = dict(out[i].errors)
        if error is not None:
            errors["integral_alternative"] = error
        out[i] = dataclasses.replace(out[i], integral_alternatives=tuple(per_variant[i]),
                                     errors=errors)
    return tuple(out)
