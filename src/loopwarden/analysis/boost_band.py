"""Low-frequency boost stages (lag networks): where they help tracking and what they cost.

A boost stage G has more gain at low frequency than at high frequency.  At a reference
frequency ω it changes the tracking error ``|S(jω)| = 1/|1 + L(jω)|`` by the factor

    improvement(ω) = |S_without(jω)| / |S_with(jω)| = |1 + L_with(jω)| / |1 + L_without(jω)|

where ``L_without`` is the same loop with that stage removed.  (Written as a ratio of
return differences the "with" loop is on top: a factor above 1 means a smaller error.)
For a type ≥ 1 loop it tends to the stage's DC boost ``|G(0)|/|G(∞)|`` as ω → 0 and falls
to 1 a little above the stage's zero; above that the stage slightly hurts.  The band where
it helps by 2× (or by 3 dB, √2×) is where a requirement on reference tracking can be met.

Its price is the phase it adds at every gain crossover (a lag's phase is negative), which
depends on how far below crossover its zero sits.

A transport delay is kept exactly in both loops.  For a sampled loop both are evaluated on
the unit circle, ``z = e^{jωT}``, up to the Nyquist frequency π/T; the loop without the
stage is the digital controller rebuilt without it (the other continuous stages discretised
together with the design's method), and the phase cost is that of ``L_with/L_without``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TypeVar

import numpy as np
from numpy.typing import NDArray
from scipy import optimize

from ..design.model import Sampling, Stage
from ..design.sampling import controller_blocks
from ..lti import FloatArray, Loop, Zpk
from ..lti_discrete import Z_ONE_TOL, DiscreteLoop
from .frequency_grid import response
from .results import Boost, Margins, StageCrossoverCost

__all__ = ["BOOST_STAGE_TYPES", "dc_boost", "find_boosts", "improvement", "is_boost",
           "with_stages"]

AnyLoop = TypeVar("AnyLoop", Loop, DiscreteLoop)

#: Stage types that may be boosts.  gain/lead/notch/lowpass never are; integrator, pi and
#: pid have infinite DC gain: that is integral action, not a finite boost.
BOOST_STAGE_TYPES = ("lag", "tf", "zpk")
#: Grid density for locating band edges before refinement.
POINTS_PER_DECADE = 100


def is_boost(stage: Stage) -> bool:
    """True for a biproper stage with finite ``|G(0)| > |G(∞)|`` and no root at s = 0.

    Strictly proper stages (roll-off filters) are not boosts: their high-frequency gain
    is zero, which says nothing about low-frequency error reduction.  A stage written in
    z (``domain = "z"``) is judged the same way on the unit circle: biproper in z, no root
    at z = 1 (that is integral action or a differentiator) or at z = −1, and
    ``|G(1)| > |G(−1)|`` (see :func:`dc_boost`).
    """
    if stage.type not in BOOST_STAGE_TYPES:
        return False
    g = stage.model
    if g.relative_degree != 0 or g.zeros.size == 0 or g.gain == 0:
        return False
    if stage.domain == "z":
        roots = np.concatenate([g.zeros, g.poles])
        if np.any(np.abs(roots - 1.0) <= Z_ONE_TOL) or np.any(np.abs(roots + 1.0) <= Z_ONE_TOL):
            return False
        low, high = _z_ends(g)
        return low > high * (1 + 1e-9)
    if np.any(g.zeros == 0) or np.any(g.poles == 0):
        return False
    return abs(g.low_frequency_coefficient()) > abs(g.high_frequency_gain()) * (1 + 1e-9)


def _z_ends(g: Zpk) -> tuple[float, float]:
    """``(|G(1)|, |G(−1)|)`` of a z-domain stage: its gain at DC and at the Nyquist frequency."""
    val = g(np.array([1.0, -1.0], dtype=complex))
    return float(abs(val[0])), float(abs(val[1]))


def dc_boost(stage: Stage) -> float:
    """The stage's low-frequency gain over its high-frequency gain.

    In s: ``|G(0)|/|G(∞)|``.  In z: ``|G(1)|/|G(−1)|``, DC over the Nyquist frequency π/T,
    the highest frequency a digital filter has.  Tustin's map sends s = ∞ to z = −1, so a
    lag written in z as the Tustin equivalent of ``(s+z)/(s+p)`` has the same boost z/p as
    the continuous lag.
    """
    if stage.domain == "z":
        low, high = _z_ends(stage.model)
        return low / high
    g = stage.model
    return abs(g.low_frequency_coefficient()) / abs(g.high_frequency_gain())


def _corner_rad_s(roots: NDArray[np.complex128], period_s: float | None) -> list[float]:
    """Root magnitudes in rad/s: ``|r|`` in s; ``|ln r|/T`` (the s-plane image) in z."""
    if period_s is None:
        return [float(abs(r)) for r in roots if r != 0]
    out = []
    for r in roots:
        if abs(r) == 0:
            continue                                   # z = 0: infinitely fast
        lam = abs(np.log(complex(r))) / period_s
        if lam > 0:
            out.append(float(lam))
    return out


def _stage_corners(stage: Stage, period_s: float | None) -> tuple[float | None, float | None]:
    """(largest zero, smallest pole) of the stage in rad/s (s-plane images for z stages)."""
    period = period_s if stage.domain == "z" else None
    zeros = _corner_rad_s(stage.model.zeros, period)
    poles = _corner_rad_s(stage.model.poles, period)
    return (max(zeros) if zeros else None), (min(poles) if poles else None)


def _position(stages: Sequence[Stage], stage_index: int) -> int:
    for pos, st in enumerate(stages):
        if st.index == stage_index:
            return pos
    raise ValueError(f"no controller stage with index {stage_index}")


def _models(loop: Loop, stages: Sequence[Stage]) -> tuple[Zpk, ...]:
    return loop.stages if loop.stages else tuple(st.model for st in stages)


def with_stages(loop: AnyLoop, stages: Sequence[Stage], models: Sequence[Zpk | None],
                sampling: Sampling | None = None) -> AnyLoop:
    """``loop`` with the controller stages' models replaced (None: the stage removed).

    ``models`` runs parallel to ``stages``.  For a sampled loop the digital controller is
    rebuilt as the design builds it (:func:`~loopwarden.design.sampling.controller_blocks`):
    continuous stages are discretised together with the design's method, so removing or
    changing one changes the discretisation exactly as editing the design file would.
    """
    if isinstance(loop, DiscreteLoop):
        if sampling is None:
            raise ValueError("a sampled loop needs the design's [sampling] to rebuild")
        kept = [(m, st.domain) for m, st in zip(models, stages, strict=True) if m is not None]
        blocks = controller_blocks(sampling, [m for m, _ in kept], [d for _, d in kept])
        return loop.with_controller(blocks)
    return loop.with_controller([m for m in models if m is not None])


def _without(loop: AnyLoop, stages: Sequence[Stage], stage_index: int,
             sampling: Sampling | None = None) -> AnyLoop:
    if isinstance(loop, DiscreteLoop):
        models: list[Zpk | None] = [st.model for st in stages]
        models[_position(stages, stage_index)] = None
        return with_stages(loop, stages, models, sampling)
    kept = list(_models(loop, stages))
    del kept[_position(stages, stage_index)]
    return loop.with_controller(kept)


def _open_loop(loop: AnyLoop, w: FloatArray) -> NDArray[np.complex128]:
    """``L(jω)`` with the delay (``L(e^{jωT})`` for a sampled loop), over all roots at once."""
    if isinstance(loop, DiscreteLoop):
        return loop.open_loop(w)
    val = response(loop.rational, w)
    return val * np.exp(-1j * w * loop.delay_s) if loop.delay_s else val


def _factor(loop: AnyLoop, without: AnyLoop, w: FloatArray) -> FloatArray:
    return np.abs(1.0 + _open_loop(loop, w)) / np.abs(1.0 + _open_loop(without, w))


def improvement(loop: AnyLoop, stages: Sequence[Stage], stage_index: int,
                grid: FloatArray, sampling: Sampling | None = None) -> FloatArray:
    """Tracking-error improvement ``|1 + L_with| / |1 + L_without|`` on ``grid`` (rad/s).

    ``stage_index`` is the 1-based controller stage index (``Boost.stage``).  For a sampled
    loop (``sampling`` given) both are taken on the unit circle, ``z = e^{jωT}``.
    """
    w = np.asarray(grid, dtype=float)
    return _factor(loop, _without(loop, stages, stage_index, sampling), w)


def _band_edge(loop: AnyLoop, without: AnyLoop, level: float, w_lo: float,
               w_hi: float, *, bounded: bool = False) -> float | None:
    """Highest ω such that the improvement is ≥ level on all of (0, ω].

    None when it is already below ``level`` at ``w_lo`` (the low-frequency limit); when it
    never drops below it up to ``w_hi``: inf, or ``w_hi`` itself when ``bounded`` (a
    sampled loop has no frequencies above the Nyquist frequency).
    """
    decades = math.log10(w_hi / w_lo)
    grid = np.logspace(math.log10(w_lo), math.log10(w_hi),
                       int(decades * POINTS_PER_DECADE) + 1)
    if bounded:
        grid[-1] = w_hi
    f = _factor(loop, without, grid) - level
    below = np.flatnonzero(f < 0)
    if below.size == 0:
        return w_hi if bounded else math.inf
    k = int(below[0])
    if k == 0:
        return None

    def g(logw: float) -> float:
        return float(_factor(loop, without, np.array([math.exp(logw)]))[0] - level)

    lo, hi = math.log(grid[k - 1]), math.log(grid[k])
    return math.exp(optimize.brentq(g, lo, hi, xtol=1e-13, rtol=1e-13))


def _wrap_deg(rad: float) -> float:
    deg = math.degrees(rad)
    return deg - 360.0 * math.ceil((deg - 180.0) / 360.0)


def find_boosts(loop: AnyLoop, stages: Sequence[Stage], margins: Margins,
                reference_band_rad_s: float | None,
                sampling: Sampling | None = None) -> tuple[Boost, ...]:
    """Every low-frequency boost stage of the controller, with its band and its costs.

    Parameters
    ----------
    loop : Loop or DiscreteLoop
        The loop; ``loop.stages`` (or the stages' models) are in the order of ``stages``.
        A delay is included exactly; a sampled loop is evaluated on the unit circle.
    stages : sequence of Stage
        The controller stages as read from the design.
    margins : Margins
        The loop's margins; a phase cost is reported at every gain crossover.
    reference_band_rad_s : float or None
        Highest reference frequency to be tracked (rad/s), if the design states one.
    sampling : Sampling, optional
        The design's ``[sampling]``, required for a sampled loop: "the loop without the
        stage" is the digital controller rebuilt without it (continuous stages
        re-discretised together with the design's method).

    Returns
    -------
    tuple of Boost
        ``dc_boost`` as :func:`dc_boost`; ``band_2x_rad_s`` / ``band_3db_rad_s``: the
        highest ω (rad/s) below which the improvement is ≥ 2 / ≥ √2 everywhere, refined by
        root finding (None when the boost never reaches that factor; for a sampled loop at
        most the Nyquist frequency π/T, which is reported when the factor stays above the
        level up to it); ``zero_rad_s`` is the largest zero magnitude and ``pole_rad_s``
        the smallest pole magnitude of the stage (the zero and pole of a first-order lag;
        for a stage in z, the s-plane images ``|ln r|/T``); per crossover, the phase the
        stage adds there in degrees (negative for a lag) and ``zero_rad_s / crossover``.
        For a sampled loop that phase is ``∠(L_with/L_without)(e^{jωT})``, the
        discretised stage's phase, whatever the method.  Empty when no stage is a boost.
    """
    discrete = isinstance(loop, DiscreteLoop)
    period = loop.period_s if isinstance(loop, DiscreteLoop) else None
    out: list[Boost] = []
    for st in stages:
        if not is_boost(st):
            continue
        g = st.model
        zero, pole = _stage_corners(st, period)
        without = _without(loop, stages, st.index, sampling)
        roots = np.concatenate([loop.rational.zeros, loop.rational.poles])
        corners = _corner_rad_s(roots, period)
        crossings = [c.frequency_rad_s for c in margins.gain_crossings
                     if c.frequency_rad_s > 0 and math.isfinite(c.frequency_rad_s)]
        corners += crossings
        low = [x for x in (pole, *corners) if x is not None and x > 0]
        if isinstance(loop, DiscreteLoop):
            # Roots at z = 0 have no finite s-plane image: the Nyquist frequency bounds.
            w_hi = loop.nyquist_rad_s
            w_lo = 1e-4 * min([*low, w_hi])
        else:
            w_lo = 1e-4 * min(low)
            w_hi = 1e3 * max(x for x in (zero, *corners) if x is not None)
        ref = None
        if reference_band_rad_s is not None:
            ref = float(_factor(loop, without, np.array([reference_band_rad_s]))[0])
        if discrete:
            w_c = np.array(crossings, dtype=float)
            ratio = _open_loop(loop, w_c) / _open_loop(without, w_c)
            phase = [_wrap_deg(float(x)) for x in np.angle(ratio)]
        else:
            phase = [_wrap_deg(float(g.phase_rad(np.array([w]))[0])) for w in crossings]
        costs = tuple(
            StageCrossoverCost(
                crossover_rad_s=w, phase_cost_deg=ph,
                zero_ratio=(zero / w) if zero is not None else math.inf,
            )
            for w, ph in zip(crossings, phase, strict=True)
        )
        out.append(Boost(
            stage=st.index, stage_name=st.name, zero_rad_s=zero, pole_rad_s=pole,
            dc_boost=dc_boost(st),
            band_2x_rad_s=_band_edge(loop, without, 2.0, w_lo, w_hi, bounded=discrete),
            band_3db_rad_s=_band_edge(loop, without, math.sqrt(2.0), w_lo, w_hi,
                                      bounded=discrete),
            improvement_at_reference_band=ref, costs=costs,
        ))
    return tuple(out)
