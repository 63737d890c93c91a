"""Exact step and ramp responses of a stable linear system from one eigendecomposition.

For ``x' = Ax + Bu``, ``y = Cx + Du`` with A Hurwitz and diagonalisable,
``e^{At} = V e^{Λt} V⁻¹``, so the reference step response is

    y(t) = C x∞ + D − Σ_i g_i h_i e^{λ_i t},   g = C V,  h = V⁻¹ x∞,  x∞ = −A⁻¹B,

and the ramp response carries the same exponentials with ``h = V⁻¹ A⁻¹ x∞``.  One
decomposition then gives the response at any instant in O(n) and on a uniform grid of N
samples in O(N·n) without ever raising a matrix to a power — powers of ``e^{Ah}`` lose
all accuracy when ``h`` is long against the fastest mode (a stiff loop), this does not.

The matrix is first balanced by a diagonal similarity of powers of two (exact in floating
point), which removes the scaling spread of realisations that carry a large gain in one
section.  The decomposition is used only when it is trustworthy: it must reproduce A to a
relative residual of 1e−8 (a small backward error), the
modal sum may not cancel by more than a factor 1e5 (a nearly defective A: clustered
eigenvalues with nearly parallel eigenvectors), and the step transient must agree with a
matrix exponential to 1e−9 of the response at 1/ρ and 10/ρ (ρ the largest |λ|), where
such cancellation would show; otherwise :func:`modal_form` returns None and the caller
uses matrix exponentials of the balanced matrix.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import linalg
from scipy.linalg import lapack

__all__ = ["ModalForm", "balance", "modal_form", "modal_form_balanced"]

#: Largest relative residual ``‖V Λ V⁻¹ − A‖/‖A‖`` accepted.
RESIDUAL_RTOL = 1e-8
#: The modal step transient must match ``C e^{At} x∞`` by matrix exponential to this,
#: relative to the response's size, at the fastest modes' time scale.
CHECK_RTOL = 1e-9
#: Largest cancellation ``Σ|g_i h_i| / scale`` accepted (``scale`` the size of the step
#: response): the rounding error of a modal sum is about eps times this, relative to it.
MAX_CANCELLATION = 1e5
#: Samples per block of the grid evaluation: e^{λ(jK + i)h} = e^{λjKh}·e^{λih}.
_BLOCK = 256


@dataclass(frozen=True, slots=True)
class ModalForm:
    """Modes of a stable system and the weights of its step and ramp transients.

    Only one member of each complex-conjugate pair is kept, with its weight doubled, so
    every sum is ``Re Σ w_i e^{λ_i t}``.

    Attributes
    ----------
    poles : complex array
        Eigenvalues λ_i (1/s): the real ones and those with Im > 0.
    step : complex array
        Weights of ``C e^{At} x∞`` (doubled for complex pairs).
    ramp : complex array
        Weights of ``C e^{At} A⁻¹ x∞``.
    """

    poles: NDArray[np.complex128]
    step: NDArray[np.complex128]
    ramp: NDArray[np.complex128]

    def transient(self, t: float) -> tuple[float, float]:
        """``(C e^{At} x∞, C e^{At} A⁻¹x∞)`` at one instant t ≥ 0 (s)."""
        e = np.exp(self.poles * t)
        return float(np.dot(self.step, e).real), float(np.dot(self.ramp, e).real)

    def step_slope(self, t: float) -> float:
        """``−d/dt C e^{At} x∞`` at t, i.e. the impulse response ``C e^{At} B``."""
        return -float(np.dot(self.step * self.poles, np.exp(self.poles * t)).real)

    def without(self, poles: NDArray[np.complex128], rtol: float = 1e-9) -> ModalForm:
        """The same form with the modes nearest to ``poles`` (within ``rtol``) removed."""
        keep = np.ones(self.poles.size, dtype=bool)
        for p in np.asarray(poles, dtype=complex):
            q = p if p.imag >= 0 else np.conj(p)
            d = np.abs(self.poles - q)
            i = int(np.argmin(d))
            if d[i] <= rtol * max(abs(q), 1e-300):
                keep[i] = False
        return ModalForm(self.poles[keep], self.step[keep], self.ramp[keep])

    def on_grid(self, h: float, count: int, *, ramp: bool = True,
                ) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
        """Both transients at t = k·h, k = 0 … count−1 (O(count·modes)).

        ``e^{λ(jB + i)h} = e^{λjBh}·e^{λih}`` with B samples per block: two small tables of
        exponentials and one real matrix product per transient.  ``ramp=False`` skips the
        ramp transient (returned as None).
        """
        return self._on_grid(0.0, h, count, ramp)

    def on_segments(self, segments: Sequence[tuple[float, float, int]], *, ramp: bool = True,
                    ) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
        """Both transients on consecutive uniform segments ``(start, end, steps)`` (their
        shared ends once), as :func:`.time_response.segment_times` lays them out."""
        steps_out, ramps_out = [], []
        for i, (a, b, n) in enumerate(segments):
            st, rp = self._on_grid(a, (b - a) / n, n + 1, ramp)
            cut = 0 if i == 0 else 1
            steps_out.append(st[cut:])
            if rp is not None:
                ramps_out.append(rp[cut:])
        step = np.concatenate(steps_out) if len(steps_out) > 1 else steps_out[0]
        if not ramp:
            return step, None
        return step, (np.concatenate(ramps_out) if len(ramps_out) > 1 else ramps_out[0])

    def _on_grid(self, t0: float, h: float, count: int, ramp: bool,
                 ) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
        m = self.poles.size
        if m == 0:
            return np.zeros(count), (np.zeros(count) if ramp else None)
        block = min(_BLOCK, count)
        rows = -(-count // block)
        inner = np.exp(np.outer(self.poles, np.arange(block) * h))          # (m, block)
        outer = np.exp(t0 * self.poles + np.outer(np.arange(rows) * (block * h), self.poles))
        inner_re, inner_im = np.ascontiguousarray(inner.real), np.ascontiguousarray(inner.imag)

        def transient(weights: NDArray[np.complex128]) -> NDArray[np.float64]:
            # Re Σ w·outer·inner as real products: no complex temporary of the grid's size.
            ow = outer * weights
            return (ow.real @ inner_re - ow.imag @ inner_im).reshape(-1)[:count]

        return transient(self.step), (transient(self.ramp) if ramp else None)


def balance(a: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """``(D⁻¹AD, diag D)``: LAPACK's diagonal balancing (powers of two, no permutation)."""
    if a.shape[0] == 0:
        return a.copy(), np.ones(0)
    ab, _, _, diag, info = lapack.dgebal(a, scale=1, permute=0)
    if info != 0:
        return a.copy(), np.ones(a.shape[0])
    return ab, diag


