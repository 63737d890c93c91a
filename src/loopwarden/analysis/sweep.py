"""Sweep of the uncertain parameters: corners, a space-filling sample, the worst cases.

Points
    All ``2^n`` corners of the box for n ≤ 10 parameters; above that a stated subset of
    1024: every parameter at its min, at its max, each parameter alone at its max (the others
    at min) and alone at its min (the others at max), then corners drawn with the seed.
    Then ``samples`` points of a scrambled Sobol' sequence (``scipy.stats.qmc``, seeded),
    mapped through each parameter's distribution (inverse CDF).
Figures
    Every point is evaluated on every plant variant whose loop a parameter moves
    (:mod:`.sweep_response`, in fixed chunks of :data:`CHUNK_ROWS` rows, in order, in this
    process or through an executor: local processes or a Dask cluster).  A point's figure is
    its worst over those variants; a point is unstable when any variant's closed loop is.
Worst cases
    Per figure, the worst point over corners and sample (stable points only), then a
    bounded local search (``scipy.optimize.minimize``, L-BFGS-B on the box scaled to the
    unit cube, forward differences evaluated as one batch) from the :data:`STARTS` worst
    distinct points; a point whose closed loop is unstable is never accepted.  Settling time
    is computed by the exact step response only at the worst points of the other figures
    and the lowest phase margins (no local search: each evaluation is a simulation).

Same inputs and seed: the same points, the same chunks, the same reduction order, so the
same numbers whether the chunks run here, in worker processes or on a Dask cluster.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from ..design.model import Design
from ..design.parameters import SweepSettings
from ..lti import FloatArray
from .sweep_models import SampleLoops, sample_loops, swept_variants
from .sweep_response import FIGURES, SampleFigures, evaluate_loops, sample_grid

__all__ = ["CHUNK_ROWS", "SWEEP_FIGURES", "SweepResult", "WorstPoint", "corner_points",
           "evaluate_chunk", "run_sweep", "sample_points"]

SWEEP_FIGURES = (*FIGURES, "settling_time_s")
#: For each figure: True when larger is worse (peaks, settling, the gain-reduction margin,
#: which lies below 0 dB and is worse nearer 0).
LARGER_IS_WORSE = {"phase_margin_deg": False, "gain_margin_db": False,
                   "gain_margin_lower_db": True, "delay_margin_s": False,
                   "peak_sensitivity": True, "peak_complementary": True,
                   "disk_margin": False, "settling_time_s": True}
CHUNK_ROWS = 256
MAX_CORNER_DIMENSION = 10
CORNER_SUBSET = 1024
STARTS = 2
#: Settling time is simulated at this many lowest-phase-margin points besides the worst
#: points of the other figures.
SETTLING_CANDIDATES = 1
_FD_STEP = 1e-6
_SEARCH_ITERATIONS = 40


class Executor(Protocol):
    """What the sweep needs of an executor: ``map`` that keeps the order of its inputs
    (``concurrent.futures`` executors, ``dask.distributed.Client.get_executor()``)."""

    def map(self, fn: Callable[..., Any], *iterables: Iterable[Any]) -> Iterable[Any]: ...


@dataclass(frozen=True, slots=True, kw_only=True)
class WorstPoint:
    """The worst value of one figure over the box and where it lies."""

    figure: str
    value: float
    point: tuple[float, ...]               # one value per parameter, in their order
    variant: str
    found_by: str                          # "corner" | "sample" | "search"


@dataclass(frozen=True, eq=False, kw_only=True)
class SweepResult:
    """Everything the sweep measured (arrays: one row per point, corners first)."""

    names: tuple[str, ...]
    settings: SweepSettings
    points: FloatArray                     # (P, n)
    corners: int                           # the first ``corners`` rows are corners
    variants: tuple[str, ...]              # the swept plant variants
    per_variant: Mapping[str, SampleFigures]
    figures: Mapping[str, FloatArray]      # worst over the swept variants, per point
    figure_variant: Mapping[str, np.ndarray]   # index into ``variants``
    delay_s: Mapping[str, FloatArray]      # loop delay per point, per variant
    stable: np.ndarray                     # every swept variant stable, per point
    worst: Mapping[str, WorstPoint | None]
    settling_time_s: Mapping[int, float]   # point row → worst settling over the variants
    # |Spearman rank correlation| of each parameter with each figure over the stable
    # random points (0 where undefined): which parameters move a figure most.
    influence: Mapping[str, tuple[float, ...]]

    @property
    def samples(self) -> int:
        return int(self.points.shape[0] - self.corners)

    @property
    def random_rows(self) -> slice:
        return slice(self.corners, None)

    def values(self, point: Sequence[float]) -> dict[str, float]:
        return {n: float(x) for n, x in zip(self.names, point, strict=True)}


# --------------------------------------------------------------------------- points
def corner_points(lower: FloatArray, upper: FloatArray, seed: int) -> FloatArray:
    """The corners of the box (all of them up to 10 parameters, else the stated 1024)."""
    n = lower.size
    if n <= MAX_CORNER_DIMENSION:
        bits = (np.arange(2 ** n)[:, None] >> np.arange(n)[None, :]) & 1
    else:
        eye = np.eye(n, dtype=int)
        fixed = np.vstack([np.zeros((1, n), int), np.ones((1, n), int), eye, 1 - eye])
        rng = np.random.default_rng(seed)
        rest = rng.integers(0, 2, size=(CORNER_SUBSET - fixed.shape[0], n))
        bits = np.vstack([fixed, rest])
    return np.where(bits == 1, upper[None, :], lower[None, :])


def sample_points(design: Design, count: int, seed: int) -> FloatArray:
    """``count`` scrambled-Sobol' points mapped through the parameters' distributions."""
    from scipy.stats import qmc

    space = design.parameters
    assert space is not None
    m = max(0, math.ceil(math.log2(max(count, 1))))
    u = qmc.Sobol(len(space.parameters), scramble=True,
                  seed=np.random.default_rng(seed)).random_base2(m)[:count]
    return np.column_stack([p.from_unit(u[:, j]) for j, p in enumerate(space.parameters)])


# --------------------------------------------------------------------------- chunks
def evaluate_chunk(task: tuple[SampleLoops, FloatArray]) -> SampleFigures:
    """One chunk of one variant's loops on the shared grid (a picklable task)."""
    fam, w = task
    return evaluate_loops(fam, w)


