"""Time grids for the step and ramp responses: the mode amplitudes of T, the horizon
(every mode's envelope below a fraction of the band), and the fine grid of uniform
segments placed from the closed-loop poles.
"""

from __future__ import annotations

import math
import weakref

import numpy as np
from numpy.typing import NDArray

from ..lti import FloatArray, Zpk

#: Samples of the fine grid for rational loops (exact at every sample): at least this many,
#: more when a significant mode needs them (``|p|·h ≤ RATIONAL_STEP_PER_RAD``), at most the cap.
RATIONAL_STEPS = 100_000
RATIONAL_MAX_STEPS = 1_000_000
RATIONAL_STEP_PER_RAD = 0.1


#: The horizon lasts until every mode's envelope is below this fraction of the band.
HORIZON_TAIL_FRACTION = 0.01


#: Consecutive uniform pieces of a time grid: (start s, end s, steps).
Segments = tuple[tuple[float, float, int], ...]


def _pade(delay_s: float, order: int) -> Zpk:
    """(order, order) Padé approximant of e^{−s·delay} (horizon estimate only)."""
    k = np.arange(order + 1)
    coef = np.array([math.factorial(2 * order - i) * math.factorial(order)
                     / (math.factorial(2 * order) * math.factorial(i)
                        * math.factorial(order - i)) for i in k]) * delay_s ** k
    num = (coef * (-1.0) ** k)[::-1]
    den = coef[::-1]
    return Zpk.from_tf(num, den)


# --------------------------------------------------------------------------- horizon
def _mode_amplitudes(t_ref: Zpk) -> tuple[NDArray[np.complex128], FloatArray]:
    """Poles of T and the magnitude of each pole's term in the step response.

    ``|Res[T(s)/s, p]|`` for simple poles; a pole repeated (or nearly) gets a conservative
    amplitude instead of the meaningless simple-pole formula.  Kept per ``t_ref`` object:
    the horizon and every grid size ask for it.
    """
    try:
        return _AMPLITUDES[t_ref]
    except KeyError:
        pass
    out = _compute_mode_amplitudes(t_ref)
    out[1].setflags(write=False)
    _AMPLITUDES[t_ref] = out
    return out


_AMPLITUDES: weakref.WeakKeyDictionary[Zpk, tuple[NDArray[np.complex128], FloatArray]] = (
    weakref.WeakKeyDictionary())


def _compute_mode_amplitudes(t_ref: Zpk) -> tuple[NDArray[np.complex128], FloatArray]:
    poles, zeros = t_ref.poles, t_ref.zeros
    amp = np.empty(poles.size)
    for i, p in enumerate(poles):
        others = np.delete(poles, i)
        gap = np.abs(p - others)
        if p == 0 or (gap.size and gap.min() < 1e-6 * max(abs(p), 1e-12)):
            amp[i] = 1e3
            continue
        val = t_ref.gain * np.prod(p - zeros) / (p * np.prod(p - others))
        amp[i] = abs(val) if np.isfinite(val) else 1e3
    return poles, amp


def _ramp_error_steady(t_ref: Zpk) -> float | None:
    """``lim (t − y)`` for r = t when it is finite and non-zero: ``−T'(0)`` with T(0) = 1."""
    if np.any(t_ref.zeros == 0) or np.any(t_ref.poles == 0):
        return None
    t0 = t_ref.gain * np.prod(-t_ref.zeros) / np.prod(-t_ref.poles)
    if abs(t0 - 1.0) > 1e-9:
        return None
    e_ss = float(np.real(np.sum(1.0 / t_ref.zeros) - np.sum(1.0 / t_ref.poles)))
    return e_ss if e_ss != 0.0 and math.isfinite(e_ss) else None


