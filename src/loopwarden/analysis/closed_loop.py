"""State-space realisations of the closed loop.

Each block (every controller stage, the plant, the sensor) is realised separately and the
blocks are connected, so the realisation keeps every mode — including modes that cancel
in the loop transfer function.  Its eigenvalues are therefore the poles of the whole
interconnection, which is what internal stability is about.

Signals: reference r, error e = r − ym, controller output u, plant output y, measured
ym = H·y.  The transport delay sits at the plant input.  A 2-DOF pid as first stage
(setpoint weights b, c) gives ``u = C₂···Cₖ·(C_r·r − C₁·ym)``: the reference enters through
its own input matrices on the same states (:func:`_reference_input`), so every pole and
the feedback loop stay those of C·P·H, and every r → y and r → u response uses C_r.
"""

from __future__ import annotations

import functools
import math
import weakref
from collections.abc import Callable
from dataclasses import dataclass
from typing import TypeVar

import numpy as np
from numpy.typing import NDArray

from ..errors import AnalysisError, IllPosedLoopError
from ..lti import Loop, Zpk, _real_sections, _section_ss, _series

Matrix = NDArray[np.float64]
T = TypeVar("T")


@dataclass(frozen=True, slots=True)
class StateSpace:
    """``x' = A x + B u``, ``y = C x + D u`` (inputs and outputs as documented per use)."""

    a: Matrix
    b: Matrix
    c: Matrix
    d: Matrix

    @property
    def order(self) -> int:
        return int(self.a.shape[0])


def _realise_block(blk: Zpk) -> tuple[Matrix, Matrix, Matrix, Matrix]:
    """A series of first/second-order sections, each of gain about one.

    :meth:`Zpk.to_ss` leaves the whole gain at the input of the first section; a plant
    with poles at hundreds of rad/s then carries a gain of 1e50 and more there, and the
    closed-loop matrix becomes so badly scaled that no balancing restores well-conditioned
    eigenvectors.  Here each section is scaled by the power of two nearest to unit gain at
    ``ω₀ = max(1, |roots|)`` (its corner) and only the remainder stays at the input: the
    same transfer function, exactly a power-of-two state scaling of :meth:`Zpk.to_ss`'s.
    """
    if not blk.is_proper:
        raise AnalysisError("an improper block cannot be realised in state space")
    # The plant, the sensor and most stages are the same objects in a variant's loop and
    # in the integral alternative's loops: realise each once.
    try:
        return _BLOCKS[blk]
    except KeyError:
        pass
    out = _realise_sections(blk)
    for arr in out:
        arr.setflags(write=False)
    _BLOCKS[blk] = out
    return out


_BLOCKS: weakref.WeakKeyDictionary[Zpk, tuple[Matrix, Matrix, Matrix, Matrix]] = (
    weakref.WeakKeyDictionary())


def _realise_sections(blk: Zpk) -> tuple[Matrix, Matrix, Matrix, Matrix]:
    A = np.zeros((0, 0))
    B = np.zeros((0, 1))
    C = np.zeros((1, 0))
    D = np.array([[1.0]])
    rest = blk.gain
    for num, den in _real_sections(blk.zeros, blk.poles):
        # |coefficient_k|^(1/k) of the monic factors: the scale of their roots.
        w0 = max([1.0, *(abs(float(c)) ** (1.0 / k) for poly in (num / num[0], den)
                         for k, c in enumerate(poly[1:], start=1) if c != 0)])
        g = abs(np.polyval(den, 1j * w0) / np.polyval(num, 1j * w0))
        # A power of two: the rescaling is exact, so exact zeros (a DC gain of 0) stay.
        g = 2.0 ** round(math.log2(g)) if math.isfinite(g) and g > 0 else 1.0
        a, b, c, d = _section_ss(num * g, den)
        rest /= g
        A, B, C, D = _series(A, B, C, D, a, b, c, d)
    return A, B * rest, C, D * rest


def _realise_chain(blocks: tuple[Zpk, ...]) -> StateSpace:
    A = np.zeros((0, 0))
    B = np.zeros((0, 1))
    C = np.zeros((1, 0))
    D = np.array([[1.0]])
    for blk in blocks:
        a, b, c, d = _realise_block(blk)
        A, B, C, D = _series(A, B, C, D, a, b, c, d)
    return StateSpace(A, B, C, D)


def _controller_blocks(loop: Loop) -> tuple[Zpk, ...]:
    return loop.stages if loop.stages else (loop.controller,)