def _evaluate(fam: SampleLoops, w: FloatArray, executor: Executor | None) -> SampleFigures:
    tasks = [(fam.rows(slice(i, i + CHUNK_ROWS)), w) for i in range(0, fam.size, CHUNK_ROWS)]
    mapper = map if executor is None else executor.map
    return SampleFigures.concat(list(mapper(evaluate_chunk, tasks)))


def _combine(per_variant: Sequence[SampleFigures]) -> tuple[dict[str, FloatArray],
                                                             dict[str, np.ndarray]]:
    figures, which = {}, {}
    for name in FIGURES:
        stack = np.vstack([f.figure(name) for f in per_variant])
        key = np.where(np.isnan(stack), -math.inf if LARGER_IS_WORSE[name] else math.inf,
                       stack)
        idx = np.argmax(key, axis=0) if LARGER_IS_WORSE[name] else np.argmin(key, axis=0)
        figures[name] = stack[idx, np.arange(stack.shape[1])]
        which[name] = idx
    return figures, which


# --------------------------------------------------------------------------- search
def _score(name: str, values: FloatArray) -> FloatArray:
    """Smaller is worse; NaN (figure absent) is never worst."""
    v = -values if LARGER_IS_WORSE[name] else values
    return np.where(np.isnan(v), math.inf, v)


class _PointEvaluator:
    """Figures at arbitrary points (a batch at a time) on every swept variant."""

    def __init__(self, design: Design, indices: Sequence[int], w: FloatArray) -> None:
        self.design, self.indices, self.w = design, indices, w
        self.evaluations = 0

    def __call__(self, X: FloatArray) -> tuple[dict[str, FloatArray], np.ndarray,
                                               np.ndarray]:
        per = [evaluate_loops(sample_loops(self.design, i, X), self.w) for i in self.indices]
        self.evaluations += X.shape[0]
        figs, which = _combine(per)
        stable = np.all([p.stable for p in per], axis=0)
        return figs, which, stable


