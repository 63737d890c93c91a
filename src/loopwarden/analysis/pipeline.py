"""One analysis pipeline for every kind of loop: a table of parts and one runner.

Each part of the analysis of one plant variant is a row of :data:`~.parts.PARTS`: its name
(the key of ``LoopAnalysis.errors`` when it fails), the checks its failure leaves
undecided, what it needs from the loop beyond its frequency response
(:class:`~.loop_response.LoopResponse` ``capabilities``: "model", "roots",
"time_response", "continuous"), and, for each check that needs it, why in words.  A loop
that lacks a need gets those checks as not applicable, with the reason
``"<why the loop lacks it>: <what the check needs>"`` (e.g. "measured plant: the step
response needs a model"); nothing else keeps a list of what does not apply.

:func:`run_loop` runs the parts in table order for a continuous, a sampled or a measured
loop alike.  The few computations that differ by kind (stability from roots, in z or by
the Nyquist count on data; the tracking constants; the step) come from the loop's
:class:`~.loop_kinds.LoopKind`; margins, peaks and curves are computed over the loop
response once (:mod:`.loop_figures`).  A part that fails numerically is recorded by
:class:`~.undecided.Recorder` and leaves its checks undecided, never the review stopped.
"""

from __future__ import annotations

from types import MappingProxyType
from typing import TYPE_CHECKING

import numpy as np

from .parts import PARTS, Part
from .results import Curves, LoopAnalysis, TimeSeries
from .undecided import (
    NUMERIC_ERRORS,
    Recorder,
    empty_curves,
    undecided_internal,
    undecided_margins,
    undecided_sensitivity,
    undecided_stability,
    undecided_tracking,
)

if TYPE_CHECKING:  # pragma: no cover
    from ..design.model import Design, PlantVariant
    from .loop_kinds import LoopKind

__all__ = ["PARTS", "Part", "applies", "not_applicable", "run_loop"]

_BY_NAME = {p.name: p for p in PARTS}


def applies(part: str, capabilities: frozenset[str]) -> bool:
    """True when the loop offers everything part ``part`` needs."""
    return _BY_NAME[part].needs <= capabilities


def not_applicable(capabilities: frozenset[str], lacks: str) -> dict[str, str]:
    """Check → reason, for every check of a part the loop cannot run (table order).

    ``lacks`` says why the loop lacks what it lacks (e.g. "measured plant").
    """
    out: dict[str, str] = {}
    for part in PARTS:
        if not part.needs <= capabilities:
            out.update({c: f"{lacks}: {why}" for c, why in part.checks.items()})
    return out


def _empty_series() -> TimeSeries:
    return TimeSeries(time_s=np.zeros(0), value=np.zeros(0))


def run_loop(design: Design, variant: PlantVariant, band: float) -> LoopAnalysis:
    """Analyse the loop of ``design`` around ``variant`` (settling ``band``), any kind."""
    from .loop_kinds import loop_kind

    kind = loop_kind(design, variant)
    resp, caps = kind.response, kind.response.capabilities
    rec = Recorder()
    errors = rec.errors
    stab = rec.run("stability", kind.stability,
                   lambda r: undecided_stability(r, resp.domain))
    intern = rec.run("internal_stability", kind.internal, undecided_internal)
    x = rec.run("frequency_grid", resp.grid, lambda r: None)
    marg, sens = undecided_margins(), undecided_sensitivity()
    if x is not None:                           # one analysis grid for both
        marg = rec.run("margins", lambda: kind.margins(x), undecided_margins)
        if (applies("stabilising_gain", caps) and not stab.closed_loop_stable
                and not stab.marginal and stab.certified):
            marg = _attempt(errors, "stabilising_gain",
                            lambda: kind.stabilising_margins(marg)) or marg
        sens = rec.run("sensitivity", lambda: kind.sensitivity(x), undecided_sensitivity)
    track = rec.run("tracking", kind.tracking, undecided_tracking)
    info = rec.run("sampling", kind.sampling_info, lambda r: None)
    step_result = _step(kind, stab, errors, band)
    tail = None
    if step_result is not None and applies("slow_tail", caps):
        tail = _attempt(errors, "slow_tail", lambda: kind.slow_tail(
            step_result, band, np.asarray(stab.closed_loop_poles, dtype=complex)))
    boosts: tuple = ()
    if applies("boost_band", caps):
        boosts = rec.run("boost_band", lambda: kind.boosts(marg), lambda r: ())

    def curves_now() -> Curves:
        grid = resp.plot_grid()
        return Curves(
            frequency_rad_s=grid, open_loop=resp.curve(grid),
            step=step_result.step if step_result else _empty_series(),
            ramp_error=step_result.ramp_error if step_result else _empty_series(),
            improvement={b.stage: kind.improvement(b.stage, grid) for b in boosts})

    curves = _attempt(errors, "curves", curves_now) or empty_curves()
    return LoopAnalysis(
        variant=variant.name, stability=stab, internal=intern, margins=marg,
        sensitivity=sens, tracking=track,
        step=step_result.metrics if step_result else None, slow_tail=tail, boosts=boosts,
        integral_alternatives=(), curves=curves, errors=errors, sampling=info,
        coverage=kind.coverage(),
        not_applicable=MappingProxyType(not_applicable(caps, kind.lacks)),
        undecided=MappingProxyType(dict(rec.undecided)),
    )


def _step(kind: LoopKind, stab, errors: dict[str, str], band: float):  # type: ignore[no-untyped-def]
    """The step response of a stable loop, or why there is none (in ``errors``)."""
    caps = kind.response.capabilities
    if not applies("step", caps):
        errors["step"] = f"{kind.lacks}: {_BY_NAME['step'].absent}"
        return None
    if stab.closed_loop_stable:
        return _attempt(errors, "step", lambda: kind.step(band))
    if "stability" in errors:
        errors["step"] = "closed-loop stability could not be decided: no step response"
    else:
        errors["step"] = "closed loop is unstable: no settled step response"
    return None


def _attempt(errors: dict[str, str], part: str, fn):  # type: ignore[no-untyped-def]
    """``fn()``, or None with the failure recorded under ``part``."""
    from ..errors import IllPosedLoopError

    try:
        with np.errstate(all="ignore"):
            return fn()
    except IllPosedLoopError:
        raise
    except NUMERIC_ERRORS as exc:
        errors[part] = f"{type(exc).__name__}: {exc}"
        return None

