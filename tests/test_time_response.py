"""Closed-loop step and ramp responses against closed forms, python-control and
independent simulations of delay loops."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from numpy.polynomial import Polynomial
from scipy import integrate, optimize

from loopwarden.analysis.time_response import step_response
from loopwarden.errors import AnalysisError
from loopwarden.lti import Loop, Zpk

BAND = 0.02


def make_loop(plant: Zpk, *stages: Zpk, delay: float = 0.0, sensor: Zpk | None = None) -> Loop:
    ctrl = Zpk.constant(1.0)
    for st in stages:
        ctrl = ctrl * st
    return Loop(plant=plant, controller=ctrl, sensor=sensor or Zpk.constant(1.0),
                delay_s=delay, stages=tuple(stages) or (Zpk.constant(1.0),))


OGATA_PLANT = Zpk([], [0.0, -1.0, -2.0], 2.0)            # 1/(s(s+1)(0.5s+1))
OGATA_LAG = (Zpk.constant(0.5), Zpk([-0.1], [-0.01], 1.0))  # 5(10s+1)/(100s+1)
FPE_PLANT = Zpk([], [0.0, -1.0], 1.0)                    # 1/(s(s+1))
FPE_LAG = Zpk([-0.1], [-0.01], 1.0)                      # 10(10s+1)/(100s+1) / 10


# --------------------------------------------------------------------------- second order
def second_order_loop(zeta: float) -> Loop:
    # ωn²/(s(s + 2ζωn)) with ωn = 1 closes to the standard second order.
    return make_loop(Zpk([], [0.0, -2.0 * zeta], 1.0))


def second_order_settling(zeta: float, band: float) -> float:
    """Exact last exit of the closed-form response from the band (grid + brentq)."""
    wd = math.sqrt(1 - zeta ** 2)
    phi = math.acos(zeta)

    def dev(t: float) -> float:
        return math.exp(-zeta * t) / wd * math.sin(wd * t + phi)

    t = np.linspace(0.0, 60.0, 600_001)
    d = np.exp(-zeta * t) / wd * np.sin(wd * t + phi)
    k = int(np.flatnonzero(np.abs(d) > band)[-1])
    level = band if d[k] > 0 else -band
    return optimize.brentq(lambda s: dev(s) - level, t[k], t[k + 1], xtol=1e-13)


# REFERENCE_VALUES.md "Time response", standard second order, ωn = 1 [derived]
SECOND_ORDER = [
    pytest.param(0.3, 37.23, 3.293, 11.23, id="derived-zeta0.3"),
    pytest.param(0.5, 16.30, 3.628, 8.08, id="derived-zeta0.5"),
    pytest.param(0.7, 4.60, 4.399, 5.98, id="derived-zeta0.7"),
]


@pytest.mark.parametrize(("zeta", "overshoot", "peak", "settling"), SECOND_ORDER)
def test_second_order_table(zeta, overshoot, peak, settling):
    m = step_response(second_order_loop(zeta), BAND).metrics
    # table values, to their printed rounding
    assert m.overshoot_pct == pytest.approx(overshoot, abs=0.005)
    assert m.peak_time_s == pytest.approx(peak, abs=0.0005)
    assert m.settling_time_s == pytest.approx(settling, abs=0.005)
    # closed forms [derived]: Mp = exp(−πζ/√(1−ζ²)), tp = π/ωd, settling by brentq
    wd = math.sqrt(1 - zeta ** 2)
    assert m.overshoot_pct == pytest.approx(100 * math.exp(-math.pi * zeta / wd), rel=1e-9)
    assert m.peak_time_s == pytest.approx(math.pi / wd, rel=1e-9)
    assert m.settling_time_s == pytest.approx(second_order_settling(zeta, BAND), rel=1e-9)
    assert m.final_value == pytest.approx(1.0, rel=1e-12)
    # ramp error of ωn²/(s(s+2ζωn)) tends to 1/Kv = 2ζ/ωn [derived]
    assert m.ramp_error_final == pytest.approx(2 * zeta, rel=1e-3)


def test_first_order_rule_of_thumb():
    a = 2.5
    m = step_response(make_loop(Zpk([], [0.0], a)), BAND).metrics   # T = a/(s+a)
    assert m.settling_time_s == pytest.approx(math.log(1 / BAND) / a, rel=1e-9)  # [derived]
    assert m.settling_time_s == pytest.approx(4.0 / a, rel=0.03)  # 4/a rule [practice]
    assert m.overshoot_pct == 0.0 and m.peak_time_s is None
    assert m.rise_time_s == pytest.approx(math.log(9.0) / a, rel=1e-9)  # [derived]


# --------------------------------------------------------------------------- lag examples
def test_ogata_lag_design():
    # Ogata, Modern Control Engineering, lag design by Bode diagram [memory, matched]:
    # overshoot 34.8 %, 2 % settling 22.0 s; Kv = 5 so the ramp error tends to 0.2.
    m = step_response(make_loop(OGATA_PLANT, *OGATA_LAG), BAND).metrics
    assert m.overshoot_pct == pytest.approx(34.8, abs=0.05)
    assert m.settling_time_s == pytest.approx(22.0, abs=0.05)
    assert m.ramp_error_final == pytest.approx(0.2, rel=5e-4)
    assert m.exact_delay is False


def test_fpe_lag_example():
    # Franklin, Powell & Emami-Naeini, lag example [derived]: overshoot 27.8 %, settling
    # 14.8 s; without the lag 1/(s(s+1)) settles in 8.08 s.
    m = step_response(make_loop(FPE_PLANT, FPE_LAG), BAND).metrics
    assert m.overshoot_pct == pytest.approx(27.8, abs=0.05)
    assert m.settling_time_s == pytest.approx(14.8, abs=0.05)
    m0 = step_response(make_loop(FPE_PLANT), BAND).metrics
    assert m0.settling_time_s == pytest.approx(8.08, abs=0.005)


# --------------------------------------------------------------------------- python-control
def random_stable_loops(count: int, seed: int = 11):
    rng = np.random.default_rng(seed)
    found = 0
    while found < count:
        poles = list(-rng.uniform(0.05, 8.0, size=int(rng.integers(2, 4))))
        if rng.random() < 0.5:
            poles.append(0.0)
        if rng.random() < 0.4:
            re, im = -rng.uniform(0.2, 3.0), rng.uniform(0.5, 4.0)
            poles += [complex(re, im), complex(re, -im)]
        zeros = list(-rng.uniform(0.1, 10.0, size=int(rng.integers(0, 2))))
        # loop gain at DC (or Kv) of order one, relative to the corner frequencies
        scale = np.prod([abs(p) for p in poles if p != 0]) / np.prod(np.abs(zeros))
        gain = float(rng.uniform(0.2, 3.0) * scale)
        plant = Zpk(zeros, poles, gain)
        sys = control.zpk(zeros, poles, gain)
        cl = control.feedback(sys, 1)
        if np.max(np.real(control.poles(cl))) < -1e-3 and abs(control.dcgain(cl)) > 1e-6:
            found += 1
            yield make_loop(plant), cl


RANDOM_LOOPS = list(random_stable_loops(8))


@pytest.mark.parametrize("case", range(8))
def test_metrics_against_python_control(case):
    loop, cl = RANDOM_LOOPS[case]
    res = step_response(loop, BAND)
    m = res.metrics
    t = np.linspace(0.0, m.horizon_s, 100_001)
    dt = t[1] - t[0]
    # python-control step_info on a fine, long grid (reference: grid resolution dt)
    info = control.step_info(cl, T=t, SettlingTimeThreshold=BAND, RiseTimeLimits=(0.1, 0.9))
    assert m.final_value == pytest.approx(float(control.dcgain(cl)), rel=1e-9)
    assert m.overshoot_pct == pytest.approx(info["Overshoot"], abs=1e-3)
    assert m.settling_time_s == pytest.approx(info["SettlingTime"], abs=2 * dt)
    assert m.rise_time_s == pytest.approx(info["RiseTime"], abs=2 * dt)
    if m.peak_time_s is not None:
        assert m.peak_time_s == pytest.approx(info["PeakTime"], abs=max(2 * dt, 1e-3))
    # the plotted series is the response python-control computes at those instants
    y_ref = np.interp(res.step.time_s, t, control.step_response(cl, T=t).outputs)
    assert np.max(np.abs(res.step.value - y_ref)) < 1e-6 * max(1.0, abs(m.final_value))


def test_series_are_thinned_for_plots():
    res = step_response(make_loop(OGATA_PLANT, *OGATA_LAG), BAND)
    assert 1000 < res.step.time_s.size <= 4001
    assert res.step.time_s[-1] == pytest.approx(res.metrics.horizon_s)
    assert res.ramp_error.time_s.size == res.step.time_s.size
    # ramp error at the horizon end is the reported final value
    assert res.ramp_error.value[-1] == pytest.approx(res.metrics.ramp_error_final)


# --------------------------------------------------------------------------- delay loops
def method_of_steps_pi_integrator(t: np.ndarray) -> np.ndarray:
    """Exact y(t) of P = e^{−s}/(s+1) under PI 0.5(1 + 1/s): L = 0.5e^{−s}/s, so
    y'(t) = 0.5(1 − y(t − 1)) for t > 1 and y = 0 before; piecewise polynomials."""
    pieces = [Polynomial([0.0])]
    while len(pieces) < int(t[-1]) + 2:
        prev = pieces[-1]
        integrand = 0.5 * (Polynomial([1.0]) - prev)
        pieces.append(prev(1.0) + integrand.integ())
    k = np.minimum(np.floor(t).astype(int), len(pieces) - 1)
    return np.array([pieces[i](x - i) for i, x in zip(k, t, strict=True)])


