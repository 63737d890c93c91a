"""The reference step and the load step with the actuator's limits: windup and its cost.

The loop of DESIGN.md (e = r − ym, u = C·e, y = P·e^{−sT}·u, ym = H·y, the transport delay
at the plant input) with the ``[actuator]`` table between the controller and the delay:

* the controller's demand u is clipped to ``[min, max]``; a rate limit then lets the
  actuator output u_a follow the clipped demand with |du_a/dt| ≤ ``rate_limit``;
* anti-windup acts on the controller's integrating states (below).  **Clamping**
  (conditional integration): the state's derivative is set to zero while u_a ≠ u and its
  input drives u further beyond u_a (same sign as u − u_a through the state's gain to u).
  **Back-calculation**: the state gets the extra input (u_a − u)/(Tt·g), g its DC gain to
  u, so that the integral term in u units tracks u_a − u with time constant Tt
  [memory: Åström & Hägglund, *PID Controllers: Theory, Design and Tuning*, 1995, §3.5].

Integrating states, continuous controllers: pi and pid, the integral of the error; an
integrator stage, its state; a lag stage g(s+z)/(s+p) = g(1 + (z−p)/(s+p)), its pole
state (a leaky integrator, gain g(z−p)); every other stage none.  g multiplies the state's
output coefficient by the DC gain of the stages after it.  A pid stage in first place sees
r and ym separately and applies its setpoint weights b and c (``Stage.params``, default 1):
u = kp(b·r − ym) + (kp/ti)∫(r − ym) + kp·td·s/((td/n)s + 1)(c·r − ym).

Sampled controllers: the digital controller C(z) (continuous stages discretised together,
z stages, as the linear analysis has it; the compute delay after the limits) is split as
C(z) = R/(z − 1) + C₀(z) when it has one pole at z = 1; anti-windup acts on the state of
R/(z − 1), the digital integral, with g = R.

Continuous loops are integrated by the classical Runge–Kutta method at a fixed step h =
delay/N (N whole), h ≤ 1/ρ for every block's and the closed loop's fastest mode ρ; the
delayed actuator output comes from the stored history (exact delay, the value inside a
step interpolated linearly).  Sampled loops are exact between samples: the controller
updates at kT, the clipped and rate-limited output is held, and the plant, sensor and
delay are integrated over each period (and the delay's fraction of it) with the matrix
exponential.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import linalg

from ..design.model import Actuator, Stage, default_tracking_time
from ..errors import AnalysisError
from ..lti import Loop, Zpk
from ..lti_discrete import DiscreteLoop, _hold_integrals
from .closed_loop import _realise_block, _realise_chain, closed_loop_poles
from .time_response import settling_time

Matrix = NDArray[np.float64]

__all__ = ["Simulation", "simulate_continuous", "simulate_sampled", "step_metrics",
           "tracking_time"]

#: Steps of the continuous simulation per horizon (before the stiffness bound).
STEPS = 5000
MAX_STEPS = 100000
#: The limits count as active when |u − u_a| exceeds this fraction of the range.
ACTIVE_TOL = 1e-9


@dataclass(frozen=True, slots=True)
class Controller:
    """Controller state space from ``[r, ym]`` to the demand u; anti-windup states."""

    a: Matrix
    b: Matrix                 # n × 2
    c: Matrix                 # n
    d: Matrix                 # 2
    aw: tuple[tuple[int, float], ...]   # (state index, DC gain from the state to u)


@dataclass(frozen=True, slots=True)
class Simulation:
    """Samples of one simulated run: time, y, demand u, actuator output u_a."""

    time_s: Matrix
    y: Matrix
    u: Matrix
    u_actuator: Matrix


def tracking_time(stages: tuple[Stage, ...], given: float | None) -> float | None:
    """The back-calculation time constant: as given, else the documented default."""
    return given if given is not None else default_tracking_time(stages)


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


# --------------------------------------------------------------------------- limits
@dataclass(frozen=True, slots=True)
class _Limits:
    low: float
    high: float
    rate: float            # inf: no rate limit
    scheme: str
    tt: float

    def actuator(self, u: float, previous: float, dt: float) -> float:
        us = min(max(u, self.low), self.high)
        if self.rate == math.inf:
            return us
        step = self.rate * dt
        return previous + min(max(us - previous, -step), step)


def _limits(act: Actuator | None, stages: tuple[Stage, ...]) -> _Limits:
    if act is None:
        return _Limits(-math.inf, math.inf, math.inf, "none", math.inf)
    tt = tracking_time(stages, act.tracking_time_s) if act.anti_windup == "back_calculation" \
        else math.inf
    if tt is None:
        raise AnalysisError("back-calculation needs a tracking time")
    return _Limits(act.min_value, act.max_value,
                   act.rate_limit_per_s if act.rate_limit_per_s is not None else math.inf,
                   act.anti_windup, tt)


def _anti_windup(dx: Matrix, aw: tuple[tuple[int, float], ...], lim: _Limits, u: float,
                 ua: float, scale: float) -> None:
    """Apply the scheme to the integrating states' increments ``dx`` in place."""
    if lim.scheme == "none" or ua == u:
        return
    excess = u - ua
    for i, g in aw:
        if lim.scheme == "clamping":
            if abs(excess) > ACTIVE_TOL * scale and g * dx[i] * excess > 0:
                dx[i] = 0.0
        else:
            dx[i] += (ua - u) / (lim.tt * g)


