"""Rational SISO transfer functions in zero-pole-gain form, and the loop they make.

Everything numerical in loopwarden works from zeros, poles and a gain rather than from
polynomial coefficients: frequency responses evaluated factor by factor stay accurate for
high orders and lightly damped roots, and poles at the origin are counted exactly.

Conventions
-----------
* ``gain`` multiplies the monic factors: ``G(s) = gain * prod(s - z) / prod(s - p)``.
* Complex roots always come in conjugate pairs (checked on construction).
* Frequencies are rad/s; time is s; phases returned in radians unless a name says deg.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray

ComplexArray = NDArray[np.complex128]
FloatArray = NDArray[np.float64]

#: Roots closer to the origin than this (relative to 1 rad/s) count as exactly at s = 0.
ORIGIN_TOL = 1e-10


def _as_roots(values: ArrayLike) -> ComplexArray:
    arr = np.atleast_1d(np.asarray(values, dtype=complex)).ravel()
    return np.sort_complex(arr)


def _check_conjugate(roots: ComplexArray, what: str) -> None:
    cplx = roots[np.abs(roots.imag) > 1e-9 * np.maximum(1.0, np.abs(roots))]
    if cplx.size == 0:
        return
    upper = np.sort_complex(cplx[cplx.imag > 0])
    lower = np.sort_complex(np.conj(cplx[cplx.imag < 0]))
    if upper.size != lower.size or not np.allclose(upper, lower, rtol=1e-6, atol=1e-9):
        raise ValueError(f"complex {what} must come in conjugate pairs")


@dataclass(frozen=True, eq=False)
class Zpk:
    """A real-coefficient rational transfer function ``gain * prod(s - z) / prod(s - p)``."""

    zeros: ComplexArray
    poles: ComplexArray
    gain: float
    label: str = field(default="", compare=False)

    def __post_init__(self) -> None:
        z = _as_roots(self.zeros)
        p = _as_roots(self.poles)
        # Snap roots that are numerically on the real axis or at the origin.
        for arr in (z, p):
            small = np.abs(arr.imag) <= 1e-12 * np.maximum(1.0, np.abs(arr))
            arr[small] = arr[small].real
            at0 = np.abs(arr) < ORIGIN_TOL
            arr[at0] = 0.0
        _check_conjugate(z, "zeros")
        _check_conjugate(p, "poles")
        object.__setattr__(self, "zeros", z)
        object.__setattr__(self, "poles", p)
        object.__setattr__(self, "gain", float(self.gain))

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_tf(cls, num: Sequence[float], den: Sequence[float], label: str = "") -> Zpk:
        """From polynomial coefficients in descending powers of s."""
        n = np.trim_zeros(np.asarray(num, dtype=float), "f")
        d = np.trim_zeros(np.asarray(den, dtype=float), "f")
        if d.size == 0:
            raise ValueError("denominator is zero")
        if n.size == 0:
            return cls(np.empty(0), np.roots(d), 0.0, label)
        return cls(np.roots(n), np.roots(d), n[0] / d[0], label)

    @classmethod
    def from_ss(cls, a: ArrayLike, b: ArrayLike, c: ArrayLike, d: ArrayLike,
                label: str = "") -> Zpk:
        """From a SISO state-space model; zeros are the invariant zeros (Rosenbrock pencil)."""
        from scipy import linalg

        A = np.atleast_2d(np.asarray(a, dtype=float))
        B = np.asarray(b, dtype=float).reshape(A.shape[0], 1)
        C = np.asarray(c, dtype=float).reshape(1, A.shape[0])
        D = float(np.asarray(d, dtype=float).reshape(-1)[0])
        n = A.shape[0]
        poles = linalg.eigvals(A) if n else np.empty(0)
        if n == 0:
            return cls(np.empty(0), np.empty(0), D, label)
        M = np.block([[A, B], [C, np.array([[D]])]])
        N = np.zeros_like(M)
        N[:n, :n] = np.eye(n)
        gev = linalg.eigvals(M, N)
        zeros = gev[np.isfinite(gev) & (np.abs(gev) < 1e12)]
        # The gain follows from matching the response at a point away from every root.
        roots = np.concatenate([poles, zeros])
        s0 = 1j * (1.0 + 2.0 * (np.max(np.abs(roots)) if roots.size else 1.0)) + 0.37
        h = (C @ np.linalg.solve(s0 * np.eye(n) - A, B))[0, 0] + D
        monic = monic_ratio(s0, zeros, poles)
        if h == 0:
            return cls(np.empty(0), poles, 0.0, label)
        gain = (h / monic).real
        return cls(zeros, poles, gain, label)

    @classmethod
    def constant(cls, k: float, label: str = "") -> Zpk:
        return cls(np.empty(0), np.empty(0), k, label)

    @classmethod
    def _checked(cls, zeros: ComplexArray, poles: ComplexArray, gain: float,
                 label: str = "") -> Zpk:
        """A Zpk from roots that already passed the constructor's checks (sorted here).

        Products and rescalings of valid Zpk objects are valid: the snapping and the
        conjugate check would change nothing, and the analysis forms many of them.
        """
        obj = object.__new__(cls)
        object.__setattr__(obj, "zeros", np.sort_complex(zeros))
        object.__setattr__(obj, "poles", np.sort_complex(poles))
        object.__setattr__(obj, "gain", float(gain))
        object.__setattr__(obj, "label", label)
        return obj

    # ------------------------------------------------------------------ algebra
    def __mul__(self, other: Zpk) -> Zpk:
        return Zpk._checked(np.concatenate([self.zeros, other.zeros]),
                            np.concatenate([self.poles, other.poles]), self.gain * other.gain)

    def scaled(self, k: float) -> Zpk:
        return Zpk._checked(self.zeros, self.poles, self.gain * k, self.label)

    # ------------------------------------------------------------------ properties
    @property
    def order(self) -> int:
        return int(self.poles.size)

    @property
    def relative_degree(self) -> int:
        return int(self.poles.size - self.zeros.size)

    @property
    def is_proper(self) -> bool:
        return self.relative_degree >= 0

    @property
    def origin_poles(self) -> int:
        """Net number of poles at s = 0 (poles minus zeros there)."""
        return int(np.sum(self.poles == 0) - np.sum(self.zeros == 0))

    def high_frequency_gain(self) -> float:
        """``lim G(s)`` as s → ∞: the gain when biproper, 0 when strictly proper."""
        if self.relative_degree > 0:
            return 0.0
        if self.relative_degree == 0:
            return self.gain
        return math.inf

    def low_frequency_coefficient(self) -> float:
        """``lim s^m G(s)`` as s → 0, where m = ``origin_poles`` (may be negative).

        For a type-1 loop this is Kv; for a type-0 loop it is the DC gain.  Exact up to the
        rounding of the products (no evaluation at a small s).
        """
        z = self.zeros[self.zeros != 0]
        p = self.poles[self.poles != 0]
        val = self.gain * np.prod(-z) / np.prod(-p)
        return float(np.real(val))

    # ------------------------------------------------------------------ evaluation
    def __call__(self, s: ArrayLike) -> ComplexArray:
        """Evaluate at complex points ``s`` (vectorised)."""
        s = np.asarray(s, dtype=complex)
        out = np.full(s.shape, self.gain, dtype=complex)
        for z in self.zeros:
            out = out * (s - z)
        for p in self.poles:
            out = out / (s - p)
        return out

    def freqresp(self, w_rad_s: ArrayLike) -> ComplexArray:
        """Frequency response ``G(jω)``."""
        return self(1j * np.asarray(w_rad_s, dtype=float))

    def phase_rad(self, w_rad_s: ArrayLike) -> FloatArray:
        """Continuous (unwrapped) phase of ``G(jω)`` for ω ≥ 0, in radians.

        Sum of the angles of the individual factors, so it is continuous in ω except where ω
        passes through an imaginary-axis root.  A negative gain contributes −π.
        """
        w = np.asarray(w_rad_s, dtype=float)
        jw = 1j * w
        ph = np.zeros(w.shape)
        for z in self.zeros:
            ph = ph + _factor_angle(jw, z)
        for p in self.poles:
            ph = ph - _factor_angle(jw, p)
        if self.gain < 0:
            ph = ph - math.pi
        return ph

    def to_ss(self) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
        """A real state-space realisation built as a series of first/second-order sections.

        Requires a proper transfer function.  Sections avoid forming high-order polynomials.
        """
        if not self.is_proper:
            raise ValueError("cannot realise an improper transfer function")
        sections = _real_sections(self.zeros, self.poles)
        A = np.zeros((0, 0))
        B = np.zeros((0, 1))
        C = np.zeros((1, 0))
        D = np.array([[self.gain]])
        for num, den in sections:
            a, b, c, d = _section_ss(num, den)
            A, B, C, D = _series(A, B, C, D, a, b, c, d)
        return A, B, C, D


def monic_ratio(x0: complex, zeros: ComplexArray, poles: ComplexArray) -> complex:
    """``Π(x0 − z) / Π(x0 − p)``; summed in logarithms when the plain products overflow or
    underflow (high-order models), so the result stays finite whenever it is."""
    with np.errstate(all="ignore"):
        ratio = np.prod(x0 - zeros) / np.prod(x0 - poles)
        if np.isfinite(ratio) and ratio != 0:
            return complex(ratio)
        return complex(np.exp(np.sum(np.log(x0 - zeros)) - np.sum(np.log(x0 - poles))))


def _factor_angle(jw: ComplexArray, root: complex) -> FloatArray:
    """Angle of (jω − root), continuous in ω ≥ 0 unless the root is on the imaginary axis.

    For a right-half-plane root the principal angle would jump by 2π where ω passes the
    root's imaginary part; the branch π − atan2(ω − Im, Re) in (π/2, 3π/2) avoids that.
    """
    w = jw.imag
    if root.real > 0:
        return math.pi - np.arctan2(w - root.imag, root.real)
    return np.arctan2(w - root.imag, -root.real)


def _pair_off(roots: ComplexArray) -> list[NDArray[np.float64]]:
    """Group roots into real monic polynomials of degree 1 or 2 (descending coefficients)."""
    real = sorted(r.real for r in roots if r.imag == 0)
    upper = sorted((r for r in roots if r.imag > 0), key=lambda r: (r.real, r.imag))
    polys: list[NDArray[np.float64]] = []
    for r in upper:
        polys.append(np.array([1.0, -2.0 * r.real, abs(r) ** 2]))
    while len(real) >= 2:
        a, b = real.pop(0), real.pop(0)
        polys.append(np.array([1.0, -(a + b), a * b]))
    if real:
        polys.append(np.array([1.0, -real[0]]))
    return polys


def _real_sections(zeros: ComplexArray, poles: ComplexArray,
                   ) -> list[tuple[NDArray[np.float64], NDArray[np.float64]]]:
    num_polys = _pair_off(zeros)
    den_polys = _pair_off(poles)
    sections: list[tuple[NDArray[np.float64], NDArray[np.float64]]] = []
    # Pair each denominator with a numerator of degree no higher, keeping every section proper.
    den_polys.sort(key=len, reverse=True)
    num_polys.sort(key=len, reverse=True)
    for den in den_polys:
        pick = next((i for i, n in enumerate(num_polys) if len(n) <= len(den)), None)
        num = num_polys.pop(pick) if pick is not None else np.array([1.0])
        sections.append((num, den))
    # Any numerator left over would make the whole improper; callers check is_proper first.
    if num_polys:
        raise ValueError("cannot realise an improper transfer function")
    return sections


def _section_ss(num: NDArray[np.float64], den: NDArray[np.float64],
                ) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Controllable canonical form of a proper section with monic denominator."""
    n = len(den) - 1
    num = np.concatenate([np.zeros(len(den) - len(num)), num])
    d = num[0]
    rem = num[1:] - d * den[1:]
    A = np.zeros((n, n))
    A[0, :] = -den[1:]
    if n > 1:
        A[1:, :-1] = np.eye(n - 1)
    B = np.zeros((n, 1))
    B[0, 0] = 1.0
    C = rem.reshape(1, n)
    return A, B, C, np.array([[d]])


