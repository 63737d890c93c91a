"""Closed-loop reference step and ramp responses, exact also for loops with a delay.

Rational loops are solved exactly: for a Hurwitz closed-loop matrix A the step response is
``y(t) = C (I − e^{At}) x∞ + D`` with ``x∞ = −A⁻¹B``, sampled on a fine uniform grid by
powers of ``e^{Ah}`` and evaluated at any other instant with one matrix exponential, so
crossing and peak times are refined by root finding, not read off the grid.

Loops with a transport delay are simulated without any rational approximation of the
delay: the loop is cut at the delayed plant input (:func:`.closed_loop.delay_split`), the
step is ``h = delay/N`` with integer N so that the delay is exactly N samples of a buffer,
and the delay-free part is discretised exactly for an input that is linear over each step
(first-order hold on the delayed signal; the reference step and ramp are represented
exactly).  Jumps of the controller output (a proportional path seeing the reference step)
are kept as left and right values, so the delayed jump is not smeared over a step.  The
samples are advanced 64 at a time by one linear solve, which gives the same numbers as a
step-by-step loop at a small fraction of the cost.

A Padé copy of the delay is used only to estimate how long to simulate; the horizon is
extended when the simulated response has not clearly settled.
"""

from __future__ import annotations

import dataclasses
import math
import weakref
from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.typing import NDArray
from scipy import linalg, optimize

from ..errors import AnalysisError
from ..lti import FloatArray, Loop, Zpk
from .closed_loop import (
    StateSpace,
    closed_loop,
    closed_loop_poles,
    delay_split,
    reference_to_output,
)
from .modal import ModalForm, balance, modal_form_balanced
from .results import StepMetrics, StepResult, TimeSeries

__all__ = [
    "RationalResponse",
    "crossing_time",
    "grid_segments",
    "grid_steps",
    "segment_times",
    "settling_time",
    "step_response",
]

#: Samples of the fine grid for rational loops (exact at every sample): at least this many,
#: more when a significant mode needs them (``|p|·h ≤ RATIONAL_STEP_PER_RAD``), at most the cap.
RATIONAL_STEPS = 100_000
RATIONAL_MAX_STEPS = 1_000_000
RATIONAL_STEP_PER_RAD = 0.1
#: Fewest and most steps of the delay simulation.
DELAY_MIN_STEPS = 20_000
DELAY_MAX_STEPS = 2_000_000
#: Samples advanced together by one linear solve in the delay simulation.
DELAY_BLOCK = 64
#: Interpolation error allowed per mode, as a fraction of the band: a mode of amplitude a
#: and frequency ω held linear over a step errs by about a·(ωh)²/8.
DELAY_HOLD_TOL = 1e-3
#: Points kept in the time series handed to the plots.
PLOT_POINTS = 4000
#: Order of the Padé copy used only for the horizon of delay loops.
PADE_ORDER = 6
#: The horizon lasts until every mode's envelope is below this fraction of the band.
HORIZON_TAIL_FRACTION = 0.01
#: Horizon doublings allowed when the response has not settled.
MAX_EXTENSIONS = 6


#: Consecutive uniform pieces of a time grid: (start s, end s, steps).
Segments = tuple[tuple[float, float, int], ...]


