"""Slow closed-loop pole–zero pairs and the tail they leave in the step response.

A lag network puts a closed-loop pole close to its own zero, well below crossover.  The pair
nearly cancels, so the pole's term in the step response is small, but it decays slowly: the
response reaches the neighbourhood of its final value quickly and then creeps the rest of
the way.  Whether the creep matters depends on its size against the settling band.

With ``T(s)`` the reference-to-output transfer function, the step response is
``y(t) = y∞ + Σ r_i e^{p_i t}`` with ``r_i = Res[T(s)/s, p_i]``, and the ramp error
``e(t) = t − y(t)`` for r = t carries ``Res[(1 − T(s))/s², p_i] = −r_i/p_i``.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import AnalysisError
from ..lti import FloatArray, Loop, Zpk
from .closed_loop import reference_to_output
from .modal import ModalForm
from .results import SlowPair, SlowTail, StepResult
from .time_response import RationalResponse, Segments, grid_segments, settling_time

__all__ = ["CRITERIA", "NEAR_RATIO", "SLOW_RATIO", "find_pairs", "slow_tail", "step_residue"]

#: A pole is nearly cancelled when a zero lies within this fraction of |p| from it.
NEAR_RATIO = 0.3
#: A nearly cancelled pole is slow when |Re p| is below the dominant |p| over this.
SLOW_RATIO = 3.0

CRITERIA = (
    f"slow pair: a stable closed-loop pole p with a closed-loop zero z at |p − z| ≤ "
    f"{NEAR_RATIO}·|p| (nearly cancelled), and |Re p| < ω_dom/{SLOW_RATIO:g}, where ω_dom "
    f"is the smallest |p| among the stable closed-loop poles that have no such zero (the "
    f"dominant dynamics); each zero pairs with one pole, nearest first. Residue = "
    f"Res[T(s)/s, p] for a real pole, 2·|Res| (the envelope amplitude) for a complex pair. "
    f"Tail time = ln(|residue|/(band·|y∞|))/|Re p| (0 when |residue| < band·|y∞|). Ramp "
    f"tail: residue −Res/p of (1 − T(s))/s² against band·|e∞| (e∞ the steady ramp error; "
    f"when it is zero or unbounded, the largest simulated ramp error instead)."
)


def step_residue(t_ref: Zpk, pole: complex) -> complex:
    """``Res[T(s)/s, p]`` at a simple pole p ≠ 0 of ``T`` (zpk product formula).

    Raises
    ------
    AnalysisError
        When the pole is repeated (the simple-pole formula does not apply).
    """
    others = np.delete(t_ref.poles, int(np.argmin(np.abs(t_ref.poles - pole))))
    gaps = np.abs(pole - others)
    if pole == 0 or (gaps.size and gaps.min() <= 1e-9 * abs(pole)):
        raise AnalysisError(f"closed-loop pole {pole:.6g} is repeated: residue undefined")
    val = t_ref.gain * np.prod(pole - t_ref.zeros) / (pole * np.prod(pole - others))
    return complex(val)


def find_pairs(t_ref: Zpk) -> list[tuple[complex, complex]]:
    """(pole, zero) pairs of ``T`` meeting the criteria in :data:`CRITERIA`.

    Complex pairs are listed once, by the member with positive imaginary part.
    """
    poles = [p for p in t_ref.poles if p.real < 0 and p.imag >= 0]
    zeros = list(t_ref.zeros)
    near: dict[int, list[tuple[float, int]]] = {}
    for i, p in enumerate(poles):
        cands = [(abs(p - z), j) for j, z in enumerate(zeros)
                 if abs(p - z) <= NEAR_RATIO * abs(p) and (z.imag >= 0 or p.imag == 0)]
        if cands:
            near[i] = sorted(cands)
    free = [abs(p) for i, p in enumerate(poles) if i not in near]
    omega_dom = min(free) if free else max((abs(p) for p in poles), default=0.0)
    slow = {i for i in near if -poles[i].real < omega_dom / SLOW_RATIO}
    # Greedy matching, closest pole–zero distances first, each zero used once.
    edges = sorted((d, i, j) for i in slow for d, j in near[i])
    used_p: set[int] = set()
    used_z: set[int] = set()
    pairs: list[tuple[complex, complex]] = []
    for _, i, j in edges:
        if i in used_p or j in used_z:
            continue
        used_p.add(i)
        used_z.add(j)
        pairs.append((complex(poles[i]), complex(zeros[j])))
    pairs.sort(key=lambda pz: -pz[0].real)
    return pairs


def _amplitude(res: complex, pole: complex) -> float:
    """Signed residue for a real pole, ``2|res|`` for a complex pair."""
    return float(res.real) if pole.imag == 0 else 2.0 * abs(res)


def _tail_time(amplitude: float, sigma: float, tol: float) -> float:
    if tol <= 0:
        return math.inf if amplitude != 0 else 0.0
    if abs(amplitude) < tol:
        return 0.0
    return math.log(abs(amplitude) / tol) / sigma


def _terms(t: FloatArray, pairs: list[tuple[complex, complex]],
           residues: list[complex]) -> FloatArray:
    total = np.zeros_like(t)
    for (p, _), r in zip(pairs, residues, strict=True):
        term = r * np.exp(p * t)
        total += term.real if p.imag == 0 else 2.0 * term.real
    return total


def _terms_on_grid(segments: Segments, pairs: list[tuple[complex, complex]],
                   residues: list[complex]) -> FloatArray:
    """:func:`_terms` on the step grid's segments, by the block products of the modal form."""
    poles = np.array([p for p, _ in pairs], dtype=complex)
    weights = np.array([r if p.imag == 0 else 2.0 * r
                        for (p, _), r in zip(pairs, residues, strict=True)], dtype=complex)
    return ModalForm(poles, weights, np.zeros_like(weights)).on_segments(segments, ramp=False)[0]