def _horizon(poles: NDArray[np.complex128], amp: FloatArray, final: float,
             band: float, ramp_steady: float | None) -> float:
    """Time until every stable mode's envelope is below a small fraction of the band.

    The step terms ``Res[T/s, p] e^{pt}`` are compared with ``band·|y∞|``; when the ramp
    error has a finite non-zero steady state, its terms (the step residues over ``|p|``)
    are compared with ``band·|e∞|`` as well, so ``ramp_error_final`` is settled too.
    """
    scales = [(amp, HORIZON_TAIL_FRACTION * band * abs(final))]
    if ramp_steady is not None:
        scales.append((amp / np.maximum(np.abs(poles), 1e-300),
                       HORIZON_TAIL_FRACTION * band * abs(ramp_steady)))
    horizon = 0.0
    for amplitudes, floor in scales:
        for p, a in zip(poles, amplitudes, strict=True):
            sigma = -p.real
            if sigma <= 0 or a <= floor:
                continue
            horizon = max(horizon, math.log(min(a / floor, 1e8)) / sigma)
    if horizon == 0.0:
        stable = -poles.real[poles.real < 0]
        horizon = 10.0 / stable.min() if stable.size else 1.0
    return horizon


def grid_steps(t_ref: Zpk, horizon_s: float, final: float, band: float) -> int:
    """Fine-grid size for a rational loop: every significant mode sampled densely.

    A mode counts when its step-response term exceeds the horizon floor; the grid then
    resolves its oscillation or decay (``|p|·h ≤ 0.1``) so that the first crossing and the
    largest peak are bracketed by neighbouring samples before they are refined.
    """
    poles, amp = _mode_amplitudes(t_ref)
    floor = HORIZON_TAIL_FRACTION * band * abs(final)
    fast = max((abs(p) for p, a in zip(poles, amp, strict=True) if a > floor), default=0.0)
    need = math.ceil(horizon_s * fast / RATIONAL_STEP_PER_RAD)
    return int(min(max(RATIONAL_STEPS, need), RATIONAL_MAX_STEPS))


def grid_segments(t_ref: Zpk, horizon_s: float, final: float, band: float) -> Segments:
    """The rational step grid: uniform segments, each as fine as the modes alive in it.

    A significant mode (as in :func:`grid_steps`) needs ``|p|·h ≤ 0.1`` only while its
    term ``a·e^{Re p·t}`` is above a tenth of the horizon floor; after that the spacing
    follows the slower modes still alive.  The spacing never exceeds
    ``horizon/RATIONAL_STEPS`` (so the grid has at least that many samples) and never
    falls below ``horizon/RATIONAL_MAX_STEPS``.  Where a fast mode is significant only at
    the start of a long horizon this takes a fraction of the samples of one uniform grid
    fine enough for it everywhere, and resolves every mode where it matters just as well.
    """
    poles, amp = _mode_amplitudes(t_ref)
    floor = HORIZON_TAIL_FRACTION * band * abs(final)
    coarsest = horizon_s / RATIONAL_STEPS
    finest = horizon_s / RATIONAL_MAX_STEPS
    modes = []                                       # (spacing it needs, until when)
    for p, a in zip(poles, amp, strict=True):
        if a > floor and abs(p) > 0:
            sigma = -p.real
            until = (math.log(10.0 * a / floor) / sigma) if sigma > 0 else math.inf
            modes.append((RATIONAL_STEP_PER_RAD / abs(p), until))
    cuts = sorted({0.0, horizon_s, *(u for _, u in modes if 0.0 < u < horizon_s)})
    segments: list[tuple[float, float, int]] = []
    last_h = None
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        h = min([coarsest, *(need for need, until in modes if until > a)])
        h = max(h, finest)
        if segments and h == last_h:
            a = segments.pop()[0]                    # same spacing: extend the segment
        segments.append((a, b, max(1, math.ceil((b - a) / h - 1e-9))))
        last_h = h
    return tuple(segments)


def segment_times(segments: Segments) -> FloatArray:
    """Sample instants of consecutive uniform segments (shared ends once)."""
    parts = [np.linspace(a, b, n + 1) if i == 0 else np.linspace(a, b, n + 1)[1:]
             for i, (a, b, n) in enumerate(segments)]
    return np.concatenate(parts) if len(parts) > 1 else parts[0]
