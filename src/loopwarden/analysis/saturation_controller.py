"""State-space realisations of the controller stages for the saturated simulation
(continuous and sampled), with the anti-windup states.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..design.model import Stage
from ..errors import AnalysisError
from ..lti import Zpk
from ..lti_discrete import DiscreteLoop
from .closed_loop import _realise_block

Matrix = NDArray[np.float64]


@dataclass(frozen=True, slots=True)
class Controller:
    """Controller state space from ``[r, ym]`` to the demand u; anti-windup states."""

    a: Matrix
    b: Matrix                 # n × 2
    c: Matrix                 # n
    d: Matrix                 # 2
    aw: tuple[tuple[int, float], ...]   # (state index, DC gain from the state to u)


# --------------------------------------------------------------------------- controller
def _dc_gain(models: list[Zpk]) -> float:
    g = 1.0
    for m in models:
        if np.any(m.poles == 0):
            return math.inf
        if np.any(m.zeros == 0):
            return 0.0
        g *= float((m.gain * np.prod(-m.zeros) / np.prod(-m.poles)).real)
    return g


def _stage_ss(st: Stage, first: bool) -> tuple[Matrix, Matrix, Matrix, Matrix, int | None,
                                                float]:
    """(a, b[n×2], c, d[2], integrating state, its output coefficient) of one stage.

    The two inputs are [r, ym] for the first stage and [v, 0] (the previous output) after.
    """
    p = st.params
    if st.type == "pid" and first:
        kp, ti, td, n = (float(p[k]) for k in ("kp", "ti", "td", "n"))
        bw, cw = float(p.get("b", 1.0)), float(p.get("c", 1.0))
        if td == 0.0:
            return (np.zeros((1, 1)), np.array([[1.0, -1.0]]), np.array([kp / ti]),
                    np.array([kp * bw, -kp]), 0, kp / ti)
        tf = td / n
        return (np.diag([0.0, -1.0 / tf]), np.array([[1.0, -1.0], [cw / tf, -1.0 / tf]]),
                np.array([kp / ti, -kp * n]), np.array([kp * (bw + n * cw), -kp * (1 + n)]),
                0, kp / ti)
    if st.type == "pid" and (float(p.get("b", 1.0)) != 1.0 or float(p.get("c", 1.0)) != 1.0):
        raise AnalysisError(f"{st.name}: setpoint weights b, c act only in the first stage, "
                            "where the reference enters")
    if st.type in ("pi", "pid", "integrator", "lag"):
        if st.type == "lag":
            g, z, pl = st.model.gain, float(p["zero"]), float(p["pole"])
            a, b, c, d, coef = [[-pl]], [[1.0]], [g * (z - pl)], [g], g * (z - pl)
        elif st.type == "integrator":
            a, b, c, d, coef = [[0.0]], [[1.0]], [float(p["k"])], [0.0], float(p["k"])
        elif st.type == "pi" or float(p["td"]) == 0.0:
            kp, ti = float(p["kp"]), float(p["ti"])
            a, b, c, d, coef = [[0.0]], [[1.0]], [kp / ti], [kp], kp / ti
        else:
            kp, ti, td, n = (float(p[k]) for k in ("kp", "ti", "td", "n"))
            tf = td / n
            a, b = [[0.0, 0.0], [0.0, -1.0 / tf]], [[1.0], [1.0 / tf]]
            c, d, coef = [kp / ti, -kp * n], [kp * (1 + n)], kp / ti
        a_, b_, c_, d_ = (np.array(x, dtype=float) for x in (a, b, c, d))
        state: int | None = 0
    else:
        ra, rb, rc, rd = _realise_block(st.model)
        a_, b_, c_, d_ = np.array(ra), np.array(rb), np.array(rc)[0], np.array(rd)[0]
        state, coef = None, 0.0
    sign = -1.0 if first else 0.0
    return a_, np.hstack([b_, sign * b_]), c_, np.array([d_[0], sign * d_[0]]), state, coef


def controller_ss(stages: tuple[Stage, ...]) -> Controller:
    """The continuous controller (s-domain stages in series) with its integrating states."""
    a = np.zeros((0, 0))
    b = np.zeros((0, 2))
    c = np.zeros(0)
    d = np.array([1.0, -1.0])
    pending: list[tuple[int, float, int]] = []      # (state, coefficient, stage position)
    for k, st in enumerate(stages):
        sa, sb, sc, sd, state, coef = _stage_ss(st, k == 0)
        n0, ns = a.shape[0], sa.shape[0]
        if k == 0:
            a, b, c, d = sa, sb, sc, sd
        else:
            # The stage's input is the signal so far: v = c x + d [r, ym].
            big = np.zeros((n0 + ns, n0 + ns))
            big[:n0, :n0] = a
            big[n0:, :n0] = np.outer(sb[:, 0], c)
            big[n0:, n0:] = sa
            b = np.vstack([b, np.outer(sb[:, 0], d)])
            c = np.concatenate([sd[0] * c, sc])
            d = sd[0] * d
            a = big
        if state is not None:
            pending.append((n0 + state, coef, k))
    aw = []
    for index, coef, k in pending:
        g = coef * _dc_gain([st.model for st in stages[k + 1:]])
        if not (math.isfinite(g) and g != 0.0):
            g = math.nan                  # no anti-windup possible: see check_anti_windup
        aw.append((index, g))
    return Controller(a, b, c, d, tuple(aw))


def check_anti_windup(ctrl: Controller, stages: tuple[Stage, ...], scheme: str) -> None:
    """An anti-windup scheme needs a finite, nonzero gain from each integrating state to u."""
    if scheme != "none" and any(math.isnan(g) for _, g in ctrl.aw):
        raise AnalysisError("an integrating stage is followed by stages without a finite, "
                            "nonzero DC gain (e.g. another integrator): its anti-windup "
                            "gain is undefined")


# --------------------------------------------------------------------------- sampled
def digital_controller(stages: tuple[Stage, ...], loop: DiscreteLoop, sampling_blocks: list[Zpk]
                       ) -> Controller:
    """C(z) (no compute delay) as R/(z − 1) + C₀(z), state 0 the digital integral.

    Inputs [e, 0]: a sampled controller sees the error only (setpoint weights are not
    applied in z).  Without a pole at z = 1 there is no integrating state.
    """
    for st in stages:
        if st.type == "pid" and (float(st.params.get("b", 1.0)) != 1.0
                                 or float(st.params.get("c", 1.0)) != 1.0):
            raise AnalysisError(f"{st.name}: setpoint weights are not simulated in a "
                                "sampled controller")
    c = Zpk.constant(1.0)
    for blk in sampling_blocks:
        c = c * blk
    num, den = np.real(np.poly(c.zeros)) * c.gain, np.real(np.poly(c.poles))
    at_one = int(np.sum(np.abs(c.poles - 1.0) < 1e-9))
    if at_one == 1:
        rest_den = np.polydiv(den, [1.0, -1.0])[0]
        residue = float(np.polyval(num, 1.0) / np.polyval(rest_den, 1.0))
        q, rem = np.polydiv(np.polysub(num, residue * rest_den), [1.0, -1.0])
        a0, b0, c0, d0 = _tf_ss(q, rest_den)
        n0 = a0.shape[0]
        a = np.zeros((n0 + 1, n0 + 1))
        a[0, 0] = 1.0
        a[1:, 1:] = a0
        b = np.concatenate([[1.0], b0])
        return Controller(a, np.column_stack([b, -b]), np.concatenate([[residue], c0]),
                          np.array([d0, -d0]), ((0, residue),))
    a0, b0, c0, d0 = _tf_ss(num, den)
    return Controller(a0, np.column_stack([b0, -b0]), c0, np.array([d0, -d0]), ())


def _tf_ss(num: Matrix, den: Matrix) -> tuple[Matrix, Matrix, Matrix, float]:
    num = np.atleast_1d(np.trim_zeros(np.asarray(num, dtype=float), "f")) if np.any(num) \
        else np.zeros(1)
    if len(den) == 1:
        return np.zeros((0, 0)), np.zeros(0), np.zeros(0), float(num[-1] / den[0])
    from scipy import signal  # imported here: scipy.signal alone costs ~0.7 s to import

    a, b, c, d = signal.tf2ss(num, den)
    return (np.atleast_2d(a).reshape(len(den) - 1, len(den) - 1), np.ravel(b),
            np.ravel(c), float(np.ravel(d)[0]) if np.size(d) else 0.0)