# --------------------------------------------------------------------------- exact rational
@dataclass(frozen=True)
class RationalResponse:
    """Exact reference step and ramp responses of a Hurwitz closed loop r → y.

    ``a``, ``b``, ``c``, ``d`` is the closed loop from r to y (single input and output).
    The transients come from one eigendecomposition (:mod:`.modal`) when it is
    trustworthy, else from matrix exponentials (powers of ``e^{Ah}`` on the grid).
    """

    a: NDArray[np.float64]
    b: NDArray[np.float64]
    c: NDArray[np.float64]
    d: float

    @classmethod
    def of_loop(cls, loop: Loop) -> RationalResponse:
        """From the delay-free closed loop of ``loop`` (output y); one per loop object, so
        the step response and the slow-pair analysis share one decomposition."""
        try:
            return _RESPONSES[loop]
        except KeyError:
            pass
        ss = closed_loop(loop)
        resp = cls(ss.a, ss.b, ss.c[0:1, :], float(ss.d[0, 0]))
        _RESPONSES[loop] = resp
        return resp

    @cached_property
    def _x_inf(self) -> NDArray[np.float64]:
        return -np.linalg.solve(self.a, self.b)

    @cached_property
    def _b1(self) -> NDArray[np.float64]:
        return np.linalg.solve(self.a, self._x_inf)

    @cached_property
    def _balanced(self) -> tuple[NDArray[np.float64], NDArray[np.float64],
                                 NDArray[np.float64], NDArray[np.float64]]:
        """``D⁻¹AD``, ``D⁻¹x∞``, ``D⁻¹b₁``, ``CD`` for the balancing diagonal D (powers of
        two, so exact): matrix exponentials of badly scaled realisations lose accuracy."""
        ab, diag = balance(self.a)
        return (ab, self._x_inf / diag[:, None], self._b1 / diag[:, None],
                self.c * diag[None, :])

    @cached_property
    def modes(self) -> ModalForm | None:
        """The modal form of the transients, or None when it is not trustworthy."""
        if self.a.shape[0] == 0:
            return None
        cx = float((self.c @ self._x_inf)[0, 0])
        ab, xb, b1b, cb = self._balanced
        return modal_form_balanced(ab, xb[:, 0], b1b[:, 0], cb[0],
                                   max(abs(cx), abs(cx + self.d)))

    @property
    def final_value(self) -> float:
        """Steady state of the step response, ``D − C A⁻¹ B``."""
        if self.a.shape[0] == 0:
            return self.d
        return float((self.c @ self._x_inf)[0, 0] + self.d)

    def step_at(self, t: float) -> float:
        """y(t) for r = 1(t), t ≥ 0 (right limit at t = 0)."""
        if self.a.shape[0] == 0:
            return self.d
        x_inf = self._x_inf
        cx = float((self.c @ x_inf)[0, 0])
        if self.modes is not None:
            return cx - self.modes.transient(t)[0] + self.d
        ab, xb, _, cb = self._balanced
        return cx - float((cb @ linalg.expm(ab * t) @ xb)[0, 0]) + self.d

    def step_slope_at(self, t: float) -> float:
        """dy/dt for r = 1(t) at t > 0: the impulse response ``C e^{At} B``."""
        if self.a.shape[0] == 0:
            return 0.0
        if self.modes is not None:
            return self.modes.step_slope(t)
        ab, xb, _, cb = self._balanced
        return -float((cb @ linalg.expm(ab * t) @ (ab @ xb))[0, 0])

    def on_grid(self, horizon_s: float, steps: int) -> tuple[FloatArray, FloatArray, FloatArray]:
        """Uniform grid ``t``, step response ``y`` and ramp error ``t − y_ramp``.

        For r = t the state is ``x = a₁t + b₁ − e^{At} b₁`` with ``a₁ = x∞`` and
        ``b₁ = A⁻¹a₁`` (the particular solution plus the decaying homogeneous part).
        """
        return self.on_segments(((0.0, float(horizon_s), int(steps)),))

    def on_segments(self, segments: Segments) -> tuple[FloatArray, FloatArray, FloatArray]:
        """As :meth:`on_grid` on consecutive uniform segments ``(start, end, steps)``.

        The last grid asked for is kept (read-only): the slow-pair analysis asks for the
        grid the step response ended on.
        """
        key = tuple((float(a), float(b), int(n)) for a, b, n in segments)
        if key in self._grids:
            return self._grids[key]
        out = self._on_segments(key)
        for arr in out:
            arr.setflags(write=False)
        self._grids.clear()
        self._grids[key] = out
        return out

    @cached_property
    def _grids(self) -> dict[Segments, tuple[FloatArray, FloatArray, FloatArray]]:
        return {}

    def _on_segments(self, segments: Segments) -> tuple[FloatArray, FloatArray, FloatArray]:
        t = segment_times(segments)
        n = self.a.shape[0]
        if n == 0:
            return t, np.full(t.shape, self.d), t - self.d * t
        x_inf, b1 = self._x_inf, self._b1
        if self.modes is not None:
            step_tr, ramp_tr = self.modes.on_segments(segments)
        else:
            ab, xb, b1b, cb = self._balanced
            parts = []
            for i, (a, b, steps) in enumerate(segments):
                v = np.hstack([xb, b1b])
                if a > 0:
                    v = linalg.expm(ab * a) @ v
                phi = linalg.expm(ab * ((b - a) / steps))
                powers = output_of_powers(phi, v, cb, steps + 1)
                parts.append(powers if i == 0 else powers[1:])
            powers = np.concatenate(parts)
            step_tr, ramp_tr = powers[:, 0], powers[:, 1]
        cx, cb = float((self.c @ x_inf)[0, 0]), float((self.c @ b1)[0, 0])
        y = cx - step_tr + self.d
        y_ramp = cx * t + cb - ramp_tr + self.d * t
        return t, y, t - y_ramp


