"""Simulation of a loop with a dead time: the loop is cut at the delayed plant input and
advanced block by block (first-order hold on the delayed signal).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import linalg

from ..lti import FloatArray
from .closed_loop import (
    StateSpace,
)

#: Samples advanced together by one linear solve in the delay simulation.
DELAY_BLOCK = 64


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
