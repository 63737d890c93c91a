"""Margins, peaks and closed-loop stability of many loops at once (one row per point).

One frequency grid serves the whole sample (:func:`sample_grid`); ``ln|L(jω)|`` and the
continuous phase of ``L(jω)`` are evaluated for every point on it by numpy broadcasting:
the fixed factor (controller and unmoved roots) once, the moving roots, gains and delays
per row.  Then, per row, only where needed:

* gain and phase crossings are located as sign changes on the grid and refined together
  by bracketed false position (Illinois) on the exact functions of that row;
* the largest grid value of ``|S|``, ``|T|`` and ``|S − 1/2|`` is refined by successive
  parabolic interpolation in ``ln ω`` between its grid neighbours; the limits at ω = 0
  and ∞ are exact;
* closed-loop stability is counted by the argument principle on the grid
  (``Z = P + m/2 − Δ/π``, Δ the change of ``arg(1 + L)`` from ω = 0+ to ∞, m the net
  poles at the origin, P the open-loop right-half-plane poles).  The count is accepted only
  when every grid step of ``1 + L`` is short against its distance from 0 (as
  :mod:`.stability` demands of its contour; a long step is cut into parts evaluated
  exactly, three times over at most) and the ends are clear; any other row is decided by
  :func:`.stability.closed_loop_stability` on that row's loop.

Conventions (as :func:`.margins.compute_margins` and :mod:`.sensitivity`): phase margin
wrapped to (−180°, 180°], the crossing of smallest magnitude, sign kept; delay margin the
smallest ``(PM mod 360°)/ω``; upper gain margin the smallest ``−20·log10|L|`` over phase
crossings with ``|L| ≤ 1``; the lower one the largest over ``|L| > 1`` (NaN here when
there is none).  Phase crossings are sought only where ``|L| ≥ 1e−3`` on the grid: a
gain margin above 60 dB counts as infinite.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from ..lti import FloatArray, Zpk
from .frequency_grid import AXIS_RTOL, LIGHT_DAMPING, NEGLIGIBLE_GAIN
from .margins import bracketed_roots, wrap_phase_margin_deg
from .sweep_models import SampleLoops

__all__ = ["FIGURES", "SampleFigures", "evaluate_loops", "sample_grid"]

#: The figures computed for every point (names as in the JSON ``uncertainty.worst``).
FIGURES = ("phase_margin_deg", "gain_margin_db", "gain_margin_lower_db", "delay_margin_s",
           "peak_sensitivity", "peak_complementary", "disk_margin")
POINTS_PER_DECADE = 30
#: Uniform spacing of a delay's phase on the grid, rad (ω·T step).
_DELAY_STEP_RAD = 0.25
_MAX_GRID = 6000
_XTOL = 1e-10
_PARABOLA_STEPS = 6
_MAX_FALSE_POSITION = 60


@dataclass(frozen=True, eq=False)
class SampleFigures:
    """Per-point figures (arrays of one length); NaN where a figure does not exist."""

    phase_margin_deg: FloatArray
    gain_margin_db: FloatArray
    gain_margin_lower_db: FloatArray
    delay_margin_s: FloatArray
    peak_sensitivity: FloatArray
    peak_complementary: FloatArray
    disk_margin: FloatArray
    stable: np.ndarray                 # bool: every closed-loop root in Re s < 0
    certified_count: np.ndarray        # bool: decided by the certified per-loop count

    @staticmethod
    def concat(parts: list[SampleFigures]) -> SampleFigures:
        return SampleFigures(**{f.name: np.concatenate([getattr(p, f.name) for p in parts])
                                for f in fields(SampleFigures)})

    def figure(self, name: str) -> FloatArray:
        return np.asarray(getattr(self, name))


# --------------------------------------------------------------------------- the grid
def _nonzero_mags(loops: SampleLoops) -> FloatArray:
    roots = np.concatenate([loops.zeros.ravel(), loops.poles.ravel(),
                            loops.fixed.zeros, loops.fixed.poles])
    mags = np.abs(roots)
    return mags[mags > 0]


def sample_grid(families: list[SampleLoops],
                points_per_decade: int = POINTS_PER_DECADE) -> FloatArray:
    """One grid (rad/s, ascending) for every loop of every family.

    Log-spaced from 30 times below the slowest nonzero root (or asymptotic crossover)
    to where every loop's ``|L|`` has fallen below 1e−3 beyond all its roots; dense
    clusters over the range swept by each lightly damped root; uniform points with
    ``Δω·T = 0.25`` for the longest delay up to the highest gain crossover's region.
    """
    lows, highs, clusters = [], [], []
    loud = 0.0                      # beyond it every |L| < 1e−3 (asymptotically)
    t_max = 0.0
    for fam in families:
        mags = _nonzero_mags(fam)
        if mags.size:
            lows.append(float(mags.min()))
            highs.append(float(mags.max()))
        rd = fam.fixed.relative_degree + fam.poles.shape[1] - fam.zeros.shape[1]
        k = np.abs(fam.fixed.gain * fam.gain)
        if rd > 0:
            # |L| ≈ |k|·ω^(−rd) beyond the roots: where it reaches 1e−3, with room.
            highs.append(float(np.max((k / NEGLIGIBLE_GAIN) ** (1.0 / rd))) * 2.0)
            lows.append(float(np.min(k ** (1.0 / rd))))
            loud = max(loud, highs[-1], 2.0 * float(mags.max()) if mags.size else 0.0)
        t_max = max(t_max, float(np.max(fam.delay_s)) if fam.size else 0.0)
        clusters += _cluster_points(fam)
    lo = min(lows, default=1.0) / 30.0
    hi = max(highs, default=1.0) * 100.0
    n = int(math.ceil(points_per_decade * math.log10(hi / lo))) + 1
    parts = [np.logspace(math.log10(lo), math.log10(hi), n), *clusters]
    if t_max > 0:
        step = _DELAY_STEP_RAD / t_max
        end = min(loud or hi, hi, step * _MAX_GRID / 2)
        parts.append(np.arange(1, int(end / step) + 1) * step)
    w = np.unique(np.concatenate(parts))
    w = w[(w >= lo) & (w <= hi)]
    axis = _axis_frequencies(families)
    return w[~np.isin(w, axis)] if axis.size else w


def _cluster_points(fam: SampleLoops) -> list[FloatArray]:
    out = []
    fixed = np.concatenate([fam.fixed.zeros, fam.fixed.poles])
    for r in np.unique(fixed[fixed.imag > 0]):
        sigma = abs(r.real)
        if AXIS_RTOL * abs(r) < sigma < LIGHT_DAMPING * abs(r):
            out.append(r.imag + sigma * np.linspace(-8.0, 8.0, 161))
    moving = np.concatenate([fam.zeros, fam.poles], axis=1)
    for j in range(moving.shape[1]):
        col = moving[:, j]
        up = col[col.imag > 0]
        if up.size == 0:
            continue
        sig = np.abs(up.real)
        light = sig < LIGHT_DAMPING * np.abs(up)
        if not light.any():
            continue
        up, sig = up[light], np.maximum(sig[light], 1e-12)
        a = float(np.min(up.imag - 8.0 * sig))
        b = float(np.max(up.imag + 8.0 * sig))
        step = float(np.min(sig)) / 4.0
        count = min(int((b - a) / step) + 1, 600)
        out.append(np.linspace(max(a, 1e-300), b, count))
    return out


def _axis_frequencies(families: list[SampleLoops]) -> FloatArray:
    roots = np.concatenate([np.concatenate([f.fixed.zeros, f.fixed.poles]) for f in families])
    on = (np.abs(roots.real) <= AXIS_RTOL * np.abs(roots)) & (roots.imag > 0)
    return np.unique(roots[on].imag)


# --------------------------------------------------------------------------- evaluation
def _angle(w: FloatArray, r: np.ndarray) -> FloatArray:
    """Continuous angle of (jω − r), broadcast (branch as :func:`.frequency_grid.phase`).

    Both branches are ``atan((ω − Im r)/|Re r|)``, taken from π for a right-half-plane
    root: one arctangent per element.
    """
    t = np.arctan2(w - r.imag, np.abs(r.real))
    return np.where(r.real > 0, math.pi - t, t)


def _log_abs(w: FloatArray, r: np.ndarray) -> FloatArray:
    with np.errstate(divide="ignore"):
        return 0.5 * np.log(r.real ** 2 + (w - r.imag) ** 2)


def _moving(fam: SampleLoops, rows: np.ndarray, w: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``ln|·|`` and phase of the moving part at ``w`` (shape broadcast with rows)."""
    g = fam.gain[rows]
    lm = np.log(np.abs(g)) + np.zeros_like(w)
    ph = np.where(g < 0, -math.pi, 0.0) - w * fam.delay_s[rows]
    for roots, pairs, sign in ((fam.zeros, fam.zero_pairs, 1.0),
                               (fam.poles, fam.pole_pairs, -1.0)):
        singles = sorted(set(range(roots.shape[1])) - set(pairs)
                         - {j + 1 for j in pairs})
        for j in pairs:
            dl, da = _pair_terms(w, roots[rows, j])
            lm = lm + sign * dl
            ph = ph + sign * da
        for j in singles:
            r = roots[rows, j]
            lm = lm + sign * _log_abs(w, r)
            ph = ph + sign * _angle(w, r)
    return lm, ph