_RESPONSES: weakref.WeakKeyDictionary[Loop, RationalResponse] = weakref.WeakKeyDictionary()


def output_of_powers(phi: NDArray[np.float64], v: NDArray[np.float64],
                      c: NDArray[np.float64], count: int) -> NDArray[np.float64]:
    """``c Φ^k v`` for k = 0 … count−1, shape (count, columns of v).

    Blocks of states are advanced by one multiplication with Φ^B, which keeps the cost at
    a few hundred matrix products for a 10⁵-sample grid.  Used for a sampled loop's
    exact step response, and here only when the modal form is not trustworthy (a nearly
    defective closed-loop matrix).
    """
    n, m = v.shape
    block = min(256, count)
    first = np.empty((block, n, m))
    z = v.copy()
    for k in range(block):
        first[k] = z
        z = phi @ z
    states = first.transpose(1, 0, 2).reshape(n, block * m)
    phi_block = np.linalg.matrix_power(phi, block)
    out = np.empty((count, m))
    done = 0
    while done < count:
        take = min(block, count - done)
        out[done:done + take] = (c @ states).reshape(block, m)[:take]
        done += take
        states = phi_block @ states
    return out


# --------------------------------------------------------------------------- exact delay
def _foh_discretise(a: NDArray[np.float64], b: NDArray[np.float64], h: float,
                    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Φ, Γ₀, Γ₁ with ``x₊ = Φx + Γ₀v₀ + Γ₁(v₁ − v₀)`` for an input linear over the step."""
    n, m = b.shape
    big = np.zeros((n + 2 * m, n + 2 * m))
    big[:n, :n] = a * h
    big[:n, n:n + m] = b * h
    big[n:n + m, n + m:] = np.eye(m)
    e = linalg.expm(big)
    return e[:n, :n], e[:n, n:n + m], e[:n, n + m:]


@dataclass(frozen=True)
class _BlockMaps:
    """Linear maps of one block of the sampled delay loop (see :func:`_delay_block_maps`).

    ``hu[k]``/``hy[k]``: block × block lower-triangular Toeplitz maps from an input
    direction k ("r0", "r1", "w0", "w1") to u and y at the block's samples; ``cu_pow``,
    ``cy_pow``: from the block's initial state; ``end[k]``, ``phi_b``: to the state at the
    block's end; ``solve``: inverse of the coupling of the block's own u samples.
    """

    phi_b: NDArray[np.float64]
    hu: dict[str, NDArray[np.float64]]
    hy: dict[str, NDArray[np.float64]]
    cu_pow: NDArray[np.float64]
    cy_pow: NDArray[np.float64]
    end: dict[str, NDArray[np.float64]]
    solve: NDArray[np.float64]
    d: NDArray[np.float64]                 # [[Dyr, Dyw], [Dur, Duw]]


def _delay_block_maps(split: StateSpace, n_delay: int, h: float, block: int) -> _BlockMaps:
    """Matrices advancing the sampled delay loop by ``block`` steps at once.

    The discrete equations are those of a step-by-step simulation: the state advances by
    the first-order-hold map over each step, the plant input is ``w(k) = u(k − N)``, and u
    is kept as right values ``u⁺`` (start of a step) and left values ``u⁻`` (end of a
    step), so a jump of u at a sample is delayed intact.  Within a block the unknown
    ``u⁻, u⁺`` at the block's samples depend on each other only through the delay (a
    strictly causal coupling), so they follow from one linear system per block.
    """
    phi, g0, g1 = _foh_discretise(split.a, split.b, h)
    n = split.a.shape[0]
    powers = [np.eye(n)]
    for _ in range(block):
        powers.append(phi @ powers[-1])
    # Input directions: reference r and delayed input w, at the step start (v0 − v1 part)
    # and at the step end (v1 part): x₊ = Φx + (Γ₀ − Γ₁)v₀ + Γ₁v₁.
    dirs = {"r0": g0[:, 0] - g1[:, 0], "r1": g1[:, 0], "w0": g0[:, 1] - g1[:, 1],
            "w1": g1[:, 1]}
    cy, cu = split.c[0], split.c[1]

    def toeplitz(c: NDArray[np.float64], d: NDArray[np.float64]) -> NDArray[np.float64]:
        first = np.array([c @ powers[m] @ d for m in range(block)])
        return linalg.toeplitz(first, np.zeros(block))

    hu = {k: toeplitz(cu, v) for k, v in dirs.items()}
    hy = {k: toeplitz(cy, v) for k, v in dirs.items()}
    cu_pow = np.array([cu @ powers[m] for m in range(1, block + 1)])
    cy_pow = np.array([cy @ powers[m] for m in range(1, block + 1)])
    end = {k: np.column_stack([powers[block - 1 - i] @ v for i in range(block)])
           for k, v in dirs.items()}

    # Selections of the block's own unknowns by the delayed inputs (source index ≥ 1).
    i = np.arange(block)

    def select(src: NDArray[np.int_]) -> NDArray[np.float64]:
        sel = np.zeros((block, block))
        inside = src >= 1
        sel[i[inside], src[inside] - 1] = 1.0
        return sel

    s_p, s_m, s_ps = select(i - n_delay), select(i + 1 - n_delay), select(i + 1 - n_delay)
    duw = split.d[1, 1]
    eye = np.eye(block)
    m = np.block([[(hu["w1"] + duw * eye) @ s_m, hu["w0"] @ s_p],
                  [hu["w1"] @ s_m, hu["w0"] @ s_p + duw * s_ps]])
    # I − M is unit lower triangular once the unknowns are ordered in time (the coupling is
    # strictly causal), so its inverse is well conditioned; one product per block is cheaper
    # than a triangular solve call.
    solve = np.linalg.inv(np.eye(2 * block) - m)
    return _BlockMaps(phi_b=powers[block], hu=hu, hy=hy, cu_pow=cu_pow, cy_pow=cy_pow,
                      end=end, solve=solve, d=split.d)


def _simulate_delay(split: StateSpace, delay_s: float, h: float, steps: int,
                    ) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Step response y and ramp error t − y of the loop with its delay, step h = delay/N.

    ``steps`` is rounded up to whole blocks.  Two runs go side by side (columns): the
    reference step and the reference ramp.
    """
    t, y, _u_plus, _u_minus = simulate_delay_runs(split, delay_s, h, steps)
    return t, y[:, 0], t - y[:, 1]