# --------------------------------------------------------------------------- continuous
@dataclass(frozen=True, slots=True)
class _Plant:
    """Closed-loop matrices of X = [xc, xp, xh] with the plant input w as an input."""

    a: Matrix
    bw: Matrix            # dX/dw
    b0: Matrix            # dX from the constant inputs (r, loads)
    cu: Matrix            # u = cu·X + duw·w + u0
    duw: float
    u0: float
    cy: Matrix            # y = cy·X + dyw·w + y0
    dyw: float
    y0: float


def _assemble(ctrl: Controller, loop: Loop, r: float, d_in: float, d_out: float) -> _Plant:
    pl = _realise_chain((loop.plant,))
    se = _realise_chain((loop.sensor,))
    nc, npl, nh = ctrl.a.shape[0], pl.order, se.order
    n = nc + npl + nh
    ic, ip, ih = slice(0, nc), slice(nc, nc + npl), slice(nc + npl, n)
    dp, dh = float(pl.d[0, 0]), float(se.d[0, 0])
    # y = Cp xp + Dp (w + d_in) + d_out ; ym = Ch xh + Dh y
    cy = np.zeros(n)
    cy[ip] = pl.c[0]
    y0 = dp * d_in + d_out
    cym = dh * cy
    cym[ih] += se.c[0]
    dymw, ym0 = dh * dp, dh * y0
    cu = ctrl.d[1] * cym
    cu[ic] += ctrl.c
    a = np.zeros((n, n))
    bw, b0 = np.zeros(n), np.zeros(n)
    a[ic, :] += np.outer(ctrl.b[:, 1], cym)
    a[ic, ic] += ctrl.a
    bw[ic] += ctrl.b[:, 1] * dymw
    b0[ic] += ctrl.b[:, 0] * r + ctrl.b[:, 1] * ym0
    a[ip, ip] += pl.a
    bw[ip] += pl.b[:, 0]
    b0[ip] += pl.b[:, 0] * d_in
    a[ih, :] += np.outer(se.b[:, 0], cy)
    a[ih, ih] += se.a
    bw[ih] += se.b[:, 0] * dp
    b0[ih] += se.b[:, 0] * y0
    return _Plant(a, bw, b0, cu, float(ctrl.d[1] * dymw), float(ctrl.d[0] * r + ctrl.d[1] * ym0),
                  cy, dp, y0)