def test_delay_loop_exact_against_method_of_steps():
    # independent: exact piecewise-polynomial solution of the delay equation [derived]
    loop = make_loop(Zpk([], [-1.0], 1.0), Zpk([-1.0], [0.0], 0.5), delay=1.0)
    res = step_response(loop, BAND)
    y_ref = method_of_steps_pi_integrator(res.step.time_s)
    assert np.max(np.abs(res.step.value - y_ref)) < 1e-6
    assert res.metrics.exact_delay is True
    t = np.linspace(0.0, res.metrics.horizon_s, 400_001)
    y = method_of_steps_pi_integrator(t)
    over = 100 * (y.max() - 1.0)
    k = int(np.flatnonzero(np.abs(y - 1) > BAND)[-1])
    assert res.metrics.overshoot_pct == pytest.approx(over, rel=0.01)
    assert res.metrics.settling_time_s == pytest.approx(t[k], rel=0.01)
    # ramp error of a type-1 loop with Kv = 0.5 tends to 2 (delay does not change Kv)
    assert res.metrics.ramp_error_final == pytest.approx(2.0, rel=1e-3)


def solve_ivp_fopdt_pi(t_eval: np.ndarray, kp: float, ti: float, k: float, tau: float,
                       delay: float) -> np.ndarray:
    """y(t) of k e^{−s·delay}/(tau s + 1) under kp(1 + 1/(ti s)), r = 1(t), by the method
    of steps with scipy solve_ivp dense output as the delayed history."""
    segments: list = []

    def u_of(s: float) -> float:
        if s <= 0 or not segments:
            return 0.0
        i = min(int(s // delay), len(segments) - 1)
        y, z = segments[i].sol(s)
        return kp * ((1.0 - y) + z / ti)

    x0 = np.zeros(2)
    t_end = t_eval[-1]
    n = int(math.ceil(t_end / delay))
    for i in range(n):
        a, b = i * delay, (i + 1) * delay

        def rhs(t, x):
            y, _ = x
            return [(-y + k * u_of(t - delay)) / tau, 1.0 - y]

        sol = integrate.solve_ivp(rhs, (a, b), x0, method="DOP853", dense_output=True,
                                  rtol=1e-11, atol=1e-13)
        segments.append(sol)
        x0 = sol.y[:, -1]
    idx = np.minimum((t_eval // delay).astype(int), n - 1)
    return np.array([segments[i].sol(s)[0] for i, s in zip(idx, t_eval, strict=True)])


def test_fopdt_under_pi_against_solve_ivp():
    # FOPDT 2e^{−0.5s}/(3s+1) under PI kp = 0.8, ti = 2.5 (no cancellation)
    kp, ti, k, tau, delay = 0.8, 2.5, 2.0, 3.0, 0.5
    plant = Zpk([], [-1.0 / tau], k / tau)
    pi = Zpk([-1.0 / ti], [0.0], kp)
    res = step_response(make_loop(plant, pi, delay=delay), BAND)
    y_ref = solve_ivp_fopdt_pi(res.step.time_s, kp, ti, k, tau, delay)
    assert np.max(np.abs(res.step.value - y_ref)) < 1e-4
    t = np.linspace(0.0, res.metrics.horizon_s, 100_001)
    y = solve_ivp_fopdt_pi(t, kp, ti, k, tau, delay)
    k_out = int(np.flatnonzero(np.abs(y - 1) > BAND)[-1])
    assert res.metrics.overshoot_pct == pytest.approx(100 * (y.max() - 1.0), rel=0.01)
    assert res.metrics.settling_time_s == pytest.approx(t[k_out], rel=0.01)
    k10 = int(np.flatnonzero(y >= 0.1)[0])
    k90 = int(np.flatnonzero(y >= 0.9)[0])
    assert res.metrics.rise_time_s == pytest.approx(t[k90] - t[k10], rel=0.01)


def test_biproper_plant_with_delay_keeps_the_delayed_jumps():
    # 0.5(s+3)/(s+1)·e^{−s} under PI 0.6(1 + 1/(2s)): the plant passes the controller's
    # jump straight through, so y jumps at t = 1, 2, … (a neutral delay equation).
    # Independent: method of steps with solve_ivp; the delayed input is evaluated from
    # the earlier segments' dense output, jumps included (right limits at the samples).
    kp, ti, tau = 0.6, 2.0, 1.0
    pi = Zpk([-1 / ti], [0.0], kp)
    res = step_response(make_loop(Zpk([-3.0], [-1.0], 0.5), pi, delay=tau), BAND)
    segments: list = []

    def states(ts: np.ndarray) -> np.ndarray:
        out = np.zeros((2, ts.size))
        for i, sol in enumerate(segments):
            m = (ts >= i * tau) & ((ts < (i + 1) * tau) | (i == len(segments) - 1))
            if m.any():
                out[:, m] = sol.sol(ts[m])
        return out

    def u_at(ts: np.ndarray) -> np.ndarray:
        u = np.zeros(ts.size)
        m = ts >= 0
        if m.any():
            xp, z = states(ts[m])
            y = 0.5 * (u_at(ts[m] - tau) + 2 * xp)
            u[m] = kp * ((1 - y) + z / ti)
        return u

    x0 = np.zeros(2)
    for i in range(int(math.ceil(res.metrics.horizon_s / tau))):
        def rhs(t, x):
            w = u_at(np.array([t - tau]))[0]
            y = 0.5 * (w + 2 * x[0])
            return [-x[0] + w, 1 - y]

        sol = integrate.solve_ivp(rhs, (i * tau, (i + 1) * tau), x0, method="DOP853",
                                  dense_output=True, rtol=1e-10, atol=1e-12)
        segments.append(sol)
        x0 = sol.y[:, -1]
    t = res.step.time_s
    y_ref = 0.5 * (u_at(t - tau) + 2 * states(t)[0])
    assert np.max(np.abs(res.step.value - y_ref)) < 1e-6
    # the jump D_plant·D_controller = 0.3 at t = delay is kept, not smeared over a step
    after = int(np.searchsorted(t, tau * (1 - 1e-12)))
    assert res.step.value[after - 1] == pytest.approx(0.0, abs=1e-12)
    assert res.step.value[after] - res.step.value[after - 1] > 0.5 * kp * 0.99


# --------------------------------------------------------------------------- errors
def test_bad_band_and_zero_dc_gain_raise():
    with pytest.raises(AnalysisError):
        step_response(second_order_loop(0.5), 0.0)
    # a controller zero at s = 0 makes the reference-to-output DC gain zero
    loop = make_loop(Zpk([], [-1.0, -2.0], 4.0), Zpk([0.0], [-3.0], 1.0))
    with pytest.raises(AnalysisError, match="zero DC gain"):
        step_response(loop, BAND)


def test_unstable_rational_loop_raises():
    # 10/(s(s+1)(s+2)): gain margin 6/10 < 1, closed loop unstable [derived: Routh]
    with pytest.raises(AnalysisError, match="not stable"):
        step_response(make_loop(Zpk([], [0.0, -1.0, -2.0], 10.0)), BAND)


def test_static_loop():
    # a pure gain 3 under unity feedback: y = 3/4 at once, nothing to settle [derived]
    m = step_response(make_loop(Zpk.constant(3.0)), BAND).metrics
    assert m.final_value == pytest.approx(0.75)
    assert m.settling_time_s == 0.0 and m.overshoot_pct == 0.0 and m.rise_time_s == 0.0
