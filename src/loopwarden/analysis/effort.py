"""Noise to the actuator and the actuator signal: |K·S|, |K(∞)|, peaks of u.

Measurement noise n adds to the measured output, so the controller output is
``u = −K·S·n`` with ``S = 1/(1 + L)`` [derived]: the peak of |K·S| is the largest
amplification of noise into the actuator, and as ω → ∞ (L → 0 for a strictly proper loop)
|K·S| tends to the controller's high-frequency gain |K(∞)|.  The peaks of u for the
reference step and the disturbance step come from the same exact responses as y
(:mod:`.time_response`, :mod:`.disturbance`).

:func:`with_disturbance_and_effort` adds both parts to one variant's analysis; a part that
fails numerically becomes an ``error`` finding of its checks, a design without
``[disturbance]`` leaves ``disturbance_rejection`` not applicable.
"""

from __future__ import annotations

import dataclasses
import math
from types import MappingProxyType
from typing import TYPE_CHECKING

import numpy as np

from ..errors import AnalysisError
from ..lti import FloatArray, Loop
from ..lti_discrete import DiscreteLoop
from .results import Effort, LoopAnalysis

if TYPE_CHECKING:
    from ..design.model import Design, PlantVariant

__all__ = ["CHECK_PARTS", "controller_hf_gain", "ks_peak", "with_disturbance_and_effort"]

#: Checks decided by each part added here.
CHECK_PARTS = {"disturbance": ("disturbance_rejection",),
               "effort": ("noise_sensitivity", "control_effort")}


def controller_hf_gain(loop: Loop | DiscreteLoop) -> float:
    """|K(∞)| (continuous) or |K(e^{jπ})| at the Nyquist frequency (sampled)."""
    if isinstance(loop, DiscreteLoop):
        return float(abs(loop.controller(np.array([-1.0 + 0j]))[0]))
    return abs(loop.controller.high_frequency_gain())


def ks_peak(loop: Loop | DiscreteLoop) -> tuple[float, float]:
    """Supremum of |K·S| over ω and where (rad/s; ``inf``: approached as ω → ∞).

    Continuous loops on the loop's analysis grid with the exact limit at ω → ∞
    (|K(∞)|/|1 + L(∞)|, or the supremum over the circle |L| = |L(∞)| when a biproper loop
    has a delay); sampled loops on the unit circle up to the Nyquist frequency, included.
    The largest grid maxima are refined by bounded scalar maximisation.
    """
    from .discrete_margins import refined_peak, unit_circle_grid
    from .frequency_grid import loop_grid

    ends: list[tuple[float, float]] = []
    if isinstance(loop, DiscreteLoop):
        T = loop.period_s
        w = unit_circle_grid(loop.rational) / T
        w = w[(w > 0) & (w <= math.pi / T)]

        def value(x: FloatArray) -> FloatArray:
            z = np.exp(1j * x * T)
            return loop.controller(z) / (1.0 + loop.rational(z))

        ends.append((math.pi / T, float(np.abs(value(np.array([math.pi / T])))[0])))
    else:
        w = loop_grid(loop)
        w = w[w > 0]

        def value(x: FloatArray) -> FloatArray:
            return loop.controller.freqresp(x) / (1.0 + loop.open_loop(x))

        k_inf = abs(loop.controller.high_frequency_gain())
        l_inf = abs(loop.rational.high_frequency_gain())
        if not loop.has_delay:
            at_inf = k_inf / abs(1.0 + loop.rational.high_frequency_gain())
        else:
            at_inf = k_inf / (1.0 - l_inf) if l_inf < 1.0 else math.inf
        ends.append((math.inf, at_inf))
    if w.size < 2:
        w = np.geomspace(1e-6, 1e6, 241)
        if isinstance(loop, DiscreteLoop):
            w = w[w < math.pi / loop.period_s]
    if w.size < 2:
        raise AnalysisError("no frequency grid for the |K·S| peak")
    ends.append((0.0, float(np.abs(value(np.array([w[0] * 1e-6])))[0])))
    with np.errstate(all="ignore"):
        return refined_peak(np.abs, w, value, tuple(ends))


def with_disturbance_and_effort(design: Design, variant: PlantVariant, a: LoopAnalysis,
                                band: float) -> LoopAnalysis:
    """``a`` with its disturbance response and effort figures (or why they are missing)."""
    from .disturbance import load_response, sampled_load_response
    from .undecided import NUMERIC_ERRORS

    errors = dict(a.errors)
    undecided = dict(a.undecided)
    na = dict(a.not_applicable)
    if variant.measured is not None:
        why = "a measured plant has no model to simulate the loads and noise with"
        for checks in CHECK_PARTS.values():
            na.update(dict.fromkeys(checks, why))
        return dataclasses.replace(a, not_applicable=MappingProxyType(na))
    if "loop" in a.errors:
        why = f"the loop could not be analysed: {a.errors['loop']}"
        for checks in CHECK_PARTS.values():
            undecided.update(dict.fromkeys(checks, why))
        return dataclasses.replace(a, undecided=MappingProxyType(undecided))
    dist = design.disturbance
    loop = design.loop(variant)
    stable = a.stability.closed_loop_stable
    disturbance = None
    if dist is not None and stable:
        try:
            with np.errstate(all="ignore"):
                if isinstance(loop, DiscreteLoop):
                    disturbance = sampled_load_response(loop, variant.model, dist.at,
                                                        dist.size, band, dist.band_rad_s,
                                                        design.sensor)
                else:
                    disturbance = load_response(loop, dist.at, dist.size, band,
                                                dist.band_rad_s)
        except NUMERIC_ERRORS as exc:
            reason = f"{type(exc).__name__}: {exc}"
            errors["disturbance"] = reason
            undecided["disturbance_rejection"] = ("the disturbance response could not be "
                                                  f"computed: {reason}")
    effort = None
    try:
        with np.errstate(all="ignore"):
            peak, where = ks_peak(loop)
            # The reference step's |u| peak comes with its exact response (time_response,
            # discrete_response).
            u_step = a.step.u_peak if stable and a.step is not None else None
            effort = Effort(ks_peak=peak, ks_peak_rad_s=where,
                            controller_hf_gain=controller_hf_gain(loop),
                            u_peak_step=u_step,
                            u_peak_disturbance=(disturbance.u_peak if disturbance is not None
                                                else None))
    except NUMERIC_ERRORS as exc:
        reason = f"{type(exc).__name__}: {exc}"
        errors["effort"] = reason
        for check in CHECK_PARTS["effort"]:
            undecided[check] = f"the noise and effort figures could not be computed: {reason}"
    out = dataclasses.replace(a, disturbance=disturbance, effort=effort, errors=errors,
                              undecided=MappingProxyType(undecided),
                              not_applicable=MappingProxyType(na))
    from .undecided import has_nan

    for name, checks in CHECK_PARTS.items():
        if has_nan(getattr(out, name)):
            errors[name] = "the computation gave NaN (not a number)"
            for check in checks:
                undecided[check] = f"the {name} figures gave NaN (not a number)"
            out = dataclasses.replace(out, **{name: None}, errors=errors,
                                      undecided=MappingProxyType(undecided))
    return out
