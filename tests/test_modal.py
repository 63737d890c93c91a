"""The modal step response and its segmented grid against closed forms, scipy's matrix
exponential, zpk residues and python-control."""

from __future__ import annotations

import math
import warnings

import control
import numpy as np
import pytest
from scipy import linalg, optimize

from loopwarden.analysis.closed_loop import reference_to_output
from loopwarden.analysis.modal import modal_form
from loopwarden.analysis.time_response import (
    RATIONAL_STEPS,
    RationalResponse,
    grid_segments,
    segment_times,
    step_response,
)
from loopwarden.lti import Loop, Zpk

BAND = 0.02


def unity_loop(plant: Zpk, *stages: Zpk) -> Loop:
    ctrl = Zpk.constant(1.0)
    for st in stages:
        ctrl = ctrl * st
    return Loop(plant=plant, controller=ctrl, sensor=Zpk.constant(1.0),
                stages=tuple(stages) or (Zpk.constant(1.0),))


def test_transients_match_scipy_expm():
    # reference: scipy.linalg.expm of random stable matrices, C e^{At} x at several t
    rng = np.random.default_rng(3)
    for _ in range(20):
        n = int(rng.integers(2, 9))
        q = rng.normal(size=(n, n))
        a = q @ np.diag(-rng.uniform(0.1, 20.0, n)) @ np.linalg.inv(q)
        a += 0.3 * rng.normal(size=(n, n))
        if np.max(np.linalg.eigvals(a).real) >= -1e-3:
            continue
        b = rng.normal(size=(n, 1))
        c = rng.normal(size=(1, n))
        x_inf = -np.linalg.solve(a, b)
        b1 = np.linalg.solve(a, x_inf)
        form = modal_form(a, x_inf, b1, c, float(np.abs(c @ x_inf).max()) + 1.0)
        assert form is not None
        for t in (0.0, 0.013, 0.4, 3.0):
            e = linalg.expm(a * t)
            step, ramp = form.transient(t)
            assert step == pytest.approx(float((c @ e @ x_inf)[0, 0]), abs=1e-10)
            assert ramp == pytest.approx(float((c @ e @ b1)[0, 0]), abs=1e-10)


def test_critically_damped_loop_takes_the_exponential_path():
    # 1/(s(s+2)) closes to 1/(s+1)²: a defective closed-loop matrix, so no modal form.
    # Closed form [derived]: y = 1 − e^{−t}(1 + t).
    loop = unity_loop(Zpk([], [0.0, -2.0], 1.0))
    assert RationalResponse.of_loop(loop).modes is None
    m = step_response(loop, BAND).metrics

    def y(t: float) -> float:
        return 1.0 - math.exp(-t) * (1.0 + t)

    t10 = optimize.brentq(lambda t: y(t) - 0.1, 0.0, 10.0)
    t90 = optimize.brentq(lambda t: y(t) - 0.9, 0.0, 10.0)
    ts = optimize.brentq(lambda t: math.exp(-t) * (1.0 + t) - BAND, 1.0, 20.0)
    assert m.rise_time_s == pytest.approx(t90 - t10, rel=1e-9)
    assert m.settling_time_s == pytest.approx(ts, rel=1e-9)
    assert m.overshoot_pct == 0.0


def twelfth_order_loop() -> Loop:
    """An integrator, a 3 rad/s pole and five modes at 20–400 rad/s (plant gain ~1e25)
    under lead, lag and lowpass: the realisation the overflow came from."""
    modes = [(25.0, 0.3), (60.0, 0.2), (120.0, 0.5), (220.0, 0.25), (380.0, 0.4)]
    poles: list[complex] = [0.0, -3.0]
    for wn, z in modes:
        poles += [complex(-z * wn, wn * math.sqrt(1 - z * z)),
                  complex(-z * wn, -wn * math.sqrt(1 - z * z))]
    gain = 3.0 * math.prod(wn * wn for wn, _ in modes)
    plant = Zpk([], poles, gain)
    lead = Zpk([-0.5], [-5.0], 10.0)
    lag = Zpk([-0.08], [-0.008], 1.0)
    lowpass = Zpk([], [-200.0], 200.0)
    return unity_loop(plant, Zpk.constant(0.6), lead, lag, lowpass)


