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
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray
from scipy import optimize

from ..design.model import Stage
from ..lti import FloatArray, Loop, Zpk
from .frequency_grid import response
from .results import Boost, Margins, StageCrossoverCost

__all__ = ["BOOST_STAGE_TYPES", "find_boosts", "improvement", "is_boost"]

#: Stage types that may be boosts.  gain/lead/notch/lowpass never are; integrator, pi and
#: pid have infinite DC gain: that is integral action, not a finite boost.
BOOST_STAGE_TYPES = ("lag", "tf", "zpk")
#: Grid density for locating band edges before refinement.
POINTS_PER_DECADE = 100


def is_boost(stage: Stage) -> bool:
    """True for a biproper stage with finite ``|G(0)| > |G(∞)|`` and no root at s = 0.

    Strictly proper stages (roll-off filters) are not boosts: their high-frequency gain
    is zero, which says nothing about low-frequency error reduction.
    """
    if stage.type not in BOOST_STAGE_TYPES:
        return False
    g = stage.model
    if g.relative_degree != 0 or g.zeros.size == 0 or g.gain == 0:
        return False
    if np.any(g.zeros == 0) or np.any(g.poles == 0):
        return False
    return abs(g.low_frequency_coefficient()) > abs(g.high_frequency_gain()) * (1 + 1e-9)


def _position(stages: Sequence[Stage], stage_index: int) -> int:
    for pos, st in enumerate(stages):
        if st.index == stage_index:
            return pos
    raise ValueError(f"no controller stage with index {stage_index}")


def _models(loop: Loop, stages: Sequence[Stage]) -> tuple[Zpk, ...]:
    return loop.stages if loop.stages else tuple(st.model for st in stages)


def _without(loop: Loop, stages: Sequence[Stage], stage_index: int) -> Loop:
    models = list(_models(loop, stages))
    del models[_position(stages, stage_index)]
    return loop.with_controller(models)


def _open_loop(loop: Loop, w: FloatArray) -> NDArray[np.complex128]:
    """``L(jω)`` with the delay, evaluated over all roots at once."""
    val = response(loop.rational, w)
    return val * np.exp(-1j * w * loop.delay_s) if loop.delay_s else val


def _factor(loop: Loop, without: Loop, w: FloatArray) -> FloatArray:
    return np.abs(1.0 + _open_loop(loop, w)) / np.abs(1.0 + _open_loop(without, w))


def improvement(loop: Loop, stages: Sequence[Stage], stage_index: int,
                grid: FloatArray) -> FloatArray:
    """Tracking-error improvement ``|1 + L_with| / |1 + L_without|`` on ``grid`` (rad/s).

    ``stage_index`` is the 1-based controller stage index (``Boost.stage``).
    """
    w = np.asarray(grid, dtype=float)
    return _factor(loop, _without(loop, stages, stage_index), w)


def _band_edge(loop: Loop, without: Loop, level: float, w_lo: float,
               w_hi: float) -> float | None:
    """Highest ω such that the improvement is ≥ level on all of (0, ω].

    None when it is already below ``level`` at ``w_lo`` (the low-frequency limit), inf
    when it never drops below it up to ``w_hi``.
    """
    decades = math.log10(w_hi / w_lo)
    grid = np.logspace(math.log10(w_lo), math.log10(w_hi),
                       int(decades * POINTS_PER_DECADE) + 1)
    f = _factor(loop, without, grid) - level
    below = np.flatnonzero(f < 0)
    if below.size == 0:
        return math.inf
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


def find_boosts(loop: Loop, stages: Sequence[Stage], margins: Margins,
                reference_band_rad_s: float | None) -> tuple[Boost, ...]:
    """Every low-frequency boost stage of the controller, with its band and its costs.

    Parameters
    ----------
    loop : Loop
        The loop; ``loop.stages`` (or the stages' models) are in the order of ``stages``.
    stages : sequence of Stage
        The controller stages as read from the design.
    margins : Margins
        The loop's margins; a phase cost is reported at every gain crossover.
    reference_band_rad_s : float or None
        Highest reference frequency to be tracked (rad/s), if the design states one.

    Returns
    -------
    tuple of Boost
        ``dc_boost = |G(0)|/|G(∞)|``; ``band_2x_rad_s`` / ``band_3db_rad_s``: the highest
        ω (rad/s) below which the improvement is ≥ 2 / ≥ √2 everywhere, refined by root
        finding (None when the boost never reaches that factor); ``zero_rad_s`` is the
        largest zero magnitude and ``pole_rad_s`` the smallest pole magnitude of the stage
        (the zero and pole of a first-order lag); per crossover, the stage's phase there
        in degrees (negative for a lag) and ``zero_rad_s / crossover``.  Empty when no
        stage is a boost.
    """
    out: list[Boost] = []
    for st in stages:
        if not is_boost(st):
            continue
        g = st.model
        zero = float(np.max(np.abs(g.zeros)))
        pole = float(np.min(np.abs(g.poles)))
        dc_boost = abs(g.low_frequency_coefficient()) / abs(g.high_frequency_gain())
        without = _without(loop, stages, st.index)
        corners = [abs(r) for r in np.concatenate([loop.rational.zeros, loop.rational.poles])
                   if r != 0]
        corners += [c.frequency_rad_s for c in margins.gain_crossings]
        w_lo = 1e-4 * min([pole, *corners])
        w_hi = 1e3 * max([zero, *corners])
        ref = None
        if reference_band_rad_s is not None:
            ref = float(_factor(loop, without, np.array([reference_band_rad_s]))[0])
        costs = tuple(
            StageCrossoverCost(
                crossover_rad_s=c.frequency_rad_s,
                phase_cost_deg=_wrap_deg(float(g.phase_rad(np.array([c.frequency_rad_s]))[0])),
                zero_ratio=zero / c.frequency_rad_s,
            )
            for c in margins.gain_crossings
            if c.frequency_rad_s > 0 and math.isfinite(c.frequency_rad_s)
        )
        out.append(Boost(
            stage=st.index, stage_name=st.name, zero_rad_s=zero, pole_rad_s=pole,
            dc_boost=dc_boost,
            band_2x_rad_s=_band_edge(loop, without, 2.0, w_lo, w_hi),
            band_3db_rad_s=_band_edge(loop, without, math.sqrt(2.0), w_lo, w_hi),
            improvement_at_reference_band=ref, costs=costs,
        ))
    return tuple(out)