def _pair_terms(w: FloatArray, r: np.ndarray) -> tuple[FloatArray, FloatArray]:
    """``ln|·|`` and continuous angle of ``(jω − r)(jω − r̄)`` (r off the real axis).

    The product is ``|r|² − ω² − 2·Re(r)·ω·j``: for Re r < 0 its angle runs from 0 to π
    through atan2 without a jump; for Re r > 0 from 2π down to π (the branches of
    :func:`_angle` summed over the pair).
    """
    a = r.real
    m2 = a * a + r.imag * r.imag
    re = m2 - w * w
    # −2·Re(r)·ω, with +0 (not −0) on the axis so that the angle above |r| is +π.
    im = 2.0 * np.abs(a) * np.where(a > 0, -1.0, 1.0) * w
    with np.errstate(divide="ignore"):
        lm = 0.5 * np.log(re * re + im * im)
    return lm, np.arctan2(im, re) + np.where(a > 0, 2.0 * math.pi, 0.0)


def _fixed_values(z: Zpk, w: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``ln|G(jω)|`` and continuous phase of the fixed factor at ``w`` (any shape).

    The same branches as :func:`.frequency_grid.phase`; a conjugate pair as one factor.
    """
    lm = np.full(w.shape, math.log(abs(z.gain)))
    ph = np.full(w.shape, -math.pi if z.gain < 0 else 0.0)
    for roots, sign in ((z.zeros, 1.0), (z.poles, -1.0)):
        for r in roots[roots.imag > 0]:
            dl, da = _pair_terms(w, np.asarray(r))
            lm, ph = lm + sign * dl, ph + sign * da
        for r in roots[roots.imag == 0]:
            r = np.asarray(r)
            lm, ph = lm + sign * _log_abs(w, r), ph + sign * _angle(w, r)
    return lm, ph


def _grid_values(fam: SampleLoops, w: FloatArray) -> tuple[FloatArray, FloatArray]:
    rows = np.arange(fam.size)[:, None]
    lm, ph = _moving(fam, rows, w[None, :])
    flm, fph = _fixed_values(fam.fixed, w)
    return lm + flm[None, :], ph + fph[None, :]


def _point_values(fam: SampleLoops, rows: np.ndarray,
                  w: FloatArray) -> tuple[FloatArray, FloatArray]:
    lm, ph = _moving(fam, rows, w)
    flm, fph = _fixed_values(fam.fixed, w)
    return lm + flm, ph + fph


def _brackets(fn, a: FloatArray, b: FloatArray) -> FloatArray:  # type: ignore[no-untyped-def]
    """Roots of ``fn(u, i)`` in every grid bracket: the margins' solver, Illinois false
    position from the first step (grid steps are short: no bisections first)."""
    return bracketed_roots(fn, a.astype(float), b.astype(float), _XTOL, bisections=0,
                           max_iter=_MAX_FALSE_POSITION)


def _group_reduce(rows: np.ndarray, values: FloatArray, n: int, how: str) -> FloatArray:
    out = np.full(n, np.nan)
    if rows.size == 0:
        return out
    order = np.lexsort((values, rows)) if how == "min" else np.lexsort((-values, rows))
    r = rows[order]
    first = np.r_[True, r[1:] != r[:-1]]
    out[r[first]] = values[order][first]
    return out


def _margins(fam: SampleLoops, w: FloatArray, lm: FloatArray,
             ph: FloatArray) -> dict[str, FloatArray]:
    n = fam.size
    u = np.log(w)
    # Gain crossings: sign changes of ln|L|.
    above = lm > 0
    r_g, j_g = np.nonzero(above[:, :-1] != above[:, 1:])

    def f_gain(x: FloatArray, i: np.ndarray) -> FloatArray:
        return _point_values(fam, r_g[i], np.exp(x))[0]

    u_gc = _brackets(f_gain, u[j_g], u[j_g + 1])
    w_gc = np.exp(u_gc)
    ph_gc = _point_values(fam, r_g, w_gc)[1]
    pm = wrap_phase_margin_deg(np.degrees(ph_gc))
    dm = np.radians(np.mod(pm, 360.0)) / w_gc
    order = np.lexsort((np.abs(pm), r_g))
    first = np.r_[True, r_g[order][1:] != r_g[order][:-1]] if order.size else order
    pm_out = np.full(n, math.inf)
    pm_out[r_g[order][first]] = pm[order][first]
    dm_out = np.nan_to_num(_group_reduce(r_g, dm, n, "min"), nan=math.inf)

    # Phase crossings through −π + 2πk, where |L| ≥ 1e−3 at an end of the step.
    g = (ph + math.pi) / (2.0 * math.pi)
    lo = np.minimum(g[:, :-1], g[:, 1:])
    hi = np.maximum(g[:, :-1], g[:, 1:])
    first_k = np.floor(lo) + 1.0
    count = np.floor(hi) - first_k + 1.0
    loud = np.maximum(lm[:, :-1], lm[:, 1:]) >= math.log(NEGLIGIBLE_GAIN)
    count = np.where(loud, np.maximum(count, 0.0), 0.0).astype(int)
    r_s, j_s = np.nonzero(count)
    reps = count[r_s, j_s]
    r_p = np.repeat(r_s, reps)
    j_p = np.repeat(j_s, reps)
    offs = np.arange(r_p.size) - np.repeat(np.cumsum(reps) - reps, reps)
    target = first_k[r_p, j_p] + offs

    def f_phase(x: FloatArray, i: np.ndarray) -> FloatArray:
        return (_point_values(fam, r_p[i], np.exp(x))[1] + math.pi) / (2.0 * math.pi) \
            - target[i]

    u_pc = _brackets(f_phase, u[j_p], u[j_p + 1])
    mag_log = _point_values(fam, r_p, np.exp(u_pc))[0]
    rows_extra, mags_extra = _endpoint_crossings(fam)
    r_all = np.concatenate([r_p, rows_extra])
    ml_all = np.concatenate([mag_log, mags_extra])
    gm_db = -20.0 * ml_all / math.log(10.0)
    upper = ml_all <= 0.0
    gm = np.nan_to_num(_group_reduce(r_all[upper], gm_db[upper], n, "min"), nan=math.inf)
    gm_low = _group_reduce(r_all[~upper], gm_db[~upper], n, "max")
    return {"phase_margin_deg": pm_out, "delay_margin_s": dm_out, "gain_margin_db": gm,
            "gain_margin_lower_db": gm_low}


def _origin_counts(fam: SampleLoops) -> np.ndarray:
    """Net poles at s = 0 per row (poles minus zeros there)."""
    fixed = int(np.sum(fam.fixed.poles == 0) - np.sum(fam.fixed.zeros == 0))
    return fixed + np.sum(fam.poles == 0, axis=1) - np.sum(fam.zeros == 0, axis=1)


def _dc_coefficient(fam: SampleLoops) -> FloatArray:
    """``lim s^m L(s)`` as s → 0 per row (m the net origin poles), real."""
    fz = fam.fixed.zeros[fam.fixed.zeros != 0]
    fp = fam.fixed.poles[fam.fixed.poles != 0]
    c = fam.fixed.gain * np.prod(-fz) / np.prod(-fp) * fam.gain
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(fam.zeros == 0, -1.0, -fam.zeros)
        p = np.where(fam.poles == 0, -1.0, -fam.poles)
        return np.real(c * np.prod(z, axis=1) / np.prod(p, axis=1))


def _relative_degree(fam: SampleLoops) -> int:
    return fam.fixed.relative_degree + fam.poles.shape[1] - fam.zeros.shape[1]


def _endpoint_crossings(fam: SampleLoops) -> tuple[np.ndarray, FloatArray]:
    """Phase crossings at ω = 0 (type 0, L(0) < 0) and ω = ∞ (biproper): rows, ln|L|."""
    m = _origin_counts(fam)
    c0 = _dc_coefficient(fam)
    rows = np.flatnonzero((m == 0) & (c0 < 0))
    mags = np.log(np.abs(c0[rows]))
    if _relative_degree(fam) == 0:
        k = fam.fixed.gain * fam.gain
        inf_rows = np.flatnonzero((fam.delay_s > 0) | (k < 0))
        rows = np.concatenate([rows, inf_rows])
        mags = np.concatenate([mags, np.log(np.abs(k[inf_rows]))])
    return rows, mags


# --------------------------------------------------------------------------- entry point
def evaluate_loops(fam: SampleLoops, w: FloatArray) -> SampleFigures:
    """Every figure of :data:`FIGURES` and closed-loop stability for each row of ``fam``.

    ``w`` is the shared grid (:func:`sample_grid`), rad/s.
    """
    with np.errstate(over="ignore", under="ignore"):
        lm, ph = _grid_values(fam, w)
        mag = np.exp(lm)
        re, im = mag * np.cos(ph), mag * np.sin(ph)
        out = _margins(fam, w, lm, ph)
        out |= _peaks(fam, w, mag, re, im)
        stable, certified = _stability(fam, w, re, im)
    return SampleFigures(**out, stable=stable, certified_count=certified)


# The peak and stability parts read the grid helpers above (imported last: no cycle).
from .sweep_peaks import _complex, _peaks  # noqa: E402, F401
from .sweep_stability import _certified_stable, _stability  # noqa: E402, F401
