"""The integral stage (the lag pole moved to the origin) and the search for its one gain k:
the phase-margin boundary over every variant, the worst variant deciding.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
from numpy.typing import NDArray
from scipy import linalg, optimize

from ..design.model import Sampling, Stage
from ..errors import AnalysisError
from ..lti import FloatArray, Loop, Zpk
from ..lti_discrete import DiscreteLoop
from .boost_band import AnyLoop, with_stages
from .closed_loop import delay_split
from .discrete_margins import compute_discrete_margins
from .discrete_response import (
    discrete_stability,
)
from .frequency_grid import imaginary_axis_frequencies, log_magnitude, loop_grid
from .frequency_grid import phase as loop_phase
from .margins import (
    compute_margins,
    dedupe,
    valid_steps,
    wrap_phase_margin_deg,
)
from .stability import closed_loop_stability, poles_stable

#: Gain factors searched, highest first: 1 down to 1e-3 (20 per decade), then refined.
GAIN_RANGE = (1.0, 1e-3)
GRID_PER_DECADE = 20


#: Relative width of the final gain bracket.
GAIN_RTOL = 1e-7


#: Newton steps at most, and their convergence tolerance in u = ln ω, for the gain
#: crossings of the scaled loop (the margins' own tolerance).
_NEWTON_ITER = 60
_XTOL_U = 1e-14


def integral_stage(model: Zpk) -> Zpk:
    """The stage with its smallest real pole moved to s = 0 (same zeros, same gain).

    For a lag ``k(s+z)/(s+p)`` this is ``k(s+z)/s``: same high-frequency gain, same zero.

    Raises
    ------
    AnalysisError
        When the stage has no real pole to move.
    """
    real = [i for i, p in enumerate(model.poles) if p.imag == 0 and p != 0]
    if not real:
        raise AnalysisError("the boost stage has no real pole to move to the origin")
    i = min(real, key=lambda j: abs(model.poles[j]))
    poles = model.poles.copy()
    poles[i] = 0.0
    return Zpk(model.zeros, poles, model.gain)


def integral_stage_z(model: Zpk) -> Zpk:
    """A z-domain stage with its real pole nearest z = 1 moved to z = 1 (same zeros, gain).

    For a digital lag ``k(z − a)/(z − b)`` (b near 1) this is ``k(z − a)/(z − 1)``: a
    discrete integrator, as a continuous pole moved to s = 0 maps to z = e^{0·T} = 1.

    Raises
    ------
    AnalysisError
        When the stage has no real pole other than z = 1.
    """
    real = [i for i, p in enumerate(model.poles) if p.imag == 0 and p != 1.0]
    if not real:
        raise AnalysisError("the boost stage has no real pole to move to z = 1")
    i = min(real, key=lambda j: abs(model.poles[j] - 1.0))
    poles = model.poles.copy()
    poles[i] = 1.0
    return Zpk(model.zeros, poles, model.gain)


def _integral_model(stage: Stage, model: Zpk) -> Zpk:
    return integral_stage_z(model) if stage.domain == "z" else integral_stage(model)


def integral_loop(loop: AnyLoop, stages: Sequence[Stage], stage_index: int,
                  sampling: Sampling | None = None) -> AnyLoop:
    """``loop`` with controller stage ``stage_index`` (1-based) made integral, gain unchanged.

    For a sampled loop (``sampling`` given) a continuous stage gets its pole at s = 0 and
    the controller is re-discretised with the design's method (the pole lands on z = 1);
    a z-domain stage gets its pole at z = 1.
    """
    pos = next((i for i, st in enumerate(stages) if st.index == stage_index), None)
    if pos is None:
        raise ValueError(f"no controller stage with index {stage_index}")
    if isinstance(loop, DiscreteLoop):
        models: list[Zpk | None] = [st.model for st in stages]
        models[pos] = _integral_model(stages[pos], stages[pos].model)
        return with_stages(loop, stages, models, sampling)
    cont = list(loop.stages if loop.stages else (st.model for st in stages))
    cont[pos] = integral_stage(cont[pos])
    return loop.with_controller(cont)


def scaled(loop: AnyLoop, k: float) -> AnyLoop:
    """The loop with its controller gain multiplied by ``k`` (s or z)."""
    if isinstance(loop, DiscreteLoop):
        blocks = loop.stages or (loop.controller,)
        return loop.with_controller([blocks[0].scaled(k), *blocks[1:]])
    return loop.scaled(k)


class _GainSearch:
    """Stability and phase margin of ``base`` with its gain scaled by k, for many k.

    For a rational loop whose blocks are all proper, the data that do not depend on k are
    computed once: the delay-split realisation (closing ``w = k·u`` gives the closed-loop
    matrix of the scaled loop, a similarity of the one :func:`.closed_loop.closed_loop`
    builds), and ``ln|L|`` and ``∠L`` on one grid that holds the analysis grids of the
    loop at both ends of :data:`GAIN_RANGE` (the gain crossings of ``k·L`` are where
    ``ln|L| = −ln k``; the phase does not depend on k).  The margin is then the one
    :func:`.margins.compute_margins` reports for the scaled loop: at each gain crossing
    ``180° + ∠L`` wrapped, the crossing of smallest magnitude deciding, inf without one.
    Other loops (delay, improper blocks) are scaled and analysed in full for every k.
    """

    def __init__(self, base: Loop | DiscreteLoop) -> None:
        self.base = base
        blocks = (*(base.stages or (base.controller,)), base.plant, base.sensor)
        self.fast = (isinstance(base, Loop) and not base.has_delay
                     and all(b.is_proper for b in blocks))
        if not self.fast:
            return
        split = delay_split(base)
        self.a = split.a
        self.bw = split.b[:, 1:2]
        self.cu = split.c[1:2, :]
        self.duw = float(split.d[1, 1])
        rat = base.rational
        self.rat = rat
        hi, lo = GAIN_RANGE
        w = np.union1d(loop_grid(base.scaled(hi)), loop_grid(base.scaled(lo)))
        self.w = w
        self.f = log_magnitude(rat, w)
        self.valid = valid_steps(w, imaginary_axis_frequencies(rat))
        self.roots = np.concatenate([rat.zeros, rat.poles])
        self.sign = np.concatenate([np.ones(rat.zeros.size), -np.ones(rat.poles.size)])
        self.log_gain = math.log(abs(rat.gain)) if rat.gain != 0 else -math.inf

    def _crossings(self, idx: NDArray[np.int_], lk: float) -> FloatArray:
        """Roots of ``ln|L(je^u)| + ln k`` in the grid steps ``idx``, as frequencies.

        Safeguarded Newton on all steps at once, with the exact derivative
        ``d ln|L|/d ln ω = Re Σ ±jω/(jω − r)``: it never leaves the step's bracket
        (bisection when it would) and stops when a step moves less than 1e−14 in u.
        """
        a, b = np.log(self.w[idx]), np.log(self.w[idx + 1])
        fa = self.f[idx] + lk
        fb = self.f[idx + 1] + lk
        u = a - fa * (b - a) / (fb - fa)
        done = np.zeros(u.size, dtype=bool)
        for _ in range(_NEWTON_ITER):
            s = 1j * np.exp(u)
            diff = s[:, None] - self.roots[None, :]
            f = self.log_gain + np.log(np.abs(diff)) @ self.sign + lk
            slope = (s[:, None] / diff).real @ self.sign
            same = np.sign(f) == np.sign(fa)
            a = np.where(same, u, a)
            fa = np.where(same, f, fa)
            b = np.where(same, b, u)
            with np.errstate(divide="ignore", invalid="ignore"):
                nxt = u - f / slope
            bad = ~np.isfinite(nxt) | (nxt <= np.minimum(a, b)) | (nxt >= np.maximum(a, b))
            nxt = np.where(bad, 0.5 * (a + b), nxt)
            done = done | (f == 0) | (np.abs(nxt - u) <= _XTOL_U * np.maximum(1.0, np.abs(u)))
            u = np.where(f == 0, u, nxt)
            if done.all():
                break
        return np.exp(u)

    def _stable(self, k: float) -> bool:
        den = 1.0 - k * self.duw
        if abs(den) < 1e-12:
            raise AnalysisError("the loop is not well posed: 1 + L(∞) = 0")
        a = self.a + self.bw @ (self.cu * (k / den))
        return poles_stable(linalg.eigvals(a) if a.shape[0] else np.zeros(0, dtype=complex))

    def _phase_margin(self, k: float) -> float:
        rat = self.rat
        if rat.gain == 0 or k == 0:
            return math.inf
        lk = math.log(k)
        f = self.f + lk
        above = f > 0
        steps = (self.valid & (above[:-1] != above[1:]) & np.isfinite(f[:-1])
                 & np.isfinite(f[1:]))
        idx = np.flatnonzero(steps)
        if idx.size == 0:
            return math.inf

        w_gc = dedupe(self._crossings(idx, lk))
        pm = wrap_phase_margin_deg(np.degrees(loop_phase(rat, w_gc)))
        return float(pm[int(np.argmin(np.abs(pm)))])

    def evaluate(self, k: float) -> tuple[bool, float | None]:
        """``(closed loop stable, phase margin in deg or None when unstable)`` at gain k."""
        if not self.fast:
            loop = scaled(self.base, k)
            if isinstance(loop, DiscreteLoop):
                if not discrete_stability(loop).closed_loop_stable:
                    return False, None
                return True, compute_discrete_margins(loop).phase_margin_deg
            # The search needs the verdict only (the Nyquist count); the chosen gain's
            # loop gets its certified roots in _review.
            if not closed_loop_stability(loop, find_roots=False).closed_loop_stable:
                return False, None
            return True, compute_margins(loop).phase_margin_deg
        if not self._stable(k):
            return False, None
        return True, self._phase_margin(k)


class _AllVariants:
    """Several loops scaled by the same k: stable when every one is, the smallest margin."""

    def __init__(self, bases: Sequence[Loop | DiscreteLoop]) -> None:
        self.searches = [_GainSearch(b) for b in bases]

    def evaluate(self, k: float) -> tuple[bool, float | None]:
        worst = math.inf
        for search in self.searches:
            stable, pm = search.evaluate(k)
            if not stable or pm is None:
                return False, None
            worst = min(worst, pm)
        return True, worst


def _choose_gain(base: Loop | DiscreteLoop | Sequence[Loop | DiscreteLoop],
                 target_deg: float) -> tuple[float, bool]:
    """Highest factor in :data:`GAIN_RANGE` meeting the target; else the one with the
    largest phase margin among the stable ones.

    With several loops (plant variants under one controller) "stable" means every loop
    is closed-loop stable and the phase margin is the smallest over them: the worst
    variant sets the gain.  Returns the factor and whether it meets the target.
    """
    hi, lo = GAIN_RANGE
    count = int(round(math.log10(hi / lo) * GRID_PER_DECADE)) + 1
    grid = np.logspace(math.log10(hi), math.log10(lo), count)
    bases = list(base) if isinstance(base, Sequence) else [base]
    search = _AllVariants(bases)

    def meets(k: float) -> bool:
        stable, pm = search.evaluate(k)
        return stable and pm is not None and pm >= target_deg

    best: tuple[float, float] | None = None       # (phase margin, k) of the best stable
    for j, k in enumerate(grid):
        stable, pm = search.evaluate(float(k))
        if not stable or pm is None:
            continue
        if pm >= target_deg:
            if j == 0:
                return float(k), True
            # Refine between this gain (meets) and the next higher one (does not).
            return _boundary(search, target_deg, meets, float(k), float(grid[j - 1])), True
        if best is None or pm > best[0]:
            best = (pm, float(k))
    if best is None:
        raise AnalysisError(f"no gain factor in [{lo:g}, {hi:g}] makes the integral "
                            "alternative closed-loop stable")
    return _best_reachable(search, best[1], grid), False


def _boundary(search: _AllVariants, target_deg: float, meets: Callable[[float], bool],
              k_ok: float, k_bad: float) -> float:
    """A gain that meets the target within a relative GAIN_RTOL below where meeting it
    stops, between ``k_ok`` (meets) and ``k_bad`` (does not).

    Brent's method on ``PM(k) − target`` in ln k (−1000 where the loop is unstable, capped
    at +1000): like bisection it only ever narrows a bracket with a sign change, so it ends
    at a boundary of "meets the target", in a handful of evaluations instead of twenty.
    """
    def h(x: float) -> float:
        stable, pm = search.evaluate(math.exp(x))
        if not stable or pm is None:
            return -1000.0
        return min(pm - target_deg, 1000.0)

    lo, hi = math.log(k_ok), math.log(k_bad)
    try:
        x = optimize.brentq(h, lo, hi, xtol=0.25 * GAIN_RTOL)
    except ValueError:          # no sign change after all: keep the safe end
        return k_ok
    for cand in (math.exp(x), math.exp(x - 0.25 * GAIN_RTOL), math.exp(x - GAIN_RTOL)):
        if k_ok <= cand <= k_bad and meets(cand):
            return cand
    while k_bad / k_ok - 1.0 > GAIN_RTOL:      # bisection, as a last resort
        mid = math.sqrt(k_ok * k_bad)
        if meets(mid):
            k_ok = mid
        else:
            k_bad = mid
    return k_ok


def _best_reachable(search: _AllVariants, k_best: float, grid: np.ndarray) -> float:
    """Refine the grid's best phase margin between the neighbouring grid gains."""
    step = math.log(grid[0] / grid[1])
    lo = max(math.log(k_best) - step, math.log(grid[-1]))
    hi = min(math.log(k_best) + step, math.log(grid[0]))

    def neg_pm(logk: float) -> float:
        stable, pm = search.evaluate(math.exp(logk))
        return -pm if stable and pm is not None else math.inf

    res = optimize.minimize_scalar(neg_pm, bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-6})
    return math.exp(res.x) if res.fun <= neg_pm(math.log(k_best)) else k_best
