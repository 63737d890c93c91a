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
    """Analyse the design's loop around one plant variant, of any kind (:mod:`.pipeline`).

    Parameters
    ----------
    min_phase_margin_deg : float, optional
        The rule set's minimum phase margin (used by :func:`analyze` for the integral
        alternative; kept here for callers that pass it).
    settling_band : float, optional
        Settling band as a fraction of the final value (default: the design's
        ``requirements.settling_band`` or 0.02).
    """
    from .pipeline import run_loop

    band = settling_band or design.requirements.settling_band or DEFAULT_SETTLING_BAND
    return run_loop(design, variant, band)


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