def modal_form(a: NDArray[np.float64], x_inf: NDArray[np.float64],
               b1: NDArray[np.float64], c: NDArray[np.float64],
               scale: float) -> ModalForm | None:
    """Modal weights of ``C e^{At} x∞`` and ``C e^{At} b₁``, or None when untrustworthy.

    Parameters
    ----------
    a : (n, n) array
        A Hurwitz state matrix.
    x_inf, b1 : (n, 1) arrays
        The step's steady state ``−A⁻¹B`` and ``A⁻¹x∞``.
    c : (1, n) array
        Output row.
    scale : float
        Size of the response (e.g. ``max(|y∞|, |C x∞|)``) against which the cancellation
        of the step sum is judged.
    """
    n = a.shape[0]
    if n == 0:
        empty = np.zeros(0, dtype=complex)
        return ModalForm(empty, empty, empty)
    ab, diag = balance(a)
    return modal_form_balanced(ab, x_inf[:, 0] / diag, b1[:, 0] / diag, c[0] * diag,
                                scale)


def modal_form_balanced(ab: NDArray[np.float64], xb: NDArray[np.float64],
                         b1b: NDArray[np.float64], cb: NDArray[np.float64],
                         scale: float) -> ModalForm | None:
    """:func:`modal_form` of an already balanced system (1-D ``xb``, ``b1b``, ``cb``)."""
    n = ab.shape[0]
    lam, v = linalg.eig(ab)
    if not np.all(np.isfinite(lam)):
        return None
    try:
        w = np.linalg.solve(v, np.column_stack([xb, b1b, np.eye(n)]))
    except np.linalg.LinAlgError:
        return None
    v_inv = w[:, 2:]
    norm_a = np.linalg.norm(ab, 1)
    resid = np.linalg.norm((v * lam) @ v_inv - ab, 1)
    if not np.isfinite(resid) or resid > RESIDUAL_RTOL * max(norm_a, 1e-300):
        return None
    g = cb @ v
    step, ramp = g * w[:, 0], g * w[:, 1]
    # The ramp weights are the step weights over λ_i: the step sum's check covers both.
    if float(np.sum(np.abs(step))) > MAX_CANCELLATION * max(abs(scale), 1e-300):
        return None
    # Keep one member of each conjugate pair (LAPACK returns them adjacent, exactly
    # conjugate); a real eigenvalue's eigenvector is real, so its weight is real.
    upper = lam.imag > 0
    real = lam.imag == 0
    factor = np.where(upper, 2.0, 1.0)
    keep = upper | real
    if np.count_nonzero(upper) != np.count_nonzero(lam.imag < 0):
        return None
    form = ModalForm(lam[keep], (step * factor)[keep], (ramp * factor)[keep])
    # A posteriori, where cancellation between nearly parallel fast modes would show and a
    # matrix exponential is at its most accurate (‖At‖ of order one): two exponentials of
    # the balanced matrix, an exact similarity of A.
    rho = float(np.max(np.abs(lam)))
    for t in (1.0 / rho, 10.0 / rho) if rho > 0 else ():
        exact = float(cb @ (linalg.expm(ab * t) @ xb))
        if not abs(form.transient(t)[0] - exact) <= CHECK_RTOL * max(abs(scale), 1e-300):
            return None
    return form
