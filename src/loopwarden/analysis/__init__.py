"""Loop analysis: pure functions from a loop to typed results.

:func:`analyze` runs every part for every plant variant of a design.  A part that cannot be
computed is recorded in ``LoopAnalysis.errors`` (and becomes an ``error`` finding) instead
of stopping the review.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, TypeVar

from ..errors import DesignError, IllPosedLoopError

if TYPE_CHECKING:  # pragma: no cover - the numerical stack loads only when analysing
    from ..design.model import Design, PlantVariant
    from .results import LoopAnalysis, RequirementLimit

__all__ = ["analyze", "analyze_variant"]

T = TypeVar("T")

DEFAULT_SETTLING_BAND = 0.02


def _attempt(errors: dict[str, str], part: str, fn: Callable[[], T]) -> T | None:
    from .undecided import NUMERIC_ERRORS

    try:
        return fn()
    except IllPosedLoopError:
        raise
    except NUMERIC_ERRORS as exc:
        errors[part] = f"{type(exc).__name__}: {exc}"
        return None


def analyze_variant(design: Design, variant: PlantVariant, *,
                    min_phase_margin_deg: float | None = None,
                    settling_band: float | None = None) -> LoopAnalysis:
    """Analyse the design's loop around one plant variant.

    Every kind of loop (continuous, sampled, measured) gets its pole-zero map here, once.
    See :func:`_analyze_loop` for the parameters.  The integral-action alternative is one
    controller for the whole design and is added by :func:`analyze`, not here.
    """
    import dataclasses

    from .pole_zero import pole_zero_map
    from .undecided import NUMERIC_ERRORS, scrub_nan

    try:
        try:
            result = _analyze_loop(design, variant, min_phase_margin_deg=min_phase_margin_deg,
                                   settling_band=settling_band)
        except IllPosedLoopError:
            raise
        except NUMERIC_ERRORS as exc:
            # The loop itself could not be formed (e.g. sampling it): nothing is decided.
            result = _failed(design, variant, f"{type(exc).__name__}: {exc}")
        pole_zero = _attempt(result.errors, "pole_zero",
                             lambda: pole_zero_map(design, variant))
    except IllPosedLoopError as exc:
        raise DesignError(str(exc), file=design.path, where=variant.where,
                          hint="some block must roll off at high frequency: a strictly "
                               "proper plant, sensor or controller stage") from exc
    result = dataclasses.replace(result, pole_zero=pole_zero)
    from .effort import with_disturbance_and_effort

    result = with_disturbance_and_effort(
        design, variant, result,
        settling_band or design.requirements.settling_band or DEFAULT_SETTLING_BAND)
    from .saturation import with_saturation

    result = with_saturation(
        design, variant, result,
        settling_band or design.requirements.settling_band or DEFAULT_SETTLING_BAND)
    try:
        return scrub_nan(result)
    except NUMERIC_ERRORS as exc:
        return _failed(design, variant, f"{type(exc).__name__}: {exc}")


def _failed(design: Design, variant: PlantVariant, reason: str) -> LoopAnalysis:
    """The analysis of a loop that could not be formed: every check undecided."""
    from types import MappingProxyType

    from .results import LoopAnalysis
    from .undecided import (
        ALL_CHECKS,
        empty_curves,
        undecided_internal,
        undecided_margins,
        undecided_sensitivity,
        undecided_stability,
        undecided_tracking,
    )

    why = f"the loop could not be analysed: {reason}"
    return LoopAnalysis(
        variant=variant.name,
        stability=undecided_stability(reason, "z" if design.sampling is not None else "s"),
        internal=undecided_internal(reason), margins=undecided_margins(),
        sensitivity=undecided_sensitivity(), tracking=undecided_tracking(), step=None,
        slow_tail=None, boosts=(), integral_alternatives=(), curves=empty_curves(),
        errors={"loop": reason, "step": why}, undecided=MappingProxyType(
            dict.fromkeys(ALL_CHECKS, why)))


def _analyze_loop(design: Design, variant: PlantVariant, *,
                  min_phase_margin_deg: float | None = None,
                  settling_band: float | None = None) -> LoopAnalysis:
    """Analyse the design's loop around one plant variant.

    Parameters
    ----------
    min_phase_margin_deg : float, optional
        The rule set's minimum phase margin (used by :func:`analyze` for the integral
        alternative; kept here for callers that pass it).
    settling_band : float, optional
        Settling band as a fraction of the final value (default: the design's
        ``requirements.settling_band`` or 0.02).
    """
    import numpy as np

    from . import (
        boost_band,
        frequency_grid,
        internal,
        margins,
        sensitivity,
        slow_pairs,
        stability,
        time_response,
        tracking,
    )
    from .results import Curves, LoopAnalysis, TimeSeries

    band = settling_band or design.requirements.settling_band or DEFAULT_SETTLING_BAND
    # A sampled design is analysed in z, a measured plant on its data; both dispatch here.
    if design.sampling is not None:
        from .discrete_loop import analyze_sampled

        return analyze_sampled(design, variant, band)
    if variant.measured is not None:
        from .measured import analyze_measured

        return analyze_measured(design, variant)
    from types import MappingProxyType

    from .undecided import (
        Recorder,
        empty_curves,
        undecided_internal,
        undecided_margins,
        undecided_sensitivity,
        undecided_stability,
        undecided_tracking,
    )

    loop = design.continuous_loop(variant)
    rec = Recorder()
    errors = rec.errors

    blocks = [(st.name, st.model) for st in design.controller]
    blocks.append(("plant" if variant.name == "nominal" else f"plant ({variant.name})",
                   variant.model))
    if design.sensor is not None:
        blocks.append(("sensor", design.sensor))

    stab = rec.run("stability", lambda: stability.closed_loop_stability(loop),
                   undecided_stability)
    intern = rec.run("internal_stability", lambda: internal.internal_stability(blocks),
                     undecided_internal)
    w = rec.run("frequency_grid", lambda: frequency_grid.loop_grid(loop), lambda r: None)
    if w is not None:                           # one analysis grid for both
        marg = rec.run("margins", lambda: margins.compute_margins(loop, w), undecided_margins)
        if not stab.closed_loop_stable and not stab.marginal and stab.certified:
            marg = _attempt(errors, "stabilising_gain", lambda: _stabilising(loop, marg)) or marg
        sens = rec.run("sensitivity", lambda: sensitivity.compute_sensitivity(loop, w),
                       undecided_sensitivity)
    else:
        marg, sens = undecided_margins(), undecided_sensitivity()
    track = rec.run("tracking", lambda: tracking.compute_tracking(loop), undecided_tracking)

    step_result = None
    if stab.closed_loop_stable:
        step_result = _attempt(errors, "step", lambda: time_response.step_response(loop, band))
    elif "stability" in errors:
        errors["step"] = "closed-loop stability could not be decided: no step response"
    else:
        errors["step"] = "closed loop is unstable: no settled step response"
    step = step_result.metrics if step_result else None

    tail = None
    if step_result is not None:
        tail = _attempt(errors, "slow_tail", lambda: slow_pairs.slow_tail(
            loop, step_result, band, roots=np.asarray(stab.closed_loop_poles, dtype=complex)))

    boosts = rec.run("boost_band", lambda: boost_band.find_boosts(
        loop, design.controller, marg, design.requirements.reference_band_rad_s),
        lambda r: ())
    # The integral alternative is one controller for the whole design: see analyze().
    alternatives: tuple = ()

    def curves_now() -> Curves:
        grid = margins.plot_grid(loop)
        return Curves(
            frequency_rad_s=grid,
            open_loop=loop.open_loop(grid),
            step=step_result.step if step_result else TimeSeries(time_s=_empty(),
                                                                 value=_empty()),
            ramp_error=(step_result.ramp_error if step_result
                        else TimeSeries(time_s=_empty(), value=_empty())),
            improvement={b.stage: boost_band.improvement(loop, design.controller, b.stage,
                                                         grid)
                         for b in boosts},
        )

    curves = _attempt(errors, "curves", curves_now) or empty_curves()
    return LoopAnalysis(
        variant=variant.name, stability=stab, internal=intern, margins=marg,
        sensitivity=sens, tracking=track, step=step, slow_tail=tail, boosts=boosts,
        integral_alternatives=alternatives, curves=curves, errors=errors,
        undecided=MappingProxyType(dict(rec.undecided)),
    )


def _stabilising(loop, marg):  # type: ignore[no-untyped-def]
    """Gain margin of an unstable continuous loop: the change to a stable gain range."""
    from .stabilising_gain import stabilising_margins
    from .stability import nyquist_count

    return stabilising_margins(marg, lambda k: nyquist_count(loop.scaled(k))
                               .rhp_closed_loop_poles)


def _empty():  # type: ignore[no-untyped-def]
    import numpy as np

    return np.zeros(0)


def analyze(design: Design, *, min_phase_margin_deg: float | None = None,
            settling_band: float | None = None,
            requirements: Sequence[RequirementLimit] = ()) -> tuple[LoopAnalysis, ...]:
    """Analyse every plant variant of ``design``, nominal first.

    Then the integral-action alternative, one controller for all variants, is re-tuned
    once and attached to each variant's analysis, judged against ``requirements`` (the
    review's hard limits, from :func:`loopwarden.ruleset.evaluate.alternative_limits`).
    """
    from .integral_alternative import design_alternatives

    analyses = tuple(
        analyze_variant(design, v, min_phase_margin_deg=min_phase_margin_deg,
                        settling_band=settling_band)
        for v in design.variants
    )
    band = settling_band or design.requirements.settling_band or DEFAULT_SETTLING_BAND
    return design_alternatives(design, analyses, min_phase_margin_deg=min_phase_margin_deg,
                               settling_band=band, requirements=requirements)