def _step_size(loop: Loop, ctrl: Controller, sys: _Plant, horizon: float, lim: _Limits
               ) -> tuple[float, int, int]:
    """(h, steps, delay steps N) of the fixed-step run."""
    modes = np.abs(linalg.eigvals(sys.a)) if sys.a.size else np.zeros(0)
    rho = max([1.0 / horizon, *modes, *np.abs(closed_loop_poles(loop)),
               1.0 / lim.tt if lim.scheme == "back_calculation" else 0.0])
    h = min(horizon / STEPS, 1.0 / rho)
    n_delay = 0
    if loop.delay_s > 0:
        n_delay = max(1, math.ceil(loop.delay_s / h))
        h = loop.delay_s / n_delay
    steps = math.ceil(horizon / h)
    if steps > MAX_STEPS:
        raise AnalysisError(f"the saturated simulation needs {steps} steps (fast modes "
                            f"against a {horizon:.3g} s horizon); at most {MAX_STEPS}")
    return h, steps, n_delay


def simulate_continuous(loop: Loop, stages: tuple[Stage, ...], act: Actuator | None,
                        horizon: float, *, r: float = 0.0, d_in: float = 0.0,
                        d_out: float = 0.0) -> Simulation:
    """One run from rest: reference step r and load steps at t = 0 (``act`` None: linear)."""
    ctrl = controller_ss(stages)
    lim = _limits(act, stages)
    check_anti_windup(ctrl, stages, lim.scheme)
    sys = _assemble(ctrl, loop, r, d_in, d_out)
    if loop.delay_s == 0 and sys.duw != 0.0:
        raise AnalysisError("the saturated simulation needs a strictly proper plant or "
                            "sensor, a controller without feedthrough, or a delay: the "
                            "limit sits inside an algebraic loop")
    h, steps, nd = _step_size(loop, ctrl, sys, horizon, lim)
    scale = max(abs(lim.low), abs(lim.high), 1.0) if math.isfinite(lim.high) else 1.0
    n = sys.a.shape[0]
    # The constant inputs folded into the state: X = [x, 1].
    a = np.zeros((n + 1, n + 1))
    a[:n, :n], a[:n, n] = sys.a, sys.b0
    bw = np.append(sys.bw, 0.0)
    cu, cy = np.append(sys.cu, sys.u0), np.append(sys.cy, sys.y0)
    lo, hi, rate, duw = lim.low, lim.high, lim.rate, sys.duw
    limited, aw = math.isfinite(rate), ctrl.aw if lim.scheme != "none" else ()
    hist = np.zeros(steps + 1)          # u_a at the step boundaries
    ys, us = np.zeros(steps + 1), np.zeros(steps + 1)
    x = np.zeros(n + 1)
    x[n] = 1.0
    ua_prev = 0.0

    def f(x: Matrix, tau: float, w: float | None) -> tuple[Matrix, float, float]:
        u = float(cu.dot(x)) + (duw * w if w is not None else 0.0)
        ua = lo if u < lo else (hi if u > hi else u)
        if limited:
            move = rate * tau
            ua = ua_prev + max(-move, min(ua - ua_prev, move))
        dx = a.dot(x) + bw * (ua if w is None else w)
        if aw and ua != u:
            _anti_windup(dx, aw, lim, u, ua, scale)
        return dx, u, ua

    def delayed(k: int, frac: float) -> float | None:
        if nd == 0:
            return None
        j = k - nd
        before = hist[j] if j >= 0 else 0.0
        after = hist[j + 1] if j + 1 >= 0 else 0.0
        return before + frac * (after - before)

    w_first = delayed(0, 0.0)
    k1, u, ua = f(x, 0.0, w_first)
    hist[0], us[0] = ua, u
    ys[0] = float(cy.dot(x)) + sys.dyw * (w_first if w_first is not None else ua)
    half = 0.5 * h
    for k in range(steps):
        wm, w1 = delayed(k, 0.5), delayed(k, 1.0)
        k2 = f(x + half * k1, half, wm)[0]
        k3 = f(x + half * k2, half, wm)[0]
        k4 = f(x + h * k3, h, w1)[0]
        x = x + (h / 6.0) * (k1 + 2.0 * (k2 + k3) + k4)
        k1, u, ua = f(x, h, w1)         # u_a at the step's end; the next step's slope
        ua_prev = ua
        hist[k + 1], us[k + 1] = ua, u
        ys[k + 1] = float(cy.dot(x)) + sys.dyw * (w1 if w1 is not None else ua)
    return Simulation(np.arange(steps + 1) * h, ys, us, hist)


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