def simulate_delay_runs(split: StateSpace, delay_s: float, h: float, steps: int,
                        ) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """``t``, then y, u⁺ and u⁻ at the samples for a unit step and a unit ramp (columns)
    on the first input of ``split`` (the reference of :func:`.closed_loop.delay_split`, or
    a disturbance entering the same way), exact for the loop with its delay.

    u⁺/u⁻ are the controller output just after and just before each sample.
    """
    n_delay = round(delay_s / h)
    block = DELAY_BLOCK
    steps = math.ceil(steps / block) * block
    maps = _delay_block_maps(split, n_delay, h, block)
    hu, hy, end = maps.hu, maps.hy, maps.end
    (dyr, dyw), (dur, duw) = maps.d
    t = np.arange(steps + 1) * h
    r_plus = np.column_stack([np.ones(steps + 1), t])      # columns: step run, ramp run
    r_minus = r_plus.copy()
    r_minus[0, 0] = 0.0                                    # the step is 0 just before t = 0
    u_plus = np.zeros((steps + 1, 2))
    u_minus = np.zeros((steps + 1, 2))
    y = np.zeros((steps + 1, 2))
    u_plus[0] = dur * r_plus[0]
    y[0] = dyr * r_plus[0]
    x = np.zeros((split.a.shape[0], 2))
    i = np.arange(block)

    def known(arr: NDArray[np.float64], k0: int, src: NDArray[np.int_]) -> NDArray[np.float64]:
        # Delayed values from before the block (local source index ≤ 0); 0 before t = 0.
        glob = k0 + src
        out = np.zeros((block, 2))
        mask = (src <= 0) & (glob >= 0)
        out[mask] = arr[glob[mask]]
        return out

    for k0 in range(0, steps, block):
        rp0 = r_plus[k0:k0 + block]
        rm1 = r_minus[k0 + 1:k0 + block + 1]
        rp1 = r_plus[k0 + 1:k0 + block + 1]
        kp = known(u_plus, k0, i - n_delay)
        km = known(u_minus, k0, i + 1 - n_delay)
        kps = known(u_plus, k0, i + 1 - n_delay)
        c = maps.cu_pow @ x + hu["r0"] @ rp0 + hu["r1"] @ rm1
        rhs_m = c + hu["w0"] @ kp + hu["w1"] @ km + duw * km + dur * rm1
        rhs_p = c + hu["w0"] @ kp + hu["w1"] @ km + duw * kps + dur * rp1
        sol = maps.solve @ np.vstack([rhs_m, rhs_p])
        um, up = sol[:block], sol[block:]
        u_minus[k0 + 1:k0 + block + 1] = um
        u_plus[k0 + 1:k0 + block + 1] = up
        # The delayed inputs of this block, now all known.
        wp = known(u_plus, k0, i - n_delay) + _inside(up, i - n_delay)
        wm = known(u_minus, k0, i + 1 - n_delay) + _inside(um, i + 1 - n_delay)
        wps = known(u_plus, k0, i + 1 - n_delay) + _inside(up, i + 1 - n_delay)
        y[k0 + 1:k0 + block + 1] = (maps.cy_pow @ x + hy["r0"] @ rp0 + hy["r1"] @ rm1
                                    + hy["w0"] @ wp + hy["w1"] @ wm + dyr * rp1 + dyw * wps)
        x = (maps.phi_b @ x + end["r0"] @ rp0 + end["r1"] @ rm1 + end["w0"] @ wp
             + end["w1"] @ wm)
    return t, y, u_plus, u_minus