def slow_tail(loop: Loop, step: StepResult, band: float) -> SlowTail:
    """Slow closed-loop pole–zero pairs, their residues and how long their tails last.

    Parameters
    ----------
    loop : Loop
        A closed-loop stable loop without transport delay.
    step : StepResult
        Its step response (:func:`.time_response.step_response`), for ``y∞``, the
        settling time and the horizon.
    band : float
        Settling band as a fraction of ``|y∞|``.

    Returns
    -------
    SlowTail
        One :class:`SlowPair` per pair (pole, zero in rad/s; time constant ``1/|Re p|`` s;
        tail times in s), the settling time as simulated, and the settling time of
        ``y(t) − Σ r_i e^{p_i t}`` (the response with the pairs' terms removed), computed
        exactly on the same horizon.  :data:`CRITERIA` is copied into ``criteria``.

    Raises
    ------
    AnalysisError
        For a loop with a delay (no finite set of closed-loop poles), or a repeated slow
        pole.
    """
    if loop.has_delay:
        raise AnalysisError("closed-loop poles and residues are not computed for loops "
                            "with a transport delay")
    t_ref = reference_to_output(loop)
    final = step.metrics.final_value
    pairs = find_pairs(t_ref)
    residues = [step_residue(t_ref, p) for p, _ in pairs]
    ramp_scale = _ramp_scale(step)
    tol = band * abs(final)

    out: list[SlowPair] = []
    for (p, z), r in zip(pairs, residues, strict=True):
        sigma = -p.real
        amp = _amplitude(r, p)
        ramp_amp = _amplitude(-r / p, p)
        out.append(SlowPair(
            pole=p, zero=z, residue=amp, time_constant_s=1.0 / sigma,
            tail_time_s=_tail_time(amp, sigma, tol),
            ramp_residue=ramp_amp,
            ramp_tail_time_s=_tail_time(ramp_amp, sigma, band * ramp_scale),
        ))

    settling = step.metrics.settling_time_s
    without = settling
    if pairs:
        resp = RationalResponse.of_loop(loop)
        horizon = step.metrics.horizon_s
        segments = grid_segments(t_ref, horizon, final, band)
        t, y, _ = resp.on_segments(segments)
        reduced = y - _terms_on_grid(segments, pairs, residues)

        def exact(s: float) -> float:
            arr = np.array([s])
            return (resp.step_at(s) - float(_terms(arr, pairs, residues)[0])) / final

        without = settling_time(t, reduced / final, 1.0, band, exact)
    return SlowTail(pairs=tuple(out), settling_time_s=settling,
                    settling_time_without_tail_s=without, criteria=CRITERIA)


def _ramp_scale(step: StepResult) -> float:
    """Reference size of the ramp error: its steady value, else its largest value."""
    e = step.ramp_error.value
    if e.size == 0:
        return 0.0
    tail = e[e.size * 9 // 10:]
    steady = float(e[-1])
    # A steady value needs the last tenth of the horizon to be flat.
    if steady != 0.0 and np.ptp(tail) <= 1e-3 * abs(steady):
        return abs(steady)
    return float(np.max(np.abs(e)))