def _search(name: str, evaluate: _PointEvaluator, lower: FloatArray, upper: FloatArray,
            starts: FloatArray) -> tuple[FloatArray, float, int] | None:
    """Bounded local minimisation of the figure's score from each start; best found."""
    from scipy.optimize import minimize

    span = upper - lower
    n = lower.size
    best: tuple[FloatArray, float, int] | None = None

    def batch(y: FloatArray) -> tuple[FloatArray, np.ndarray, np.ndarray]:
        figs, which, stable = evaluate(lower + np.clip(y, 0.0, 1.0) * span)
        return _score(name, figs[name]), which[name], stable

    def fun(y: FloatArray) -> tuple[float, FloatArray]:
        nonlocal best
        steps = np.where(y + _FD_STEP <= 1.0, _FD_STEP, -_FD_STEP)
        pts = np.vstack([y, y + np.diag(steps)])
        score, which, stable = batch(pts)
        score = np.where(stable, score, math.inf)
        f0 = float(score[0])
        if math.isfinite(f0) and (best is None or f0 < best[1]):
            best = (lower + np.clip(y, 0.0, 1.0) * span, f0, int(which[0]))
        if not math.isfinite(f0):
            return 1e300, np.zeros(n)
        grad = np.where(np.isfinite(score[1:]), (score[1:] - f0) / steps, 0.0)
        return f0, grad

    for x0 in starts:
        y0 = np.where(span > 0, (x0 - lower) / span, 0.0)
        minimize(fun, y0, jac=True, method="L-BFGS-B", bounds=[(0.0, 1.0)] * n,
                 options={"maxiter": _SEARCH_ITERATIONS, "ftol": 1e-12, "gtol": 1e-10})
    return best


def _worst(name: str, figs: Mapping[str, FloatArray], which: Mapping[str, np.ndarray],
           stable: np.ndarray, points: FloatArray, corners: int, variants: Sequence[str],
           evaluate: _PointEvaluator | None, lower: FloatArray,
           upper: FloatArray) -> WorstPoint | None:
    score = np.where(stable, _score(name, figs[name]), math.inf)
    if not np.isfinite(score).any():
        return None
    order = np.argsort(score, kind="stable")
    i = int(order[0])
    best = WorstPoint(figure=name, value=float(figs[name][i]), point=tuple(points[i]),
                      variant=variants[int(which[name][i])],
                      found_by="corner" if i < corners else "sample")
    if evaluate is None:
        return best
    starts, seen = [], set()
    for j in order:
        if not math.isfinite(score[j]):
            break
        key = tuple(np.round(points[j], 12))
        if key not in seen:
            seen.add(key)
            starts.append(points[j])
        if len(starts) == STARTS:
            break
    found = _search(name, evaluate, lower, upper, np.array(starts))
    if found is not None and found[1] < float(score[i]):
        x, s, v = found
        value = -s if LARGER_IS_WORSE[name] else s
        best = WorstPoint(figure=name, value=float(value), point=tuple(float(t) for t in x),
                          variant=variants[v], found_by="search")
    return best


# --------------------------------------------------------------------------- settling
def _settling(design: Design, indices: Sequence[int], point: Sequence[float],
              band: float) -> tuple[float, str] | None:
    """Worst settling time over the swept variants at ``point`` (exact step response)."""
    from ..design.loader import design_at
    from .time_response import step_response
    from .undecided import NUMERIC_ERRORS

    space = design.parameters
    assert space is not None
    at = design_at(design, space.values(point))
    worst: tuple[float, str] | None = None
    for i in indices:
        loop = at.continuous_loop(at.variants[i])
        try:
            # The point's closed loops are stable (the sweep's count): simulate directly.
            t = step_response(loop, band).metrics.settling_time_s
        except NUMERIC_ERRORS:
            return None
        if worst is None or t > worst[0]:
            worst = (t, at.variants[i].name)
    return worst