def _inside(values: NDArray[np.float64], src: NDArray[np.int_]) -> NDArray[np.float64]:
    """Rows of the block's own solution picked by local source index ≥ 1 (else 0)."""
    out = np.zeros((src.size, 2))
    mask = src >= 1
    out[mask] = values[src[mask] - 1]
    return out


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


# --------------------------------------------------------------------------- metrics
def crossing_time(t: FloatArray, y: FloatArray, level: float, k: int,
                  exact: Callable[[float], float] | None = None) -> float:
    """Instant in ``[t[k], t[k+1]]`` where the signal equals ``level``.

    Linear interpolation on the grid, then root finding on ``exact`` (the signal at any
    instant) when it is given and brackets the level.
    """
    y0, y1 = y[k] - level, y[k + 1] - level
    if y0 == 0.0:
        return float(t[k])
    guess = float(t[k] + (t[k + 1] - t[k]) * y0 / (y0 - y1)) if y0 != y1 else float(t[k])
    if exact is None:
        return guess
    a, b = float(t[k]), float(t[k + 1])
    fa, fb = exact(a) - level, exact(b) - level
    if fa == 0.0:
        return a
    if fa * fb > 0:
        return guess
    return float(optimize.brentq(lambda s: exact(s) - level, a, b, xtol=1e-12 * max(b, 1.0)))


def settling_time(t: FloatArray, y: FloatArray, final: float, band: float,
                  exact: Callable[[float], float] | None = None) -> float:
    """Last exit from the band ``|y − final| ≤ band·|final|``, interpolated.

    Returns 0 when the sampled signal never leaves the band and ``inf`` when it is
    outside at the last sample.
    """
    tol = band * abs(final)
    outside = np.flatnonzero(np.abs(y - final) > tol)
    if outside.size == 0:
        return 0.0
    k = int(outside[-1])
    if k == y.size - 1:
        return math.inf
    level = final + tol if y[k] > final else final - tol
    return crossing_time(t, y, level, k, exact)


def _first_reach(t: FloatArray, yn: FloatArray, level: float,
                 exact: Callable[[float], float] | None) -> float | None:
    idx = np.flatnonzero(yn >= level)
    if idx.size == 0:
        return None
    k = int(idx[0])
    if k == 0:
        return 0.0
    return crossing_time(t, yn, level, k - 1, exact)