def _reference_input(loop: Loop, ctrl: StateSpace) -> tuple[Matrix, Matrix]:
    """Input matrices ``(B_r, D_r)`` of the controller chain for the reference.

    Without setpoint weights the reference enters like the error: ``(B, D)`` of ``ctrl``.
    A 2-DOF first stage ``C_r`` has the poles of the first block, so it shares that block's
    realisation ``(A₁, C₁)``; its ``(B₁ᵣ, D₁ᵣ)`` solve ``C₁(sⱼI − A₁)⁻¹B₁ᵣ = C_r(sⱼ) − D₁ᵣ``
    at n₁ real points (observable (A₁, C₁): the pid's realisation is minimal), and the chain
    carries them like the first block's own input (a series connection's A and C do not
    depend on its first block's B and D).  The closed-loop matrix is therefore unchanged.
    """
    ref = loop.reference_first
    if ref is None:
        return ctrl.b, ctrl.d
    a1, _, c1, _ = _realise_block(loop.stages[0])
    n1 = a1.shape[0]
    if ref.poles.size != n1 or ref.zeros.size > n1:
        raise AnalysisError("the reference path does not share the first stage's poles")
    d1 = np.array([[ref.gain if ref.zeros.size == n1 else 0.0]])
    scale = max(1.0, float(np.max(np.abs(np.concatenate([ref.poles, ref.zeros, [1.0]])))))
    pts = scale * (1.0 + np.arange(n1))
    rows = np.array([(c1 @ np.linalg.solve(sj * np.eye(n1) - a1, np.eye(n1)))[0]
                     for sj in pts])
    rhs = np.array([float(ref(np.array([sj]))[0].real) - d1[0, 0] for sj in pts])
    b1 = np.linalg.solve(rows, rhs).reshape(n1, 1) if n1 else np.zeros((0, 1))
    # Check at a complex point off every root: the realisation must be C_r itself.
    s0 = complex(0.37 * scale, 1.3 * scale)
    got = (c1 @ np.linalg.solve(s0 * np.eye(n1) - a1, b1))[0, 0] + d1[0, 0] if n1 else d1[0, 0]
    want = complex(ref(np.array([s0]))[0])
    if not abs(got - want) <= 1e-9 * max(abs(want), abs(d1[0, 0]), 1e-300):
        raise AnalysisError("the reference path could not be realised on the first stage's "
                            "states")
    B, D = b1, d1
    n = n1
    for blk in loop.stages[1:]:
        a, b, _, d = _realise_block(blk)
        B = np.vstack([B, b @ D])
        D = d @ D
        n += a.shape[0]
    if n != ctrl.order:
        raise AnalysisError("the reference path's chain does not match the controller")
    return B, D


def _cached(fn: Callable[[Loop], T]) -> Callable[[Loop], T]:
    """Memoise a function of a loop per loop object (loops are immutable): stability,
    time responses, slow pairs and the integral alternative all ask for the same
    realisation.  Arrays in the result are made read-only, so no caller can spoil it."""
    store: weakref.WeakKeyDictionary[Loop, T] = weakref.WeakKeyDictionary()

    @functools.wraps(fn)
    def wrapper(loop: Loop) -> T:
        try:
            return store[loop]
        except KeyError:
            pass
        value = fn(loop)
        if isinstance(value, np.ndarray):
            arrays = [value]
        elif isinstance(value, StateSpace):
            arrays = [value.a, value.b, value.c, value.d]
        else:
            arrays = [value.zeros, value.poles]        # a Zpk
        for arr in arrays:
            arr.setflags(write=False)
        store[loop] = value
        return value

    return wrapper