def simulate_sampled(loop: DiscreteLoop, ctrl: Controller, plant: Zpk, sensor: Zpk | None,
                     delay_s: float, compute_delay: int, stages: tuple[Stage, ...],
                     act: Actuator | None, horizon: float, *, r: float = 0.0,
                     d_in: float = 0.0, d_out: float = 0.0) -> Simulation:
    """One run from rest at the sampling instants kT (u_a held over each period)."""
    T = loop.period_s
    lim = _limits(act, stages)
    lim_z = _Limits(lim.low, lim.high, lim.rate, lim.scheme, lim.tt / T)
    pl = _realise_chain((plant,))
    se = _realise_chain((sensor if sensor is not None else Zpk.constant(1.0),))
    npl, nh = pl.order, se.order
    n = npl + nh
    # Continuous part [xp, xh] with piecewise-constant inputs [w, d_in, d_out].
    a = np.zeros((n, n))
    a[:npl, :npl] = pl.a
    a[npl:, :npl] = np.outer(se.b[:, 0], pl.c[0])
    a[npl:, npl:] = se.a
    dp = float(pl.d[0, 0])
    bcol = np.concatenate([pl.b[:, 0], se.b[:, 0] * dp])
    bmat = np.column_stack([bcol, bcol, np.concatenate([np.zeros(npl), se.b[:, 0]])])
    m = int(math.floor(delay_s / T + 1e-9))
    theta = delay_s - m * T
    theta = 0.0 if theta < 1e-9 * T else theta
    e_a, g_a = _hold_integrals(a, bmat, T - theta)       # w = u_a[k − m] on [kT+θ, (k+1)T)
    e_b, g_b = _hold_integrals(a, bmat, theta)           # w = u_a[k − m − 1] on [kT, kT+θ)
    steps = math.ceil(horizon / T)
    if steps > MAX_STEPS:
        raise AnalysisError(f"the saturated simulation needs {steps} samples; at most "
                            f"{MAX_STEPS}")
    cy = np.concatenate([pl.c[0], np.zeros(nh)])
    cym = float(se.d[0, 0]) * cy
    cym[npl:] += se.c[0]
    dh = float(se.d[0, 0])
    xc, xs = np.zeros(ctrl.a.shape[0]), np.zeros(n)
    lag = compute_delay + m
    held = np.zeros(steps + lag + 2)      # held[k + 1] = u_a applied from step k on
    ys, us, uas = np.zeros(steps + 1), np.zeros(steps + 1), np.zeros(steps + 1)
    scale = max(abs(lim.low), abs(lim.high), 1.0) if math.isfinite(lim.high) else 1.0

    def w_at(j: int) -> float:
        return held[j + 1] if j >= 0 else 0.0

    ua_prev = 0.0
    for k in range(steps + 1):
        w_now = w_at(k - lag - 1)              # held just before kT: sampled first
        y = float(cy @ xs) + dp * (w_now + d_in) + d_out
        ym = float(cym @ xs) + dh * (dp * (w_now + d_in) + d_out)
        u = float(ctrl.c @ xc) + float(ctrl.d[0]) * (r - ym)
        ua = lim.actuator(u, ua_prev, T)
        dx = ctrl.a @ xc + ctrl.b[:, 0] * (r - ym) - xc
        _anti_windup(dx, ctrl.aw, lim_z, u, ua, scale)
        xc = xc + dx
        ys[k], us[k], uas[k] = y, u, ua
        held[k + 1] = ua
        ua_prev = ua
        if k == steps:
            break
        loads = np.array([0.0, d_in, d_out])
        if theta > 0:
            xs = e_b @ xs + g_b @ (loads + [w_at(k - lag - 1), 0.0, 0.0])
        xs = e_a @ xs + g_a @ (loads + [w_at(k - lag), 0.0, 0.0])
    return Simulation(np.arange(steps + 1) * T, ys, us, uas)


