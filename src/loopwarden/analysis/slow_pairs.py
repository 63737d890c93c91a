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
from collections.abc import Callable

import numpy as np

from ..errors import AnalysisError
from ..lti import ComplexArray, FloatArray, Loop, Zpk
from ..lti_discrete import DiscreteLoop
from .closed_loop import reference_to_output
from .modal import ModalForm
from .results import SlowPair, SlowTail, StepResult
from .roots import CharFunction, char_function, z_char_function
from .time_response import RationalResponse, Segments, grid_segments, settling_time

__all__ = ["CRITERIA", "NEAR_RATIO", "SLOW_RATIO", "exact_residue", "find_pairs", "match_pairs",
           "slow_tail", "step_residue"]

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
    f"when it is zero or unbounded, the largest simulated ramp error instead). Residues "
    f"from the exact derivative of 1 + L at the certified closed-loop roots (delay "
    f"included); a delay loop's roots are those right of its search line."
)
SAMPLED_NOTE = (
    " Sampled loop: roots in z, the criteria applied to their images ln(z)/T; the term "
    "r·p^k of y[k] with r = Res[T(z)/(z − 1), p]; tail = k·T with k = ln(|r|/(band·|y∞|))"
    "/(−ln|p|) samples."
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
    return match_pairs(t_ref.poles, t_ref.zeros)


def match_pairs(poles: ComplexArray, zeros: ComplexArray, *,
                period_s: float | None = None) -> list[tuple[complex, complex]]:
    """(pole, zero) pairs among closed-loop ``poles`` and ``zeros`` (:data:`CRITERIA`).

    With ``period_s`` the roots are in z and the criteria apply to their s-plane images
    ``ln(z)/T`` (a zero at z = 0, a pure delay, has none); the pairs are returned in z.
    """
    to_s = _identity if period_s is None else _z_to_s(period_s)
    cand_p, s_poles, cand_z, s_zeros, near, omega_dom = _candidates(poles, zeros, period_s)
    slow = {i for i in near if -s_poles[i].real < omega_dom / SLOW_RATIO}
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
        pairs.append((complex(cand_p[i]), complex(cand_z[j])))
    pairs.sort(key=lambda pz: -to_s(pz[0]).real)
    return pairs


def _candidates(poles: ComplexArray, zeros: ComplexArray, period_s: float | None,
                ) -> tuple[list[complex], list[complex], list[complex], list[complex],
                           dict[int, list[tuple[float, int]]], float]:
    """Stable poles (upper half), zeros, their s-plane images, the zeros near each pole
    and ω_dom, the smallest |p| among the poles with no zero near them."""
    to_s = _identity if period_s is None else _z_to_s(period_s)
    cand_p = [complex(p) for p in poles if p.imag >= 0 and (period_s is None or p != 0)]
    s_poles = [to_s(p) for p in cand_p]
    keep = [i for i, sp in enumerate(s_poles) if sp.real < 0]
    cand_p = [cand_p[i] for i in keep]
    s_poles = [s_poles[i] for i in keep]
    cand_z = [complex(z) for z in zeros if period_s is None or z != 0]
    s_zeros = [to_s(z) for z in cand_z]
    near: dict[int, list[tuple[float, int]]] = {}
    for i, p in enumerate(s_poles):
        cands = [(abs(p - z), j) for j, z in enumerate(s_zeros)
                 if abs(p - z) <= NEAR_RATIO * abs(p) and (z.imag >= 0 or p.imag == 0)]
        if cands:
            near[i] = sorted(cands)
    free = [abs(p) for i, p in enumerate(s_poles) if i not in near]
    omega_dom = min(free) if free else max((abs(p) for p in s_poles), default=0.0)
    return cand_p, s_poles, cand_z, s_zeros, near, omega_dom


def slow_abscissa(poles: ComplexArray, zeros: ComplexArray, *,
                  period_s: float | None = None) -> float | None:
    """σ of the slow region ``Re s > −σ`` (:data:`CRITERIA`: σ = ω_dom/3), None when the
    loop has no stable root to measure ω_dom by."""
    *_, omega_dom = _candidates(poles, zeros, period_s)
    return omega_dom / SLOW_RATIO if omega_dom > 0 else None


def _identity(x: complex) -> complex:
    return complex(x)


def _z_to_s(period_s: float) -> Callable[[complex], complex]:
    def to_s(z: complex) -> complex:
        return complex(np.log(complex(z))) / period_s
    return to_s


def exact_residue(fn: CharFunction, feedback: Callable[[complex], complex],
                  pole: complex, *, period_s: float | None = None) -> complex:
    """Residue of a simple closed-loop root in the reference-step response.

    Continuous (delay included) [derived]: ``Res[T(s)/s, p] = 1/(p·H(p)·Φ(p))`` with
    ``T = C·P·e^{−sT}/(1 + L)``, ``L(p) = −1`` and ``Φ = L'/L`` the exact logarithmic
    derivative of L (``−T`` from the delay).  Sampled: the term ``r·p^k`` of y[k] has
    ``r = Res[T(z)/(z − 1), p] = 1/((p − 1)·H(p)·Φ(p))``.  ``feedback(p)`` is ``H(p)``: the
    ratio of the measured to the plant output's transfer at p.

    Raises
    ------
    AnalysisError
        When p is (numerically) a multiple root, so that the simple-pole formula does not
        apply, or sits on the point the step puts a pole at.
    """
    phi = complex(fn.log_derivative(np.array([pole]))[0])
    base = pole if period_s is None else pole - 1.0
    if base == 0:
        raise AnalysisError(f"closed-loop root {pole:.6g} coincides with the step's own pole")
    denom = base * feedback(pole) * phi
    scale = abs(base) * abs(feedback(pole)) * float(
        np.sum(1.0 / np.abs(pole - np.concatenate([fn.zeros, fn.poles])))) + 1e-300
    if not np.isfinite(denom) or abs(denom) <= 1e-9 * scale:
        raise AnalysisError(f"closed-loop root {pole:.6g} is repeated: residue undefined")
    return complex(1.0 / denom)


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


def slow_tail(loop: Loop | DiscreteLoop, step: StepResult, band: float, *,
              roots: ComplexArray | None = None) -> SlowTail:
    """Slow closed-loop pole–zero pairs, their residues and how long their tails last.

    Parameters
    ----------
    loop : Loop or DiscreteLoop
        A closed-loop stable loop: rational, with a transport delay, or sampled (in z).
    step : StepResult
        Its step response, for ``y∞``, the settling time and the horizon.
    band : float
        Settling band as a fraction of ``|y∞|``.
    roots : array, optional
        The certified closed-loop roots (``Stability.closed_loop_poles``: every root of
        a rational or sampled loop, the roots right of the search line of a delay loop);
        found here when not given.

    Returns
    -------
    SlowTail
        One :class:`SlowPair` per pair (pole, zero in rad/s, or in z for a sampled loop;
        time constant ``1/|Re p|`` s, or ``T/(−ln|p|)``; tail times in s, and in samples
        for a sampled loop), the settling time as simulated, and the settling time of the
        response with the pairs' terms removed.  :data:`CRITERIA` is copied into
        ``criteria``.

    Raises
    ------
    AnalysisError
        A repeated slow root (no simple residue), or roots that could not be found.
    """
    if isinstance(loop, DiscreteLoop):
        return _sampled_tail(loop, step, band, roots)
    if roots is None:
        roots = _continuous_roots(loop)
    fn = char_function(loop)
    sensor = loop.sensor
    zeros = np.concatenate([loop.reference_forward.zeros, sensor.poles])
    pairs = match_pairs(np.asarray(roots, dtype=complex), zeros)
    hidden = fn.hidden_modes()
    residues = [_residue(fn, loop, p, hidden) for p, _ in pairs]
    final = step.metrics.final_value
    out = [_pair(p, z, r, -p.real, band * abs(final), band * _ramp_scale(step), -r / p)
           for (p, z), r in zip(pairs, residues, strict=True)]
    settling = step.metrics.settling_time_s
    without = settling
    if pairs and not loop.has_delay:
        without = _rational_without(loop, step, band, pairs, residues)
    elif pairs:
        t, y = step.step.time_s, step.step.value
        reduced = y - _terms(t, pairs, residues)
        without = settling_time(t, reduced / final, 1.0, band)
    return SlowTail(pairs=tuple(out), settling_time_s=settling,
                    settling_time_without_tail_s=without, criteria=CRITERIA)


def _continuous_roots(loop: Loop) -> ComplexArray:
    from .stability import closed_loop_stability

    st = closed_loop_stability(loop)
    if not st.certified:
        raise AnalysisError("the closed-loop roots are not certified: " + st.note)
    return np.asarray(st.closed_loop_poles, dtype=complex)


def _residue(fn: CharFunction, loop: Loop, pole: complex, hidden: ComplexArray) -> complex:
    """Step residue of a closed-loop root; 0 for a mode cancelled inside C·P·H that the
    reference cannot excite (C·P has no pole left there)."""
    if hidden.size and np.min(np.abs(hidden - pole)) <= 1e-9 * max(abs(pole), 1e-300):
        fwd = loop.reference_forward
        tol = 1e-9 * max(abs(pole), 1e-300)
        net = int(np.sum(np.abs(fwd.poles - pole) <= tol)
                  - np.sum(np.abs(fwd.zeros - pole) <= tol))
        if net <= 0:
            return 0j
        raise AnalysisError(f"closed-loop root {pole:.6g} is a mode the sensor hides from "
                            "the loop: its residue is not computed")
    sensor = loop.sensor
    res = exact_residue(fn, lambda s: complex(sensor(np.array([s]))[0]), pole)
    if loop.reference_first is not None:
        # T_r = (C_r/C)·T: the 2-DOF first stage's reference path over its feedback path.
        at = np.array([pole])
        res *= complex(loop.reference_first(at)[0] / loop.stages[0](at)[0])
    return res


def _pair(p: complex, z: complex, r: complex, sigma: float, tol: float, ramp_tol: float,
          ramp_r: complex, *, period_s: float | None = None) -> SlowPair:
    """One :class:`SlowPair`; ``sigma`` is the decay rate in 1/s."""
    amp = _amplitude(r, p)
    ramp_amp = _amplitude(ramp_r, p)
    tail = _tail_time(amp, sigma, tol)
    samples = None if period_s is None else tail / period_s
    return SlowPair(pole=p, zero=z, residue=amp, time_constant_s=1.0 / sigma,
                    tail_time_s=tail, ramp_residue=ramp_amp,
                    ramp_tail_time_s=_tail_time(ramp_amp, sigma, ramp_tol),
                    tail_samples=samples, domain="s" if period_s is None else "z")


def _rational_without(loop: Loop, step: StepResult, band: float,
                      pairs: list[tuple[complex, complex]], residues: list[complex]) -> float:
    """Settling of ``y(t) − Σ r_i e^{p_i t}``, exactly, on the step's own grid."""
    t_ref = reference_to_output(loop)
    final = step.metrics.final_value
    resp = RationalResponse.of_loop(loop)
    segments = grid_segments(t_ref, step.metrics.horizon_s, final, band)
    t, y, _ = resp.on_segments(segments)
    reduced = y - _terms_on_grid(segments, pairs, residues)

    def exact(s: float) -> float:
        arr = np.array([s])
        return (resp.step_at(s) - float(_terms(arr, pairs, residues)[0])) / final

    return settling_time(t, reduced / final, 1.0, band, exact)


def _sampled_tail(loop: DiscreteLoop, step: StepResult, band: float,
                  roots: ComplexArray | None) -> SlowTail:
    """:func:`slow_tail` in z: y[k] = y∞ + Σ r_i p_i^k, r_i = Res[T(z)/(z − 1), p_i]."""
    T = loop.period_s
    if roots is None:
        from .discrete_response import discrete_stability

        st = discrete_stability(loop)
        if not st.certified:
            raise AnalysisError("the closed-loop roots are not certified: " + st.note)
        roots = np.asarray(st.closed_loop_poles, dtype=complex)
    fn = z_char_function(loop.rational)
    sampled = loop.sampled
    zeros = np.concatenate([loop.controller.zeros, sampled.transfer(output=1).zeros])
    pairs = match_pairs(np.asarray(roots, dtype=complex), zeros, period_s=T)

    def feedback(z: complex) -> complex:
        arr = np.array([z])
        return complex(sampled.response(arr, 0)[0] / sampled.response(arr, 1)[0])

    residues = [exact_residue(fn, feedback, p, period_s=T) for p, _ in pairs]
    final = step.metrics.final_value
    out = [_pair(p, z, r, -math.log(abs(p)) / T, band * abs(final),
                 band * _ramp_scale(step), -T * r / (p - 1.0), period_s=T)
           for (p, z), r in zip(pairs, residues, strict=True)]
    settling = step.metrics.settling_time_s
    without = settling
    if pairs:
        t, y = step.step.time_s, step.step.value
        k = np.rint(t / T)
        reduced = y.astype(complex)
        for (p, _), r in zip(pairs, residues, strict=True):
            term = r * np.power(complex(p), k)
            reduced = reduced - (term if p.imag == 0 else 2.0 * term)
        outside = np.flatnonzero(np.abs(reduced.real / final - 1.0) > band)
        if outside.size == 0:
            without = 0.0
        elif outside[-1] == t.size - 1:
            without = math.inf
        else:
            without = float(t[outside[-1] + 1])
    return SlowTail(pairs=tuple(out), settling_time_s=settling,
                    settling_time_without_tail_s=without, criteria=CRITERIA + SAMPLED_NOTE)


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