@_cached
def delay_split(loop: Loop) -> StateSpace:
    """The loop cut at the delayed plant input.

    Inputs ``[r, w]`` where ``w(t) = u(t − delay)`` is the plant input; outputs ``[y, u]``.
    Closing ``w = u`` with no delay gives the delay-free closed loop.  State order:
    controller, plant, sensor.
    """
    ctrl = _realise_chain(_controller_blocks(loop))
    plant = _realise_chain((loop.plant,))
    sensor = _realise_chain((loop.sensor,))
    nc, npl, nh = ctrl.order, plant.order, sensor.order
    n = nc + npl + nh
    ic, ip, ih = slice(0, nc), slice(nc, nc + npl), slice(nc + npl, n)

    # y = Cp xp + Dp w ; ym = Ch xh + Dh y ; e = r − ym ; u = Cc xc + Dc e
    # Express y, ym, e, u as  M_x x + M_r r + M_w w.
    y_x = np.zeros((1, n))
    y_x[:, ip] = plant.c
    y_w = plant.d
    ym_x = sensor.d @ y_x
    ym_x[:, ih] += sensor.c
    ym_w = sensor.d @ y_w
    # The controller sees −ym through (B, D) and r through (B_r, D_r): the same unless a
    # 2-DOF pid weights the reference (u = C_r·r − C·ym).
    e_x, e_w = -ym_x, -ym_w
    b_r, d_r = _reference_input(loop, ctrl)
    u_x = ctrl.d @ e_x
    u_x[:, ic] += ctrl.c
    u_r, u_w = d_r, ctrl.d @ e_w

    A = np.zeros((n, n))
    Bm = np.zeros((n, 2))
    A[ic, :] += ctrl.b @ e_x
    A[ic, ic] += ctrl.a
    Bm[ic, 0:1] += b_r
    Bm[ic, 1:2] += ctrl.b @ e_w
    A[ip, ip] += plant.a
    Bm[ip, 1:2] += plant.b
    A[ih, :] += sensor.b @ y_x
    A[ih, ih] += sensor.a
    Bm[ih, 1:2] += sensor.b @ y_w
    Cm = np.vstack([y_x, u_x])
    Dm = np.array([[0.0, y_w[0, 0]], [u_r[0, 0], u_w[0, 0]]])
    return StateSpace(A, Bm, Cm, Dm)


@_cached
def closed_loop(loop: Loop) -> StateSpace:
    """Delay-free closed loop from r to ``[y, u]`` (the delay is ignored).

    Raises
    ------
    AnalysisError
        When the loop is not well posed (``1 + L(∞) = 0``).
    """
    return close_split(delay_split(loop))


def close_split(sp: StateSpace) -> StateSpace:
    """Close ``w = u`` of a split loop (no delay): the system from its first input to
    ``[y, u]``.  With the split of :func:`delay_split` the first input is r; the
    disturbance analysis passes a split whose first input is the load."""
    # u = Cu x + Du1 v + Duw u  →  u = (Cu x + Du1 v) / (1 − Duw)
    duw = sp.d[1, 1]
    if abs(1.0 - duw) < 1e-12:
        raise IllPosedLoopError("the loop is not well posed: 1 + L(∞) = 0")
    cu = sp.c[1:2, :] / (1.0 - duw)
    du = sp.d[1, 0] / (1.0 - duw)
    bw = sp.b[:, 1:2]
    a = sp.a + bw @ cu
    b = sp.b[:, 0:1] + bw * du
    c = np.vstack([sp.c[0:1, :] + sp.d[0, 1] * cu, cu])
    d = np.array([[sp.d[0, 0] + sp.d[0, 1] * du], [du]])
    return StateSpace(a, b, c, d)


@_cached
def closed_loop_poles(loop: Loop) -> NDArray[np.complex128]:
    """Eigenvalues of the delay-free closed-loop interconnection (every mode kept)."""
    from scipy import linalg

    ss = closed_loop(loop)
    if ss.order == 0:
        return np.zeros(0, dtype=complex)
    return np.sort_complex(linalg.eigvals(ss.a))


@_cached
def reference_to_output(loop: Loop) -> Zpk:
    """``T_ref(s) = C_r·P / (1 + C·P·H)`` without the delay, in zpk form (``C_r`` the
    reference path, :attr:`.Loop.reference_controller`; ``C`` without setpoint weights).

    Poles are the closed-loop poles of the interconnection; zeros are those of C_r·P plus the
    poles of H (which become zeros of the reference response).  Uncancelled: a mode that the
    loop cancels appears as a pole–zero pair here.
    """
    poles = closed_loop_poles(loop)
    fwd = loop.reference_forward
    zeros = np.concatenate([fwd.zeros, loop.sensor.poles])
    # The gain follows from the high-frequency behaviour: match at a point off every root.
    probe_mag = 1.0 + 2.0 * float(np.max(np.abs(np.concatenate([poles, zeros, [1.0]]))))
    s0 = 0.31 * probe_mag + 1j * probe_mag
    l0 = loop.rational(s0)
    t0 = fwd(s0) / (1.0 + l0)
    monic = np.prod(s0 - zeros) / np.prod(s0 - poles)
    return Zpk(zeros, poles, float((t0 / monic).real))
