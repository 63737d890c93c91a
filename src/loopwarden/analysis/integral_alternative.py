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
from numpy.typing import NDArray
from scipy import linalg, optimize

from ..design.model import Design, Sampling, Stage
from ..errors import AnalysisError
from ..lti import FloatArray, Loop, Zpk
from ..lti_discrete import DiscreteLoop
from .boost_band import AnyLoop, with_stages
from .closed_loop import delay_split
from .discrete_margins import compute_discrete_margins, compute_discrete_sensitivity
from .discrete_response import (
    discrete_stability,
    discrete_step_response,
    discrete_tracking,
)
from .frequency_grid import imaginary_axis_frequencies, log_magnitude, loop_grid
from .frequency_grid import phase as loop_phase
from .margins import (
    compute_margins,
    dedupe,
    valid_steps,
    wrap_phase_margin_deg,
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
from .stability import closed_loop_stability, poles_stable
from .time_response import step_response
from .tracking import compute_tracking

__all__ = ["FIGURES", "GAIN_RANGE", "alternative_over_variants", "design_alternatives",
           "integral_alternatives", "integral_loop", "integral_stage", "integral_stage_z",
           "judge", "scaled"]

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


def _num(x: float) -> str:
    return f"{x:.10g}"


def _num_z(x: float) -> str:
    return f"{x:.17g}"


def _toml_string(text: str) -> str:
    """A TOML basic string (the loader allows no control characters in a stage name)."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _snippet(stage: Stage, new_model: Zpk, k: float, target_deg: float, met: bool,
             variants: int = 1) -> str:
    where = "s = 0" if stage.domain == "s" else "z = 1"
    head = [f"# Integral-action alternative to {stage.name}: its lowest pole moved to {where},",
            f"# overall loop gain x{k:.6g} folded in "
            f"(phase margin {'>=' if met else 'best reachable below'} {target_deg:.2f} deg)."]
    if variants > 1:
        head.append(f"# One controller for all {variants} plant variants: the worst sets k.")
    head.append(f"# Replace {stage.name} with:")
    if stage.type == "lag" and stage.domain == "s":
        zero = float(-new_model.zeros[0].real)
        kp = k * new_model.gain
        body = ["[[controller]]", 'type = "pi"', f"kp = {_num(kp)}", f"ti = {_num(1.0 / zero)}"]
        if stage.title is not None:
            body.insert(1, f"name = {_toml_string(stage.title)}")
    else:
        # tf coefficients are in s (rad/s) whatever the design's frequency unit, or in z.
        num = np.real(np.poly(new_model.zeros)) * new_model.gain * k
        den = np.real(np.poly(new_model.poles))
        body = ["[[controller]]", 'type = "tf"']
        if stage.title is not None:
            body.insert(1, f"name = {_toml_string(stage.title)}")
        # A digital filter's coefficients near 1 carry its poles: all 17 digits in z.
        put = _num
        if stage.domain == "z":
            body.append('domain = "z"')
            put = _num_z
        body += ["num = [" + ", ".join(put(float(c)) for c in num) + "]",
                 "den = [" + ", ".join(put(float(c)) for c in den) + "]"]
    return "\n".join(head + body) + "\n"


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