# --------------------------------------------------------------------------- figures
def step_metrics(sim: Simulation, final: float, band: float, sampled: bool = False
                 ) -> tuple[float, float]:
    """(settling time in the band, overshoot in % of |final|) of a run.

    Continuous runs interpolate the last exit from the band; sampled runs read the first
    sampling instant after it, as the linear sampled step does.
    """
    yn = sim.y / final
    ts = settling_time(sim.time_s, yn, 1.0, band)
    if sampled and 0.0 < ts < math.inf:
        outside = np.flatnonzero(np.abs(yn - 1.0) > band)
        ts = float(sim.time_s[outside[-1] + 1])
    quiet = np.abs(yn[sim.time_s >= 0.8 * sim.time_s[-1]] - 1.0).max() <= band
    if not (ts <= 0.75 * sim.time_s[-1] and quiet):
        ts = math.inf
    return ts, max(0.0, 100.0 * (float(np.max(yn)) - 1.0))


def _saturated_time(sim: Simulation) -> float:
    scale = max(1.0, float(np.max(np.abs(sim.u))))
    active = np.abs(sim.u - sim.u_actuator) > ACTIVE_TOL * scale
    dt = np.diff(sim.time_s)
    return float(np.sum(dt[active[:-1]]))


def _runner(design, variant):  # type: ignore[no-untyped-def]
    """(run(act, horizon, r, d_in, d_out) -> Simulation, method, step)."""
    from ..design.sampling import controller_blocks

    stages = design.controller
    if design.sampling is None:
        loop = design.continuous_loop(variant)

        def run(act, horizon, **kw):  # type: ignore[no-untyped-def]
            return simulate_continuous(loop, stages, act, horizon, **kw)
        return run, "rk4"
    dloop = design.sampled_loop(variant)
    smp = design.sampling
    blocks = controller_blocks(
        smp, [st.model for st in stages],
        [st.domain for st in stages])
    if smp.compute_delay_samples:
        blocks = blocks[:-1]
    ctrl = digital_controller(stages, dloop, blocks)
    delay = variant.delay_s + design.sensor_delay_s

    def run_z(act, horizon, **kw):  # type: ignore[no-untyped-def]
        return simulate_sampled(dloop, ctrl, variant.model, design.sensor, delay,
                                smp.compute_delay_samples, stages, act, horizon, **kw)
    return run_z, "sampled"


def saturation_response(design, variant, step_metrics_linear, step_curve, disturbance,
                        band: float):  # type: ignore[no-untyped-def]
    """The :class:`~.results.Saturation` of one variant (design with ``[actuator]``).

    ``step_curve`` is the linear unit step's series (plotted beside, scaled by ``step``).
    """
    from .results import SaturatedStep, Saturation, SaturationCurves, TimeSeries
    from .time_response import plot_series

    act = design.actuator
    run, method = _runner(design, variant)
    lin = step_metrics_linear
    final = lin.final_value * act.step
    horizon = max(lin.horizon_s, 3.0 * lin.settling_time_s)
    for _ in range(3):
        sim = run(act, horizon, r=act.step)
        ts, os = step_metrics(sim, final, band, sampled=method == "sampled")
        if math.isfinite(ts):
            break
        horizon *= 2.0
    ref = SaturatedStep(step=act.step, settling_time_s=ts, overshoot_pct=os,
                        linear_settling_time_s=lin.settling_time_s,
                        linear_overshoot_pct=lin.overshoot_pct,
                        windup_cost_s=ts - lin.settling_time_s,
                        u_peak=float(np.max(np.abs(sim.u))),
                        saturated_time_s=_saturated_time(sim), horizon_s=horizon)
    curves = dict(step=plot_series(sim.time_s, sim.y),
                  step_linear=TimeSeries(time_s=step_curve.time_s,
                                         value=step_curve.value * act.step),
                  step_u=plot_series(sim.time_s, sim.u),
                  step_u_actuator=plot_series(sim.time_s, sim.u_actuator))
    load = None
    if disturbance is not None:
        load, more = _load(run, act, design.disturbance, disturbance, horizon,
                           method == "sampled")
        curves.update(more)
    dt = float(sim.time_s[1] - sim.time_s[0])
    tt = (tracking_time(design.controller, act.tracking_time_s)
          if act.anti_windup == "back_calculation" else None)
    return Saturation(min_value=act.min_value, max_value=act.max_value,
                      rate_limit_per_s=act.rate_limit_per_s, anti_windup=act.anti_windup,
                      tracking_time_s=tt, method=method, step_s=dt, reference=ref,
                      load=load, curves=SaturationCurves(**curves))