def _peak(t: FloatArray, yn: FloatArray, slope: Callable[[float], float] | None,
          exact: Callable[[float], float] | None) -> tuple[float, float]:
    """Largest value of the normalised response and its instant, refined locally."""
    k = int(np.argmax(yn))
    if 0 < k < yn.size - 1:
        a, b = float(t[k - 1]), float(t[k + 1])
        if slope is not None and exact is not None and slope(a) * slope(b) < 0:
            tp = float(optimize.brentq(slope, a, b, xtol=1e-12 * max(b, 1.0)))
            return exact(tp), tp
        # Parabola through the three samples around the largest one.
        y0, y1, y2 = yn[k - 1], yn[k], yn[k + 1]
        d0, d1 = t[k] - t[k - 1], t[k + 1] - t[k]
        den = y0 - 2 * y1 + y2
        if den < 0 and d0 == d1:
            off = 0.5 * (y0 - y2) / den
            return float(y1 - 0.25 * (y0 - y2) * off), float(t[k] + off * d0)
        if d0 != d1:
            # Uneven spacing (a segment boundary): the vertex of the Lagrange parabola.
            s0, s1 = (y1 - y0) / d0, (y2 - y1) / d1
            curv = (s1 - s0) / (d0 + d1)
            if curv < 0:
                tv = 0.5 * (t[k - 1] + t[k]) - 0.5 * s0 / curv
                yv = y1 + (tv - t[k]) * (s0 + curv * (tv - t[k - 1]))
                return float(yv), float(tv)
    return float(yn[k]), float(t[k])


def _metrics(t: FloatArray, y: FloatArray, e: FloatArray, final: float, band: float,
             exact_delay: bool, rational: RationalResponse | None) -> StepMetrics:
    yn = y / final
    exact = slope = None
    if rational is not None:
        r = rational

        def exact(s: float) -> float:
            return r.step_at(s) / final

        def slope(s: float) -> float:
            return r.step_slope_at(s) / final

    peak, t_peak = _peak(t, yn, slope, exact)
    overshoot = 100.0 * (peak - 1.0)
    has_overshoot = overshoot > 1e-7
    t10 = _first_reach(t, yn, 0.1, exact)
    t90 = _first_reach(t, yn, 0.9, exact)
    rise = t90 - t10 if t10 is not None and t90 is not None else None
    return StepMetrics(
        final_value=final,
        overshoot_pct=overshoot if has_overshoot else 0.0,
        peak_time_s=t_peak if has_overshoot else None,
        rise_time_s=rise,
        settling_time_s=settling_time(t, yn, 1.0, band, exact),
        settling_band=band,
        horizon_s=float(t[-1]),
        ramp_error_final=float(e[-1]),
        exact_delay=exact_delay,
    )


def _settled(t: FloatArray, y: FloatArray, final: float, band: float) -> bool:
    """True when the last exit is well inside the horizon and the end is quiet."""
    ts = settling_time(t, y, final, band)
    quiet = np.abs(y[t >= 0.8 * t[-1]] - final).max() <= 0.5 * band * abs(final)
    return ts <= 0.75 * t[-1] and bool(quiet)


def plot_series(t: FloatArray, v: FloatArray) -> TimeSeries:
    """``v(t)`` thinned to at most :data:`PLOT_POINTS` samples, the last one kept."""
    stride = max(1, math.ceil((t.size - 1) / (PLOT_POINTS - 1)))
    idx = np.arange(0, t.size, stride)
    if idx[-1] != t.size - 1:
        idx = np.append(idx, t.size - 1)
    return TimeSeries(time_s=t[idx].copy(), value=v[idx].copy())


