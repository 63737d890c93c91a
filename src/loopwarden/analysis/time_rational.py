"""Exact step and ramp responses of a rational closed loop on a segmented grid (matrix
powers of one exact transition per segment).
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.typing import NDArray
from scipy import linalg

from ..lti import FloatArray, Loop
from .closed_loop import (
    closed_loop,
)
from .modal import ModalForm, balance, modal_form_balanced
from .time_grid import Segments, segment_times


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
