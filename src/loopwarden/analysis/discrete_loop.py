"""What a sampled design adds to the analysis of one plant variant, in z.

The loop ``L(z) = C(z)·P_d(z)·z^{−compute_delay}`` (see
:func:`loopwarden.design.sampling.discrete_loop`) is analysed by the one pipeline
(:mod:`.pipeline`, :class:`~.loop_kinds.SampledKind`) on the unit circle and from its
closed-loop state space.  The results are the same dataclasses as for continuous loops
(frequencies in rad/s, times in s), plus :class:`~.results.SampledInfo` (here) with the
period, the closed-loop bandwidth and the inter-sample caveat.
"""

from __future__ import annotations

import math

from ..design.model import Design, PlantVariant
from ..lti import Zpk
from ..lti_discrete import DiscreteLoop
from .discrete_margins import closed_loop_bandwidth
from .parts import MODEL, ROOTS, TIME_RESPONSE
from .pipeline import not_applicable
from .results import Margins, SampledInfo

__all__ = ["INTER_SAMPLE_NOTE", "NOT_IN_Z", "sampled_blocks", "sampled_info", "stabilising"]

INTER_SAMPLE_NOTE = (
    "The sampled-data analysis is exact at the sampling instants: margins on the unit "
    "circle, closed-loop poles in z and the step response at t = kT. Between the instants "
    "the continuous plant output may ripple (hidden oscillation) and disturbances above "
    "the Nyquist frequency alias; check the continuous response where that matters.")

#: Checks that need continuous time, not done in z (derived from the pipeline's table of
#: parts: none of them needs continuous time today).
NOT_IN_Z: dict[str, str] = not_applicable(frozenset({MODEL, ROOTS, TIME_RESPONSE}),
                                          "sampled loop")


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


def sampled_blocks(design: Design, loop: DiscreteLoop) -> list[tuple[str, Zpk]]:
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


def stabilising(loop: DiscreteLoop, marg: Margins) -> Margins:
    """Gain margin of an unstable sampled loop: the change to a stable gain range."""
    from .discrete_response import COUNT_RADIUS_MARGIN
    from .roots import count_outside_circle, z_char_function
    from .stabilising_gain import stabilising_margins

    def unstable(k: float) -> int:
        fn = z_char_function(loop.rational.scaled(k))
        return count_outside_circle(fn, 1.0 + COUNT_RADIUS_MARGIN)[0]

    return stabilising_margins(marg, unstable)