# --------------------------------------------------------------------------- public
def step_response(loop: Loop, band: float) -> StepResult:
    """Closed-loop response of y to a unit reference step, and the ramp-tracking error.

    Parameters
    ----------
    loop : Loop
        A closed-loop stable loop (the caller checks stability first).
    band : float
        Settling band as a fraction of ``|y∞|``, e.g. 0.02.

    Returns
    -------
    StepResult
        Metrics computed on the fine grid (times in s, overshoot in % of ``|y∞|``,
        ``ramp_error_final`` = ``t − y`` at the horizon end for r = t, per unit slope) and
        the step and ramp-error series thinned to at most ~4000 points for plots.

    Raises
    ------
    AnalysisError
        When a rational closed loop has a pole with Re ≥ 0 (hidden modes included), when
        the final value is zero or not finite, when the response has not settled
        after extending the horizon, or when the delay is too short compared with the
        horizon to be held as a whole number of steps.
    """
    if not band > 0:
        raise AnalysisError(f"settling band must be positive, got {band}")
    ss = closed_loop(loop)
    if not loop.has_delay and ss.order and np.max(closed_loop_poles(loop).real) >= 0:
        raise AnalysisError("the closed loop is not stable: no settled step response")
    rational = RationalResponse.of_loop(loop)
    try:
        final = rational.final_value
    except np.linalg.LinAlgError as exc:
        raise AnalysisError("the closed loop has a pole at s = 0: no final value") from exc
    if final == 0.0 or not math.isfinite(final):
        raise AnalysisError("the closed loop has zero DC gain from reference to output "
                            "(or no finite one): step metrics are undefined")

    if loop.has_delay:
        t_ref = reference_to_output(loop.with_plant(loop.plant * _pade(loop.delay_s,
                                                                       PADE_ORDER)))
    else:
        t_ref = reference_to_output(loop)
    poles, amp = _mode_amplitudes(t_ref)
    horizon = _horizon(poles, amp, final, band, _ramp_error_steady(t_ref))

    for _ in range(MAX_EXTENSIONS + 1):
        if loop.has_delay:
            t, y, e, u_peak = _delay_run(loop, horizon, poles, amp, final, band)
        else:
            segments = grid_segments(t_ref, horizon, final, band)
            t, y, e = rational.on_segments(segments)
        if _settled(t, y, final, band):
            break
        horizon *= 2.0
    else:
        raise AnalysisError(f"the step response has not settled within {horizon / 2:.4g} s")
    if not loop.has_delay:
        # The controller output on the same exact grid (the u row of the closed loop).
        u_resp = RationalResponse(ss.a, ss.b, ss.c[1:2], float(ss.d[1, 0]))
        u_peak = float(np.max(np.abs(u_resp.on_segments(segments)[1])))

    metrics = dataclasses.replace(
        _metrics(t, y, e, final, band, loop.has_delay, None if loop.has_delay else rational),
        u_peak=u_peak)
    return StepResult(metrics=metrics, step=plot_series(t, y), ramp_error=plot_series(t, e))


def _delay_run(loop: Loop, horizon: float, poles: NDArray[np.complex128], amp: FloatArray,
               final: float, band: float
               ) -> tuple[FloatArray, FloatArray, FloatArray, float]:
    """Choose h = delay/N fine enough for every significant mode, then simulate.

    Returns t, the step response, the ramp error and the step's largest |u| (either side
    of every sample, so a jump of u counts).
    """
    h, steps = delay_step(loop, horizon, poles, amp, final, band)
    t, y, u_plus, u_minus = simulate_delay_runs(delay_split(loop), loop.delay_s, h, steps)
    u_peak = float(max(np.max(np.abs(u_plus[:, 0])), np.max(np.abs(u_minus[:, 0]))))
    return t, y[:, 0], t - y[:, 1], u_peak


def delay_step(loop: Loop, horizon: float, poles: NDArray[np.complex128], amp: FloatArray,
               final: float, band: float) -> tuple[float, int]:
    """Step h = delay/N of the exact delay simulation and the number of steps.

    ``poles`` and ``amp`` are the modes of a Padé copy and their step amplitudes, ``final``
    the scale of the response (the band is ``band·|final|``).
    """
    floor = HORIZON_TAIL_FRACTION * band * abs(final)
    tol = DELAY_HOLD_TOL * band * abs(final)
    # Padé poles far beyond its order/delay are artefacts of the approximation.
    limit = 2.0 * PADE_ORDER / loop.delay_s
    h_target = horizon / DELAY_MIN_STEPS
    for p, a in zip(poles, amp, strict=True):
        if a > floor and 0 < abs(p) < limit:
            h_target = min(h_target, math.sqrt(8.0 * tol / a) / abs(p))
    h_target = max(h_target, horizon / DELAY_MAX_STEPS)
    n_delay = max(1, math.floor(loop.delay_s / h_target))
    h = loop.delay_s / n_delay
    steps = math.ceil(horizon / h)
    if steps > DELAY_MAX_STEPS:
        raise AnalysisError(
            f"the delay ({loop.delay_s:.3g} s) is too short against the {horizon:.3g} s "
            f"horizon to simulate it exactly ({steps} steps needed)")
    return h, steps