def test_high_order_loop_against_zpk_residues_without_overflow():
    # Independent: y(t) = y∞ + Σ Res[T(s)/s, p] e^{pt} from the zpk of T (no state
    # space), sampled finely; peak and 10 %/90 % instants by brentq on that formula.
    loop = twelfth_order_loop()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        m = step_response(loop, BAND).metrics
    t_ref = reference_to_output(loop)
    p, z, k = t_ref.poles, t_ref.zeros, t_ref.gain
    res = np.array([k * np.prod(pi - z) / (pi * np.prod(pi - np.delete(p, i)))
                    for i, pi in enumerate(p)])
    y_inf = float(np.real(k * np.prod(-z) / np.prod(-p)))

    def y(t: float) -> float:
        return (y_inf + float(np.real(np.sum(res * np.exp(p * t))))) / y_inf

    t = np.linspace(0.0, 30.0, 300_001)
    yy = np.real(y_inf + np.exp(np.outer(t, p)) @ res) / y_inf
    i = int(np.argmax(yy))
    tp = optimize.minimize_scalar(lambda s: -y(s), bounds=(t[i - 1], t[i + 1]),
                                  method="bounded", options={"xatol": 1e-12}).x
    assert m.final_value == pytest.approx(y_inf, rel=1e-9)
    assert m.overshoot_pct == pytest.approx(100.0 * (y(tp) - 1.0), rel=1e-8)
    assert m.peak_time_s == pytest.approx(tp, rel=1e-6)
    t10 = optimize.brentq(lambda s: y(s) - 0.1, 0.0, t[np.flatnonzero(yy >= 0.1)[0]])
    t90 = optimize.brentq(lambda s: y(s) - 0.9, 0.0, t[np.flatnonzero(yy >= 0.9)[0]])
    assert m.rise_time_s == pytest.approx(t90 - t10, rel=1e-8)


def test_segments_are_fine_only_where_a_fast_mode_lives():
    # Crossover near 1000 rad/s under a lag whose tail lasts minutes: the fast closed-loop
    # modes matter for a fraction of a second of a horizon of hundreds of seconds.
    loop = unity_loop(Zpk([], [0.0, -4000.0], 4e6), Zpk([-0.1], [-0.01], 1.0))
    m = step_response(loop, BAND).metrics
    t_ref = reference_to_output(loop)
    segs = grid_segments(t_ref, m.horizon_s, m.final_value, BAND)
    t = segment_times(segs)
    assert t[0] == 0.0 and t[-1] == pytest.approx(m.horizon_s) and np.all(np.diff(t) > 0)
    steps = np.diff(t)
    assert steps[0] < steps[-1] / 10                  # fine at the start, coarse later
    assert steps.max() <= m.horizon_s / RATIONAL_STEPS * (1 + 1e-9)
    fastest = float(np.max(np.abs(t_ref.poles)))
    assert t.size < 0.5 * min(m.horizon_s * fastest / 0.1, 1e6)   # a fraction of one grid
    # python-control on a uniform grid fine enough for the fastest mode everywhere
    lo = loop.rational
    cl = control.feedback(control.zpk(lo.zeros, lo.poles, lo.gain), 1)
    tt = np.linspace(0.0, m.horizon_s, 2_000_001)
    info = control.step_info(cl, T=tt, SettlingTimeThreshold=BAND, RiseTimeLimits=(0.1, 0.9))
    dt = tt[1] - tt[0]
    assert m.overshoot_pct == pytest.approx(info["Overshoot"], abs=1e-3)
    assert m.settling_time_s == pytest.approx(info["SettlingTime"], abs=2 * dt)
    assert m.rise_time_s == pytest.approx(info["RiseTime"], abs=2 * dt)
