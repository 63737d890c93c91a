"""Analysis of one plant variant of a sampled design, in z.

The loop ``L(z) = C(z)·P_d(z)·z^{−compute_delay}`` (see
:func:`loopwarden.design.sampling.discrete_loop`) is analysed on the unit circle and from
its closed-loop state space.  The results are the same dataclasses as for continuous
loops (frequencies in rad/s, times in s), plus :class:`~.results.SampledInfo` with the
period, the closed-loop bandwidth and the inter-sample caveat.
"""

from __future__ import annotations

import math
from types import MappingProxyType

import numpy as np

from ..design.model import Design, PlantVariant
from ..lti import Zpk
from ..lti_discrete import DiscreteLoop
from .boost_band import find_boosts, improvement
from .discrete_margins import (
    closed_loop_bandwidth,
    compute_discrete_margins,
    compute_discrete_sensitivity,
    unit_circle_grid,
)
from .discrete_response import (
    discrete_internal_stability,
    discrete_stability,
    discrete_step_response,
    discrete_tracking,
)
from .results import Curves, LoopAnalysis, Margins, SampledInfo, TimeSeries
from .slow_pairs import slow_tail
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

__all__ = ["INTER_SAMPLE_NOTE", "NOT_IN_Z", "analyze_sampled", "sampled_info"]

INTER_SAMPLE_NOTE = (
    "The sampled-data analysis is exact at the sampling instants: margins on the unit "
    "circle, closed-loop poles in z and the step response at t = kT. Between the instants "
    "the continuous plant output may ripple (hidden oscillation) and disturbances above "
    "the Nyquist frequency alias; check the continuous response where that matters.")

#: Checks built on continuous closed-loop poles, not done in z.
NOT_IN_Z: dict[str, str] = {}


def sampled_info(design: Design, variant: PlantVariant, loop: DiscreteLoop) -> SampledInfo:
    """Period, discretisation and sample rate against the closed-loop bandwidth."""
    s = design.sampling
    if s is None:
        raise ValueError("not a sampled design")
    bw = closed_loop_bandwidth(loop)
    rate = 2.0 * math.pi / s.period_s
    ratio = rate / bw if bw is not None else rate / s.nyquist_rad_s
    return SampledInfo(
        period_s=s.period_s, method=s.method, prewarp_rad_s=s.prewarp_rad_s,
        compute_delay_samples=s.compute_delay_samples,
        plant_delay_samples=(variant.delay_s + design.sensor_delay_s) / s.period_s,
        nyquist_rad_s=s.nyquist_rad_s, sample_rate_rad_s=rate,
        closed_loop_bandwidth_rad_s=bw, sample_rate_ratio=ratio, note=INTER_SAMPLE_NOTE,
    )


def _blocks(design: Design, loop: DiscreteLoop) -> list[tuple[str, Zpk]]:
    """The digital controller's blocks and the sampled plant, named for messages."""
    names = []
    if any(st.domain == "s" for st in design.controller):
        method = design.sampling.method if design.sampling else "?"
        names.append(f"controller (continuous stages, {method})")
    names += [st.name + " (z)" for st in design.controller if st.domain == "z"]
    if loop.compute_delay_samples:
        names.append("compute delay")
    out = list(zip(names, loop.stages, strict=True))
    out.append(("sampled plant", loop.plant))
    return out


def _stabilising(loop: DiscreteLoop, marg: Margins) -> Margins:
    """Gain margin of an unstable sampled loop: the change to a stable gain range."""
    from .discrete_response import COUNT_RADIUS_MARGIN
    from .roots import count_outside_circle, z_char_function
    from .stabilising_gain import stabilising_margins

    def unstable(k: float) -> int:
        fn = z_char_function(loop.rational.scaled(k))
        return count_outside_circle(fn, 1.0 + COUNT_RADIUS_MARGIN)[0]

    return stabilising_margins(marg, unstable)


def _empty() -> np.ndarray:
    return np.zeros(0)


def analyze_sampled(design: Design, variant: PlantVariant, band: float) -> LoopAnalysis:
    """Analyse the sampled loop of ``design`` around ``variant`` (settling ``band``)."""
    loop = design.sampled_loop(variant)
    rec = Recorder()
    errors = rec.errors
    stab = rec.run("stability", lambda: discrete_stability(loop),
                   lambda r: undecided_stability(r, "z"))
    intern = rec.run("internal_stability",
                     lambda: discrete_internal_stability(_blocks(design, loop)),
                     undecided_internal)
    marg = rec.run("margins", lambda: compute_discrete_margins(loop), undecided_margins)
    if not stab.closed_loop_stable and not stab.marginal and stab.certified:
        try:
            marg = _stabilising(loop, marg)
        except NUMERIC_ERRORS as exc:
            errors["stabilising_gain"] = f"{type(exc).__name__}: {exc}"
    sens = rec.run("sensitivity", lambda: compute_discrete_sensitivity(loop),
                   undecided_sensitivity)
    track = rec.run("tracking", lambda: discrete_tracking(loop), undecided_tracking)
    info = rec.run("sampling", lambda: sampled_info(design, variant, loop), lambda r: None)
    step_result = None
    if stab.closed_loop_stable:
        try:
            with np.errstate(all="ignore"):
                step_result = discrete_step_response(loop, band)
        except NUMERIC_ERRORS as exc:
            errors["step"] = f"{type(exc).__name__}: {exc}"
    elif "stability" in errors:
        errors["step"] = "closed-loop stability could not be decided: no step response"
    else:
        errors["step"] = "closed loop is unstable: no settled step response"
    tail = None
    if step_result is not None:
        try:
            tail = slow_tail(loop, step_result, band,
                             roots=np.asarray(stab.closed_loop_poles, dtype=complex))
        except NUMERIC_ERRORS as exc:
            errors["slow_tail"] = f"{type(exc).__name__}: {exc}"
    # Boost stages on the unit circle (the integral alternative is added per design).
    boosts = rec.run("boost_band", lambda: find_boosts(
        loop, design.controller, marg, design.requirements.reference_band_rad_s,
        design.sampling), lambda r: ())

    def curves_now() -> Curves:
        phi = unit_circle_grid(loop.rational, points_per_decade=60, uniform=400)
        if phi.size > 2000:
            phi = phi[np.unique(np.linspace(0, phi.size - 1, 2000).round().astype(int))]
        grid = phi / loop.period_s
        empty = TimeSeries(time_s=_empty(), value=_empty())
        return Curves(
            frequency_rad_s=grid, open_loop=loop.open_loop(grid),
            step=step_result.step if step_result else empty,
            ramp_error=step_result.ramp_error if step_result else empty,
            improvement={b.stage: improvement(loop, design.controller, b.stage, grid,
                                              design.sampling) for b in boosts},
        )

    try:
        with np.errstate(all="ignore"):
            curves = curves_now()
    except NUMERIC_ERRORS as exc:
        errors["curves"] = f"{type(exc).__name__}: {exc}"
        curves = empty_curves()
    return LoopAnalysis(
        variant=variant.name, stability=stab, internal=intern, margins=marg,
        sensitivity=sens, tracking=track,
        step=step_result.metrics if step_result else None, slow_tail=tail, boosts=boosts,
        integral_alternatives=(), curves=curves, errors=errors, sampling=info,
        not_applicable=MappingProxyType(dict(NOT_IN_Z)),
        undecided=MappingProxyType(dict(rec.undecided)),
    )