def _influence(X: FloatArray, values: FloatArray) -> tuple[float, ...]:
    """|Spearman rank correlation| of each column of ``X`` with ``values`` (finite only)."""
    from scipy.stats import rankdata

    keep = np.isfinite(values)
    if keep.sum() < 3:
        return tuple(0.0 for _ in range(X.shape[1]))
    rv = rankdata(values[keep])
    out = []
    for j in range(X.shape[1]):
        rx = rankdata(X[keep, j])
        sx, sv = np.std(rx), np.std(rv)
        out.append(0.0 if sx == 0 or sv == 0 else
                   float(abs(np.mean((rx - rx.mean()) * (rv - rv.mean())) / (sx * sv))))
    return tuple(out)


# --------------------------------------------------------------------------- entry point
def run_sweep(design: Design, settings: SweepSettings | None = None, *,
              settling_band: float = 0.02, executor: Executor | None = None) -> SweepResult:
    """Sweep ``design``'s parameters (``settings`` default: the design's ``[sweep]``).

    Parameters
    ----------
    design : Design
        A continuous design with ``parameters``.
    settings : SweepSettings, optional
        Samples, seed, corners, worst-case search; default the design's own or the
        defaults of :class:`~loopwarden.design.parameters.SweepSettings`.
    settling_band : float
        Settling band (fraction of the final value) of the step response.
    executor : optional
        Runs the chunks (``map`` keeping order); None: in this process.
    """
    space = design.parameters
    if space is None:
        raise ValueError("the design has no [parameters]")
    settings = settings or design.sweep or SweepSettings()
    lower, upper = space.lower, space.upper
    corners = (corner_points(lower, upper, settings.seed) if settings.corners
               else np.zeros((0, lower.size)))
    points = np.vstack([corners, sample_points(design, settings.samples, settings.seed)])
    indices = swept_variants(design)
    names = tuple(design.variants[i].name for i in indices)
    fams = [sample_loops(design, i, points) for i in indices]
    w = sample_grid(fams)
    per = [_evaluate(f, w, executor) for f in fams]
    figs, which = _combine(per)
    stable = np.all([p.stable for p in per], axis=0)
    evaluate = _PointEvaluator(design, indices, w) if settings.worst_case else None
    worst: dict[str, WorstPoint | None] = {
        name: _worst(name, figs, which, stable, points, corners.shape[0], names, evaluate,
                     lower, upper) for name in FIGURES}

    # Settling: at the worst points found and the lowest phase margins.
    candidates = [np.array(wp.point) for wp in worst.values() if wp is not None]
    pm_order = np.argsort(np.where(stable, figs["phase_margin_deg"], math.inf), kind="stable")
    candidates += [points[j] for j in pm_order[:SETTLING_CANDIDATES] if stable[j]]
    settle: dict[int, float] = {}
    worst_settle: WorstPoint | None = None
    seen: set[tuple[float, ...]] = set()
    for k, x in enumerate(candidates):
        key = tuple(float(t) for t in x)
        if key in seen:
            continue
        seen.add(key)
        got = _settling(design, indices, x, settling_band)
        if got is None:
            continue
        settle[k] = got[0]
        if worst_settle is None or got[0] > worst_settle.value:
            worst_settle = WorstPoint(figure="settling_time_s", value=got[0], point=key,
                                      variant=got[1], found_by="candidates")
    worst["settling_time_s"] = worst_settle
    rows = np.arange(points.shape[0]) >= corners.shape[0]
    influence = {name: _influence(points[rows & stable], figs[name][rows & stable])
                 for name in FIGURES}
    return SweepResult(influence=influence, names=space.names, settings=settings, points=points,
                       corners=int(corners.shape[0]), variants=names,
                       per_variant=dict(zip(names, per, strict=True)), figures=figs,
                       figure_variant=which,
                       delay_s={n: f.delay_s for n, f in zip(names, fams, strict=True)},
                       stable=stable, worst=worst, settling_time_s=settle)
