"""Sampled-data loops: discretisation of continuous blocks and transfer functions in z.

A :class:`~loopwarden.lti.Zpk` also describes a transfer function in the shift variable z
(``gain * prod(z − z_i) / prod(z − p_i)``); this module evaluates such functions on the
unit circle, discretises continuous controller blocks (Tustin with optional prewarping,
matched pole-zero, zero-order hold) and samples the plant exactly as the computer sees it,
from the hold (DAC) to the sampler (ADC), with any transport delay — a whole number of
periods or not — kept exactly.

Conventions
-----------
* ``period_s`` is the sampling period T (s); ``φ = ωT`` (rad) runs over (0, π], π being
  the Nyquist frequency π/T.
* Discrete state space: ``x[k+1] = A x[k] + B u[k]``, ``y[k] = C x[k] + D u[k]``.
* Poles and zeros of a sampled block are exact images: a continuous pole p becomes
  ``e^{pT}`` (an integrator becomes z = 1 exactly), so counting poles at z = 1 is exact.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import linalg

from .lti import ComplexArray, FloatArray, Zpk, _series, monic_ratio

__all__ = [
    "DISCRETISATION_METHODS",
    "DiscreteLoop",
    "SampledPlant",
    "at_z_one",
    "c2d",
    "delay_z",
    "lti_series",
    "matched",
    "sample_plant",
    "tustin",
    "unit_circle_log_magnitude",
    "unit_circle_phase_rad",
    "zoh",
    "zpk_from_discrete_ss",
]

Matrix = NDArray[np.float64]

#: Methods for discretising continuous controller stages.
DISCRETISATION_METHODS = ("zoh", "tustin", "matched")
#: A root within this distance of z = 1 counts as exactly there (an integrator).
Z_ONE_TOL = 1e-9
#: Delays within this fraction of a period of a whole number of periods are whole.
_WHOLE_SAMPLE_RTOL = 1e-9


# --------------------------------------------------------------------------- evaluation
def _branch_angle(phi: FloatArray, root: complex) -> FloatArray:
    """Angle of ``e^{jφ} − root``, continuous in φ ∈ [0, π] unless |root| = 1.

    Inside (or on) the unit circle ``φ + ∠(1 − r e^{−jφ})``, whose second term keeps a
    positive real part; outside ``∠(−r) + ∠(1 − e^{jφ}/r)``, likewise.  A root on the circle
    gives a jump of π where φ passes its angle (|·| is 0 there).
    """
    r = complex(root)
    if abs(r) <= 1.0:
        return phi + np.angle(1.0 - r * np.exp(-1j * phi))
    return math.atan2(-r.imag, -r.real) + np.angle(1.0 - np.exp(1j * phi) / r)


def unit_circle_phase_rad(zpk: Zpk, phi: ArrayLike) -> FloatArray:
    """Continuous phase (rad) of a z-domain ``zpk`` at ``z = e^{jφ}``, φ ∈ [0, π].

    Sum of the factor angles, each on a branch continuous over [0, π] (see
    :func:`_branch_angle`); a negative gain contributes −π.  Delays ``z^{−n}`` are poles at
    the origin and contribute −nφ.
    """
    p = np.asarray(phi, dtype=float)
    out = np.zeros(p.shape)
    for z in zpk.zeros:
        out = out + _branch_angle(p, z)
    for q in zpk.poles:
        out = out - _branch_angle(p, q)
    if zpk.gain < 0:
        out = out - math.pi
    return out


def unit_circle_log_magnitude(zpk: Zpk, phi: ArrayLike) -> FloatArray:
    """``ln|G(e^{jφ})|`` summed factor by factor."""
    p = np.asarray(phi, dtype=float)
    z = np.exp(1j * p)
    out = np.full(p.shape, math.log(abs(zpk.gain)) if zpk.gain != 0 else -math.inf)
    with np.errstate(divide="ignore"):
        for r in zpk.zeros:
            out = out + np.log(np.abs(z - r))
        for r in zpk.poles:
            out = out - np.log(np.abs(z - r))
    return out


def at_z_one(zpk: Zpk) -> tuple[int, float]:
    """``(m, c)``: net poles at z = 1 and ``c = lim (z − 1)^m G(z)`` as z → 1 (exact).

    ``m`` may be negative (zeros at z = 1).  ``c`` is the product over the other roots, so
    no evaluation close to z = 1 is needed.
    """
    zero_one = np.abs(zpk.zeros - 1.0) <= Z_ONE_TOL
    pole_one = np.abs(zpk.poles - 1.0) <= Z_ONE_TOL
    m = int(np.sum(pole_one) - np.sum(zero_one))
    val = zpk.gain * np.prod(1.0 - zpk.zeros[~zero_one]) / np.prod(1.0 - zpk.poles[~pole_one])
    return m, float(np.real(val))


def delay_z(samples: int) -> Zpk:
    """``z^{−n}``: n samples of delay (n poles at the origin)."""
    return Zpk(np.empty(0), np.zeros(samples), 1.0, f"z^-{samples}")


# --------------------------------------------------------------------------- controllers
def tustin(zpk: Zpk, period_s: float, prewarp_rad_s: float | None = None) -> Zpk:
    """Bilinear (Tustin) equivalent, optionally prewarped at ``prewarp_rad_s``.

    ``s = c (z − 1)/(z + 1)`` with ``c = 2/T``, or ``c = ω₀/tan(ω₀T/2)`` so that the
    discrete response equals the continuous one at ω₀ (0 < ω₀ < π/T).  Each root ``a``
    maps to ``(c + a)/(c − a)``; the gain becomes ``k·Π(c − z)/Π(c − p)`` and a relative
    degree r adds r zeros at z = −1.  A root at ``s = c`` (mapped to infinity) contributes
    its constant factor ``−2c`` instead of a root.
    """
    if prewarp_rad_s is None:
        c = 2.0 / period_s
    else:
        c = prewarp_rad_s / math.tan(0.5 * prewarp_rad_s * period_s)
    gain = zpk.gain
    zeros: list[complex] = []
    poles: list[complex] = []
    for roots, out, sign in ((zpk.zeros, zeros, 1), (zpk.poles, poles, -1)):
        for a in roots:
            lead = c - a
            if abs(lead) <= 1e-14 * c:
                gain *= (-2.0 * c) ** sign
                continue
            gain *= lead ** sign
            out.append((c + a) / lead)
    extra = len(poles) - len(zeros)          # (z + 1) factors left over
    zeros.extend([-1.0] * max(extra, 0))
    poles.extend([-1.0] * max(-extra, 0))
    return Zpk(np.array(zeros, dtype=complex), np.array(poles, dtype=complex),
               float(np.real(gain)), zpk.label)


def matched(zpk: Zpk, period_s: float) -> Zpk:
    """Matched pole-zero equivalent: roots ``e^{aT}``, zeros at infinity to z = −1.

    The gain matches the low-frequency behaviour: ``lim s^m C(s)`` as s → 0 equals
    ``lim ((z − 1)/T)^m C_d(z)`` as z → 1 (the DC gain when C has no root at s = 0).
    """
    zeros = list(np.exp(zpk.zeros * period_s))
    poles = list(np.exp(zpk.poles * period_s))
    zeros.extend([-1.0] * max(zpk.relative_degree, 0))
    unit = Zpk(np.array(zeros, dtype=complex), np.array(poles, dtype=complex), 1.0)
    m = zpk.origin_poles
    c_cont = zpk.low_frequency_coefficient()
    m_d, c_disc = at_z_one(unit)
    if m_d != m or c_disc == 0:
        raise ValueError("matched pole-zero mapping lost a root at s = 0")
    gain = c_cont * period_s ** m / c_disc
    return Zpk(unit.zeros, unit.poles, gain, zpk.label)


def zoh(zpk: Zpk, period_s: float) -> Zpk:
    """Zero-order-hold (step-invariant) equivalent ``(1 − z^{−1}) Z{G(s)/s}``."""
    a, b, c, d = zpk.to_ss()
    return sample_plant(a, b, c, d, period_s, poles=zpk.poles).transfer(label=zpk.label)


def c2d(zpk: Zpk, period_s: float, method: str, prewarp_rad_s: float | None = None) -> Zpk:
    """Discretise a continuous block by ``method`` ("zoh", "tustin" or "matched")."""
    if method == "tustin":
        return tustin(zpk, period_s, prewarp_rad_s)
    if method == "matched":
        return matched(zpk, period_s)
    if method == "zoh":
        return zoh(zpk, period_s)
    raise ValueError(f"unknown discretisation method {method!r}")


# --------------------------------------------------------------------------- plant
def _hold_integrals(a: Matrix, b: Matrix, t: float) -> tuple[Matrix, Matrix]:
    """``(e^{At}, ∫₀ᵗ e^{As} ds B)`` from one matrix exponential."""
    n, m = b.shape
    big = np.zeros((n + m, n + m))
    big[:n, :n] = a * t
    big[:n, n:] = b * t
    e = linalg.expm(big)
    return e[:n, :n], e[:n, n:]


@dataclass(frozen=True, eq=False)
class SampledPlant:
    """A continuous block seen through a zero-order hold and a sampler, delay included.

    State ``ξ = [x; u[k−1]; …; u[k−N]]``: the continuous state at the sampling instant
    and the N past inputs still inside the delay.  ``c`` may have several rows (outputs
    sampled at the same instants, e.g. the sensor output and the plant output).
    ``phi``, ``gamma0``, ``gamma1``, ``c_cont``, ``d_cont`` are the one-period maps of
    :func:`sample_plant` and the continuous output equation; ``continuous_poles`` are
    the poles of the continuous realisation.
    """

    a: Matrix
    b: Matrix
    c: Matrix
    d: Matrix
    period_s: float
    delay_samples: int                 # whole periods m of the delay
    delay_fraction: float              # θ/T in [0, 1): the rest
    phi: Matrix = field(repr=False)
    gamma0: Matrix = field(repr=False)
    gamma1: Matrix = field(repr=False)
    c_cont: Matrix = field(repr=False)
    d_cont: Matrix = field(repr=False)
    continuous_poles: ComplexArray = field(repr=False)

    @property
    def order(self) -> int:
        return int(self.a.shape[0])

    @property
    def poles(self) -> ComplexArray:
        """Exact images of every mode: ``e^{pT}`` per continuous pole, 0 per buffered input."""
        buffered = self.order - self.continuous_poles.size
        return np.concatenate([np.exp(self.continuous_poles * self.period_s),
                               np.zeros(buffered)])

    def response(self, z: ArrayLike, output: int = 0) -> ComplexArray:
        """``C (zI − A)^{−1} B + D`` of one output at complex points z (direct solves)."""
        zz = np.asarray(z, dtype=complex)
        n = self.order
        out = np.empty(zz.shape, dtype=complex)
        for i, zi in enumerate(zz.ravel()):
            val = self.d[output, 0]
            if n:
                x = np.linalg.solve(zi * np.eye(n) - self.a, self.b[:, 0])
                val = val + self.c[output] @ x
            out.flat[i] = val
        return out

    def transfer(self, output: int = 0, label: str = "") -> Zpk:
        """The transfer function of one output: ``z^{−m} G_θ(z)``.

        ``G_θ`` is the sampled block for the fractional part θ of the delay (states x and,
        when θ > 0, the one input held over the switch); its zeros come from the system
        pencil, its poles are the exact images.  The m whole periods are exact poles at
        z = 0 rather than a nilpotent buffer, whose eigenvalues are poorly conditioned.
        """
        n = self.phi.shape[0]
        c = self.c_cont[output:output + 1]
        d = float(self.d_cont[output, 0])
        cont = np.exp(self.continuous_poles * self.period_s)
        if self.delay_fraction > 0:
            a = np.block([[self.phi, self.gamma1], [np.zeros((1, n)), np.zeros((1, 1))]])
            b = np.vstack([self.gamma0, np.ones((1, 1))])
            small = zpk_from_discrete_ss(a, b, np.hstack([c, [[d]]]), 0.0,
                                         np.concatenate([cont, [0.0]]))
        else:
            small = zpk_from_discrete_ss(self.phi, self.gamma0, c, d, cont)
        poles = np.concatenate([small.poles, np.zeros(self.delay_samples)])
        return Zpk(small.zeros, poles, small.gain, label)


def zpk_from_discrete_ss(a: Matrix, b: Matrix, c: Matrix, d: float,
                         poles: ComplexArray | None = None, label: str = "") -> Zpk:
    """SISO discrete state space → zpk: zeros from the pencil, exact ``poles`` if given.

    The gain is matched to ``C (z₀I − A)^{−1} B + D`` at a point z₀ away from every root.
    Modes that do not reach the output stay as pole-zero pairs (decoupling zeros), so no
    mode is lost.
    """
    n = a.shape[0]
    if n == 0:
        return Zpk(np.empty(0), np.empty(0), d, label)
    zeros = Zpk.from_ss(a, b, c, d).zeros
    p = linalg.eigvals(a) if poles is None else np.asarray(poles, dtype=complex)
    roots = np.concatenate([p, zeros, [1.0]])
    z0 = 0.37 + 1j * (1.5 + 2.0 * float(np.max(np.abs(roots))))
    h = (c @ np.linalg.solve(z0 * np.eye(n) - a, b))[0, 0] + d
    if h == 0:
        return Zpk(np.empty(0), p, 0.0, label)
    monic = monic_ratio(z0, zeros, p)
    return Zpk(zeros, p, float((h / monic).real), label)


def sample_plant(a: ArrayLike, b: ArrayLike, c: ArrayLike, d: ArrayLike, period_s: float,
                 delay_s: float = 0.0, poles: ArrayLike | None = None) -> SampledPlant:
    """Exact zero-order-hold sampling of ``ẋ = Ax + Bu(t − τ)``, ``y = Cx + Du(t − τ)``.

    With ``τ = mT + θ`` (0 ≤ θ < T) the held input seen by the plant over
    ``[kT, (k+1)T)`` is ``u[k−m−1]`` until ``kT + θ`` and ``u[k−m]`` after, so

        x[k+1] = Φ x[k] + Γ₀ u[k−m] + Γ₁ u[k−m−1],
        Φ = e^{AT},  Γ₀ = ∫₀^{T−θ} e^{As} ds B,  Γ₁ = e^{A(T−θ)} ∫₀^θ e^{As} ds B

    (the modified z-transform in state form), and the output sampled at kT sees the input
    held at kT − τ.  The N = m (+1 when θ > 0) past inputs are buffer states.

    Parameters
    ----------
    a, b, c, d : array_like
        Continuous realisation (b one column; c one or more output rows).
    period_s : float
        Sampling period T > 0 (s).
    delay_s : float
        Input transport delay τ ≥ 0 (s).
    poles : array_like, optional
        The exact poles of the continuous realisation (e.g. from its zpk form); by default
        the eigenvalues of ``a``.  Their images ``e^{pT}`` are the sampled poles.
    """
    A = np.atleast_2d(np.asarray(a, dtype=float))
    n = A.shape[0] if A.size else 0
    A = A.reshape(n, n)
    B = np.asarray(b, dtype=float).reshape(n, 1)
    C = np.atleast_2d(np.asarray(c, dtype=float))
    if C.shape[1] != n:
        C = C.reshape(-1, n)
    D = np.asarray(d, dtype=float).reshape(C.shape[0], 1)
    ratio = delay_s / period_s
    m = int(math.floor(ratio + _WHOLE_SAMPLE_RTOL))
    frac = ratio - m
    if frac < _WHOLE_SAMPLE_RTOL:
        frac = 0.0
    theta = frac * period_s
    phi, gamma_full = _hold_integrals(A, B, period_s)
    if theta > 0:
        e_rest, g0 = _hold_integrals(A, B, period_s - theta)
        _, g_theta = _hold_integrals(A, B, theta)
        g1 = e_rest @ g_theta
        buffer = m + 1
    else:
        g0, g1 = gamma_full, np.zeros((n, 1))
        buffer = m
    size = n + buffer
    Ad = np.zeros((size, size))
    Bd = np.zeros((size, 1))
    Cd = np.zeros((C.shape[0], size))
    Dd = np.zeros((C.shape[0], 1))
    Ad[:n, :n] = phi
    Cd[:, :n] = C
    # Buffer: state n + j − 1 holds u[k − j], j = 1 … buffer.
    if buffer:
        Bd[n, 0] = 1.0
        for j in range(1, buffer):
            Ad[n + j, n + j - 1] = 1.0

    def inject(column: Matrix, lag: int) -> None:
        # x[k+1] += column · u[k − lag]
        if lag == 0:
            Bd[:n] += column
        else:
            Ad[:n, n + lag - 1:n + lag] += column

    inject(g0, m)
    if theta > 0:
        inject(g1, m + 1)
    # The output at kT sees u[k − m − 1] when θ > 0, else u[k − m].
    lag_out = m + 1 if theta > 0 else m
    if lag_out == 0:
        Dd[:] = D
    else:
        Cd[:, n + lag_out - 1:n + lag_out] += D
    if poles is None:
        poles = linalg.eigvals(A) if n else np.empty(0, dtype=complex)
    return SampledPlant(a=Ad, b=Bd, c=Cd, d=Dd, period_s=period_s, delay_samples=m,
                        delay_fraction=frac, phi=phi, gamma0=g0, gamma1=g1, c_cont=C,
                        d_cont=D, continuous_poles=np.asarray(poles, dtype=complex))


def lti_series(blocks: Sequence[Zpk]) -> tuple[Matrix, Matrix, Matrix, Matrix]:
    """Series realisation of proper blocks (each realised separately, every mode kept)."""
    A = np.zeros((0, 0))
    B = np.zeros((0, 1))
    C = np.zeros((1, 0))
    D = np.array([[1.0]])
    for blk in blocks:
        a, b, c, d = blk.to_ss()
        A, B, C, D = _series(A, B, C, D, a, b, c, d)
    return A, B, C, D


# --------------------------------------------------------------------------- the loop
@dataclass(frozen=True, eq=False)
class DiscreteLoop:
    """A sampled-data SISO loop in z: ``L(z) = C(z)·P_d(z)``, compute delay inside C.

    ``controller`` is the digital controller including the compute delay ``z^{−n}``;
    ``plant`` is the sampled plant ``P_d(z)`` from the hold to the sampler (plant, sensor
    and every transport delay, exact); ``sensor`` is unity (the sensor is inside
    ``plant``).  ``sampled`` is the state-space form of the sampled plant with outputs
    ``[measured, plant output]``.  The attribute names follow :class:`~loopwarden.lti.Loop`
    so that code reading poles and zeros of the loop's blocks works on either, but every
    transfer function here is in z and frequency responses are taken on the unit circle.
    """

    plant: Zpk
    controller: Zpk
    sampled: SampledPlant
    period_s: float
    compute_delay_samples: int = 0
    stages: tuple[Zpk, ...] = ()
    sensor: Zpk = field(default_factory=lambda: Zpk.constant(1.0))
    delay_s: float = 0.0               # every delay is inside the sampled plant

    @property
    def rational(self) -> Zpk:
        """``L(z) = C(z)·P_d(z)``."""
        return self.controller * self.plant

    @property
    def forward(self) -> Zpk:
        return self.controller * self.plant

    @property
    def has_delay(self) -> bool:
        return False

    @property
    def nyquist_rad_s(self) -> float:
        return math.pi / self.period_s

    def open_loop(self, w_rad_s: ArrayLike) -> ComplexArray:
        """``L(e^{jωT})`` at frequencies ω (rad/s)."""
        w = np.asarray(w_rad_s, dtype=float)
        return self.rational(np.exp(1j * w * self.period_s))

    def open_loop_phase_rad(self, w_rad_s: ArrayLike) -> FloatArray:
        """Continuous phase of ``L(e^{jωT})`` for 0 ≤ ωT ≤ π."""
        w = np.asarray(w_rad_s, dtype=float)
        return unit_circle_phase_rad(self.rational, w * self.period_s)

    def with_controller(self, stages: Sequence[Zpk]) -> DiscreteLoop:
        """The same sampled plant with another digital controller chain (z-domain)."""
        ctrl = Zpk.constant(1.0)
        for st in stages:
            ctrl = ctrl * st
        return DiscreteLoop(plant=self.plant, controller=ctrl, sampled=self.sampled,
                            period_s=self.period_s,
                            compute_delay_samples=self.compute_delay_samples,
                            stages=tuple(stages))
