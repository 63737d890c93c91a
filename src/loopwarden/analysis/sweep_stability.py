"""Closed-loop stability of every sample at once.

The argument principle on the shared grid (Z = P + m/2 − Δ/π), long steps refined exactly,
the certified count where the grid cannot decide (split from :mod:`.sweep_response`).
"""

from __future__ import annotations

import math

import numpy as np

from ..lti import FloatArray, Loop, Zpk
from .frequency_grid import AXIS_RTOL
from .sweep_models import SampleLoops
from .sweep_peaks import _complex
from .sweep_response import (
    _dc_coefficient,
    _origin_counts,
    _point_values,
    _relative_degree,
)


# --------------------------------------------------------------------------- stability
def _open_loop_rhp(fam: SampleLoops) -> np.ndarray:
    fixed = int(np.sum(fam.fixed.poles.real > 0))
    return fixed + np.sum(fam.poles.real > 0, axis=1)

#: A grid step of 1 + L is accepted for the count when |ΔF| ≤ this · min|F| at its ends.
_STEP_RTOL = 0.5
#: A long step is cut into this many parts, at most this many times over.
_SUBSTEPS = 16
_MAX_DEPTH = 3


def _axis_poles(fam: SampleLoops) -> np.ndarray:
    """Rows with an open-loop pole on the imaginary axis away from 0 (count not taken)."""
    p = fam.poles
    on = (np.abs(p.real) <= AXIS_RTOL * np.abs(p)) & (p != 0)
    fixed = fam.fixed.poles
    fixed_on = bool(np.any((np.abs(fixed.real) <= AXIS_RTOL * np.abs(fixed)) & (fixed != 0)))
    return on.any(axis=1) | fixed_on


def _wrap(x: FloatArray) -> FloatArray:
    return x - 2.0 * math.pi * np.round(x / (2.0 * math.pi))


def _steps_ok(F: np.ndarray) -> np.ndarray:
    """Per step of the sequences ``F`` (last axis): short against the distance from 0."""
    mag = np.abs(F)
    return np.abs(np.diff(F, axis=-1)) <= _STEP_RTOL * np.minimum(mag[..., 1:], mag[..., :-1])


def _refined_turn(fam: SampleLoops, rows: np.ndarray, ua: FloatArray, ub: FloatArray,
                  fa: np.ndarray, fb: np.ndarray, depth: int = 0
                  ) -> tuple[FloatArray, np.ndarray]:
    """Change of ``arg(1 + L)`` over each step ``[ua, ub]`` (ln ω) of row ``rows``.

    The step is cut into :data:`_SUBSTEPS` parts evaluated exactly; parts still too long
    are cut again, up to :data:`_MAX_DEPTH` times.  Returns the turn per step and whether
    every part was short enough (else the row's count is left to the certified method).
    """
    t = np.linspace(0.0, 1.0, _SUBSTEPS + 1)[1:-1]
    u = ua[:, None] + (ub - ua)[:, None] * t[None, :]
    lm, ph = _point_values(fam, np.repeat(rows, t.size).reshape(u.shape), np.exp(u))
    seq = np.concatenate([fa[:, None], 1.0 + _complex(lm, ph), fb[:, None]], axis=1)
    turn = _wrap(np.diff(np.angle(seq), axis=1))
    good = _steps_ok(seq)
    ok = np.ones(rows.size, dtype=bool)
    if not good.all():
        if depth >= _MAX_DEPTH:
            ok = good.all(axis=1)
        else:
            r, j = np.nonzero(~good)
            uu = np.concatenate([ua[:, None], u, ub[:, None]], axis=1)
            sub, sub_ok = _refined_turn(fam, rows[r], uu[r, j], uu[r, j + 1], seq[r, j],
                                        seq[r, j + 1], depth + 1)
            turn[r, j] = sub
            np.logical_and.at(ok, r, sub_ok)
    return turn.sum(axis=1), ok


def _stability(fam: SampleLoops, w: FloatArray, re: FloatArray,
               im: FloatArray) -> tuple[np.ndarray, np.ndarray]:
    """(stable, decided by the certified per-loop count) per row."""
    fr = 1.0 + re
    mag = np.sqrt(fr * fr + im * im)
    # The turn of each step is the angle of F_{j+1}·conj(F_j), in (−π, π] already.
    a0, b0, a1, b1 = fr[:, :-1], im[:, :-1], fr[:, 1:], im[:, 1:]
    turn = np.arctan2(b1 * a0 - a1 * b0, a1 * a0 + b1 * b0)
    arg = np.stack([np.arctan2(im[:, 0], fr[:, 0]), np.arctan2(im[:, -1], fr[:, -1])],
                   axis=1)
    dr, di = np.diff(fr, axis=1), np.diff(im, axis=1)
    step = np.sqrt(dr * dr + di * di)
    r, j = np.nonzero(~(step <= _STEP_RTOL * np.minimum(mag[:, 1:], mag[:, :-1])))
    u = np.log(w)
    smooth = np.ones(fam.size, dtype=bool)
    lv_end = re[:, -1] + 1j * im[:, -1]
    if r.size:
        sub, sub_ok = _refined_turn(fam, r, u[j], u[j + 1], fr[r, j] + 1j * im[r, j],
                                    fr[r, j + 1] + 1j * im[r, j + 1])
        turn[r, j] = sub
        np.logical_and.at(smooth, r, sub_ok)
    delta = turn.sum(axis=1)
    m = _origin_counts(fam)
    c0 = _dc_coefficient(fam)
    # arg(1 + L) at ω = 0+.
    arg0 = np.where(m > 0, np.where(c0 < 0, math.pi, 0.0) - m * math.pi / 2.0,
                    np.where((m == 0) & (1.0 + c0 < 0), math.pi, 0.0))
    ok = smooth & ~_axis_poles(fam) & ((m != 0) | (1.0 + c0 != 0)) & (mag[:, 0] > 0.1)
    rd = _relative_degree(fam)
    if rd > 0:
        arg_inf = np.zeros(fam.size)
        ok &= np.abs(lv_end) < 0.5
    else:
        k = fam.fixed.gain * fam.gain
        arg_inf = np.where(1.0 + k < 0, math.pi, 0.0)
        ok &= (fam.delay_s == 0) & (np.abs(1.0 + k) > 0.1) & (np.abs(lv_end - k) <
                                                              0.1 * np.abs(1.0 + k))
    delta = delta + _wrap(arg[:, 0] - arg0) + _wrap(arg_inf - arg[:, -1])
    z = _open_loop_rhp(fam) + np.maximum(m, 0) / 2.0 - delta / math.pi
    ok &= np.abs(z - np.round(z)) < 0.05
    stable = ok & (np.round(z) == 0)
    for i in np.flatnonzero(~ok):
        stable[i] = _certified_stable(fam, int(i))
    return stable, ~ok


def _certified_stable(fam: SampleLoops, i: int) -> bool:
    from .stability import closed_loop_stability

    plant = Zpk(fam.zeros[i], fam.poles[i], float(fam.gain[i]))
    loop = Loop(plant=plant, controller=fam.fixed, sensor=Zpk.constant(1.0),
                delay_s=float(fam.delay_s[i]), stages=(fam.fixed,))
    return bool(closed_loop_stability(loop, find_roots=False).closed_loop_stable)
