"""The nonlinear simulations with the [actuator] limits: continuous (fixed step) and
sampled, with anti-windup.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from ..design.model import Actuator, Stage, default_tracking_time
from ..errors import AnalysisError
from ..lti import Loop, Zpk
from ..lti_discrete import DiscreteLoop, _hold_integrals
from .closed_loop import _realise_chain, closed_loop_poles
from .saturation_controller import Controller, Matrix, check_anti_windup, controller_ss

#: Steps of the continuous simulation per horizon (before the stiffness bound).
STEPS = 5000
MAX_STEPS = 100000


#: The limits count as active when |u − u_a| exceeds this fraction of the range.
ACTIVE_TOL = 1e-9


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