def _load(run, act, dist, lin, horizon, sampled):  # type: ignore[no-untyped-def]
    from .results import SaturatedLoad
    from .time_response import plot_series

    kw = {"d_in": dist.size} if dist.at == "plant_input" else {"d_out": dist.size}
    horizon = max(horizon, 2.0 * lin.recovery_time_s if math.isfinite(lin.recovery_time_s)
                  else horizon, lin.horizon_s)
    for _ in range(3):
        sim = run(act, horizon, **kw)
        rec = _recovery(sim, lin.static_deviation, lin.recovery_level, sampled)
        if math.isfinite(rec):
            break
        horizon *= 2.0
    # The linear figures from the same simulation without limits: for a sampled loop the
    # linear load analysis feeds the load through the hold (shifted by the delay), here
    # it enters the plant at t = 0 exactly.
    linear = run(None, horizon, **kw)
    out = SaturatedLoad(peak=float(np.max(np.abs(sim.y))),
                        linear_peak=float(np.max(np.abs(linear.y))), recovery_time_s=rec,
                        linear_recovery_time_s=_recovery(linear, lin.static_deviation,
                                                         lin.recovery_level, sampled),
                        u_peak=float(np.max(np.abs(sim.u))),
                        saturated_time_s=_saturated_time(sim))
    return out, dict(load=plot_series(sim.time_s, sim.y),
                     load_linear=plot_series(linear.time_s, linear.y),
                     load_u_actuator=plot_series(sim.time_s, sim.u_actuator))


def _recovery(sim: Simulation, y_inf: float, level: float, sampled: bool) -> float:
    """Last exit of |y − y∞| > level (inf: outside at the end or in the last fifth);
    sampled runs: the first sampling instant after it."""
    dev = np.abs(sim.y - y_inf)
    out = np.flatnonzero(dev > level)
    if out.size == 0:
        return 0.0
    k = int(out[-1])
    if k == dev.size - 1 or sim.time_s[k] > 0.8 * sim.time_s[-1]:
        return math.inf
    if sampled:
        return float(sim.time_s[k + 1])
    t0, t1, d0, d1 = sim.time_s[k], sim.time_s[k + 1], dev[k], dev[k + 1]
    return float(t0 + (t1 - t0) * (d0 - level) / (d0 - d1)) if d0 != d1 else float(t0)


CHECKS = ("saturated_response",)


def with_saturation(design, variant, a, band: float):  # type: ignore[no-untyped-def]
    """``a`` with its saturated responses, or why they are missing (n/a or undecided)."""
    import dataclasses
    from types import MappingProxyType

    from .undecided import NUMERIC_ERRORS, has_nan

    na, undecided, errors = dict(a.not_applicable), dict(a.undecided), dict(a.errors)
    why = None
    if design.actuator is None:
        na["saturated_response"] = "the design has no [actuator] table"
    elif variant.measured is not None:
        na["saturated_response"] = ("a measured plant has no model to simulate the "
                                    "saturated loop with")
    elif a.step is None or a.curves is None:
        why = ("no linear step response to compare with: "
               + a.errors.get("step", "the closed loop is not stable"))
    else:
        try:
            with np.errstate(all="ignore"):
                sat = saturation_response(design, variant, a.step, a.curves.step,
                                          a.disturbance, band)
            if has_nan(sat.reference) or (sat.load is not None and has_nan(sat.load)):
                raise AnalysisError("the saturated simulation gave NaN (not a number)")
            return dataclasses.replace(a, saturation=sat)
        except (*NUMERIC_ERRORS, AnalysisError) as exc:
            errors["saturation"] = f"{type(exc).__name__}: {exc}"
            why = f"the saturated response could not be computed: {exc}"
    if why is not None:
        undecided["saturated_response"] = why
    return dataclasses.replace(a, not_applicable=MappingProxyType(na),
                               undecided=MappingProxyType(undecided), errors=errors)