def _series(a1: FloatArray, b1: FloatArray, c1: FloatArray, d1: FloatArray,
            a2: FloatArray, b2: FloatArray, c2: FloatArray, d2: FloatArray,
            ) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """System 1 followed by system 2."""
    n1, n2 = a1.shape[0], a2.shape[0]
    A = np.zeros((n1 + n2, n1 + n2))
    A[:n1, :n1] = a1
    A[n1:, :n1] = b2 @ c1
    A[n1:, n1:] = a2
    B = np.vstack([b1, b2 @ d1])
    C = np.hstack([d2 @ c1, c2])
    D = d2 @ d1
    return A, B, C, D


@dataclass(frozen=True, eq=False)
class Loop:
    """A SISO feedback loop: controller C, plant P with transport delay, sensor H.

    Reference r enters at the summing junction; the error is ``e = r − H·y``; the loop
    transfer function is ``L(s) = C(s)·P(s)·H(s)·e^{−s·delay_s}``.  ``stages`` keeps the
    controller's factors in signal order so that analyses can remove or alter one of them.

    ``reference_first`` (a 2-DOF pid with setpoint weights as first stage) is that stage's
    path from the reference, with the poles of ``stages[0]``: the controller output is
    ``u = C₂···Cₖ·(C_r·r − C₁·H·y)``.  None: the reference enters the error like the
    measurement.  The feedback loop L, and everything computed from it, does not depend on it.
    """

    plant: Zpk
    controller: Zpk
    sensor: Zpk
    delay_s: float = 0.0
    stages: tuple[Zpk, ...] = ()
    reference_first: Zpk | None = None
    reference_gap: Zpk | None = None     # stages[0] − reference_first, exact (tracking)

    @cached_property
    def reference_controller(self) -> Zpk:
        """``C_r`` of ``u = C_r·r − C·ym`` (``C`` itself without setpoint weights)."""
        if self.reference_first is None:
            return self.controller
        ctrl = self.reference_first
        for st in self.stages[1:]:
            ctrl = ctrl * st
        return ctrl

    @cached_property
    def reference_forward(self) -> Zpk:
        """``C_r·P`` (reference to output without delay and feedback)."""
        if self.reference_first is None:
            return self.forward
        return self.reference_controller * self.plant

    @cached_property
    def rational(self) -> Zpk:
        """``C·P·H`` without the delay (formed once per loop: every analysis asks for it)."""
        return self.controller * self.plant * self.sensor

    @cached_property
    def forward(self) -> Zpk:
        """``C·P`` (reference to output, without delay and feedback)."""
        return self.controller * self.plant

    @property
    def has_delay(self) -> bool:
        return self.delay_s > 0.0

    def open_loop(self, w_rad_s: ArrayLike) -> ComplexArray:
        """``L(jω)`` including the exact delay."""
        w = np.asarray(w_rad_s, dtype=float)
        val = self.rational.freqresp(w)
        if self.delay_s:
            val = val * np.exp(-1j * w * self.delay_s)
        return val

    def open_loop_phase_rad(self, w_rad_s: ArrayLike) -> FloatArray:
        """Continuous phase of ``L(jω)``, delay included (−ω·delay)."""
        w = np.asarray(w_rad_s, dtype=float)
        return self.rational.phase_rad(w) - w * self.delay_s

    def with_controller(self, stages: Sequence[Zpk]) -> Loop:
        """The same plant and sensor with another controller chain."""
        ctrl = Zpk.constant(1.0)
        for st in stages:
            ctrl = ctrl * st
        # A 2-DOF first stage keeps its reference path while that stage is kept.
        keep = bool(stages) and bool(self.stages) and stages[0] is self.stages[0]
        return Loop(plant=self.plant, controller=ctrl, sensor=self.sensor,
                    delay_s=self.delay_s, stages=tuple(stages),
                    reference_first=self.reference_first if keep else None,
                    reference_gap=self.reference_gap if keep else None)

    def scaled(self, k: float) -> Loop:
        """The loop with the controller gain multiplied by ``k``."""
        stages = (self.stages[0].scaled(k), *self.stages[1:]) if self.stages else ()
        ref = self.reference_first.scaled(k) if self.reference_first is not None else None
        gap = self.reference_gap.scaled(k) if self.reference_gap is not None else None
        return Loop(plant=self.plant, controller=self.controller.scaled(k), sensor=self.sensor,
                    delay_s=self.delay_s, stages=stages, reference_first=ref,
                    reference_gap=gap)

    def with_plant(self, plant: Zpk) -> Loop:
        """The same controller (reference path included) and sensor around another plant
        model, without the delay (e.g. a Padé copy of plant and delay)."""
        return Loop(plant=plant, controller=self.controller, sensor=self.sensor,
                    stages=self.stages, reference_first=self.reference_first,
                    reference_gap=self.reference_gap)
