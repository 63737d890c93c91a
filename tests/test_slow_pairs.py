"""Slow closed-loop pole–zero pairs: poles, residues and tail times against
REFERENCE_VALUES.md, polynomial algebra (numpy/scipy) and python-control simulations."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy import signal

from loopwarden.analysis.closed_loop import reference_to_output
from loopwarden.analysis.slow_pairs import CRITERIA, slow_tail
from loopwarden.analysis.time_response import step_response
from loopwarden.lti import Loop, Zpk

BAND = 0.02


def make_loop(plant: Zpk, *stages: Zpk, sensor: Zpk | None = None,
              delay: float = 0.0) -> Loop:
    ctrl = Zpk.constant(1.0)
    for st in stages:
        ctrl = ctrl * st
    return Loop(plant=plant, controller=ctrl, sensor=sensor or Zpk.constant(1.0),
                delay_s=delay, stages=tuple(stages))


def poly(z: Zpk) -> tuple[np.ndarray, np.ndarray]:
    return z.gain * np.real(np.poly(z.zeros)), np.real(np.poly(z.poles))


def independent_t(loop: Loop) -> tuple[np.ndarray, np.ndarray]:
    """T = C·P·D_H / (D_C·D_P·D_H + N_C·N_P·N_H) by polynomial algebra (numpy)."""
    nc, dc = poly(loop.controller)
    np_, dp = poly(loop.plant)
    nh, dh = poly(loop.sensor)
    num = np.polymul(np.polymul(nc, np_), dh)
    den = np.polyadd(np.polymul(np.polymul(dc, dp), dh), np.polymul(np.polymul(nc, np_), nh))
    return num, den


def independent_pair(loop: Loop, near: complex) -> tuple[complex, float, float]:
    """Closed-loop pole near ``near`` (np.roots), its step residue and ramp-error residue
    (scipy.signal.residue of T(s)/s and of (1 − T(s))/s²)."""
    num, den = independent_t(loop)
    roots = np.roots(den)
    pole = roots[np.argmin(np.abs(roots - near))]
    r, p, _ = signal.residue(num, np.polymul(den, [1.0, 0.0]))
    res = r[np.argmin(np.abs(p - pole))]
    r2, p2, _ = signal.residue(np.polysub(den, num), np.polymul(den, [1.0, 0.0, 0.0]))
    ramp = r2[np.argmin(np.abs(p2 - pole))]
    return complex(pole), float(res.real), float(ramp.real)


OGATA = make_loop(Zpk([], [0.0, -1.0, -2.0], 2.0), Zpk.constant(0.5), Zpk([-0.1], [-0.01], 1.0))
FPE = make_loop(Zpk([], [0.0, -1.0], 1.0), Zpk([-0.1], [-0.01], 1.0))


def test_ogata_lag_slow_pair():
    # Ogata, Modern Control Engineering, lag design [memory, matched]: closed-loop poles
    # −0.2859 ± j0.5196, −0.1228, −2.3155; zero −0.1; slow residue +0.2857; tail
    # ln(0.2857/0.02)/0.12281 = 21.7 s; 2 % settling 22.0 s.
    poles = np.sort_complex(reference_to_output(OGATA).poles)
    expect = np.sort_complex(np.array([-2.3155, -0.2859 - 0.5196j, -0.2859 + 0.5196j,
                                       -0.1228]))
    assert np.allclose(poles, expect, atol=1e-4)
    step = step_response(OGATA, BAND)
    tail = slow_tail(OGATA, step, BAND)
    assert len(tail.pairs) == 1
    pair = tail.pairs[0]
    assert pair.pole.real == pytest.approx(-0.12281, abs=5e-6)
    assert pair.zero == pytest.approx(-0.1)
    assert pair.residue == pytest.approx(0.2857, abs=5e-5)
    assert pair.tail_time_s == pytest.approx(21.7, abs=0.05)
    assert pair.time_constant_s == pytest.approx(1 / 0.12281, rel=1e-4)
    assert tail.settling_time_s == pytest.approx(22.0, abs=0.05)
    # the tail time reproduces the simulated settling when the pair dominates (3 %)
    assert pair.tail_time_s == pytest.approx(tail.settling_time_s, rel=0.03)
    assert tail.criteria == CRITERIA


def test_fpe_lag_slow_pair():
    # Franklin, Powell & Emami-Naeini, lag example [derived]: poles −0.4501 ± 0.8418j,
    # −0.10975; zero −0.1; slow residue +0.1077; settling 14.8 s.
    poles = np.sort_complex(reference_to_output(FPE).poles)
    expect = np.sort_complex(np.array([-0.4501 - 0.8418j, -0.4501 + 0.8418j, -0.10975]))
    assert np.allclose(poles, expect, atol=1e-4)
    tail = slow_tail(FPE, step_response(FPE, BAND), BAND)
    (pair,) = tail.pairs
    assert pair.pole.real == pytest.approx(-0.10975, abs=5e-6)
    assert pair.residue == pytest.approx(0.1077, abs=5e-5)
    assert tail.settling_time_s == pytest.approx(14.8, abs=0.05)
    # formula of REFERENCE_VALUES.md "Slow-pair tail" [derived]
    assert pair.tail_time_s == pytest.approx(math.log(pair.residue / BAND) / 0.1097452, rel=1e-5)


# Lag loops that are not in the repository (our own scenarios).
NEW_LAG_LOOPS = [
    pytest.param(make_loop(Zpk([], [0.0, -5.0], 20.0), Zpk.constant(1.0),
                           Zpk([-0.2], [-0.02], 1.0)), -0.2, id="conveyor-axis"),
    pytest.param(make_loop(Zpk([], [-1.0, -5.0], 20.0), Zpk.constant(2.0),
                           Zpk([-0.3], [-0.03], 1.0)), -0.3, id="tank-level-type0"),
    pytest.param(make_loop(Zpk([], [0.0, -1 + 2.828j, -1 - 2.828j], 9.0), Zpk.constant(0.5),
                           Zpk([-0.05], [-0.005], 1.0)), -0.05, id="gimbal-resonant"),
    pytest.param(make_loop(Zpk([], [0.0, -2.0], 1.0), Zpk.constant(3.0),
                           Zpk([-0.1], [-0.02], 1.0), sensor=Zpk([], [-10.0], 10.0)), -0.1,
                 id="pump-with-sensor"),
    pytest.param(make_loop(Zpk([], [0.0, -10.0], 100.0), Zpk([-0.5], [-0.05], 1.0)), -0.5,
                 id="spindle"),
]


@pytest.mark.parametrize(("loop", "zero"), NEW_LAG_LOOPS)
def test_new_lag_loops_against_independent_algebra(loop, zero):
    step = step_response(loop, BAND)
    tail = slow_tail(loop, step, BAND)
    (pair,) = tail.pairs
    pole, res, ramp = independent_pair(loop, zero)
    assert pair.zero == pytest.approx(zero)
    # issue thresholds: pole 0.2 %, residue 2 %, tail 3 %; the algebra agrees far closer
    assert abs(pair.pole - pole) <= 0.002 * abs(pole)
    assert pair.pole == pytest.approx(pole, rel=1e-7)
    assert pair.residue == pytest.approx(res, rel=0.02)
    assert pair.residue == pytest.approx(res, rel=1e-6)
    assert pair.ramp_residue == pytest.approx(ramp, rel=1e-6)
    y_inf = float(np.polyval(independent_t(loop)[0], 0) / np.polyval(independent_t(loop)[1], 0))
    tail_ref = math.log(abs(res) / (BAND * abs(y_inf))) / abs(pole.real)
    assert pair.tail_time_s == pytest.approx(tail_ref, rel=0.03)
    assert pair.tail_time_s == pytest.approx(tail_ref, rel=1e-6)


@pytest.mark.parametrize(("loop", "zero"), NEW_LAG_LOOPS)
def test_tail_time_against_python_control_settling(loop, zero):
    # In these loops the slow pair dominates the settling: the tail time is within 3 % of
    # the 2 % settling time python-control's step_info finds on a fine grid.
    num, den = independent_t(loop)
    cl = control.tf(num, den)
    step = step_response(loop, BAND)
    (pair,) = slow_tail(loop, step, BAND).pairs
    t = np.linspace(0.0, step.metrics.horizon_s, 100_001)
    info = control.step_info(cl, T=t, SettlingTimeThreshold=BAND)
    assert pair.tail_time_s == pytest.approx(info["SettlingTime"], rel=0.03)


@pytest.mark.parametrize(("loop", "zero"), NEW_LAG_LOOPS[:3])
def test_settling_without_tail_against_python_control(loop, zero):
    # y(t) − r e^{pt} from python-control's response and scipy's residue; last exit on a
    # fine grid.
    num, den = independent_t(loop)
    cl = control.tf(num, den)
    pole, res, _ = independent_pair(loop, zero)
    step = step_response(loop, BAND)
    tail = slow_tail(loop, step, BAND)
    t = np.linspace(0.0, step.metrics.horizon_s, 200_001)
    y = control.step_response(cl, T=t).outputs - res * np.exp(pole.real * t)
    y_inf = float(control.dcgain(cl))
    k = int(np.flatnonzero(np.abs(y - y_inf) > BAND * abs(y_inf))[-1])
    assert tail.settling_time_without_tail_s == pytest.approx(t[k], abs=2 * (t[1] - t[0]))
    assert tail.settling_time_without_tail_s < 0.6 * tail.settling_time_s


def test_complex_slow_pair_amplitude():
    # A low-frequency boost with complex roots, (s²+0.1s+0.012)/(s²+0.06s+0.01), on
    # 20/(s(s+5)): a complex closed-loop pair near the complex zeros.  Its envelope
    # amplitude is 2|Res| (scipy.signal.residue), reported once for the pair.
    loop = make_loop(Zpk([], [0.0, -5.0], 20.0), Zpk.from_tf([1, 0.1, 0.012], [1, 0.06, 0.01]))
    (pair,) = slow_tail(loop, step_response(loop, BAND), BAND).pairs
    assert pair.pole.imag > 0 and pair.zero.imag > 0
    num, den = independent_t(loop)
    r, p, _ = signal.residue(num, np.polymul(den, [1.0, 0.0]))
    k = int(np.argmin(np.abs(p - pair.pole)))
    assert pair.pole == pytest.approx(p[k], rel=1e-7)
    assert pair.residue == pytest.approx(2 * abs(r[k]), rel=1e-6)
    assert pair.tail_time_s == 0.0            # 2|r| ≈ 0.0103 < band 0.02


def test_tail_formula_zero_below_band():
    # [derived] a residue smaller than the band gives a zero tail time: a lag with its
    # pole and zero close together (β = 1.05) leaves a tail too small to matter.
    loop = make_loop(Zpk([], [0.0, -1.0], 1.0), Zpk([-0.105], [-0.1], 1.0))
    tail = slow_tail(loop, step_response(loop, BAND), BAND)
    (pair,) = tail.pairs
    assert abs(pair.residue) < BAND
    assert pair.tail_time_s == 0.0


def test_no_pair_without_lag():
    # standard second order: no closed-loop zero at all
    loop = make_loop(Zpk([], [0.0, -1.0], 1.0))
    tail = slow_tail(loop, step_response(loop, BAND), BAND)
    assert tail.pairs == ()
    assert tail.settling_time_without_tail_s == tail.settling_time_s


def test_fast_pole_near_zero_is_not_slow():
    # A lead zero near a fast plant pole leaves a nearly cancelled closed-loop pair that is
    # fast, not slow: 20(s+10.5)/(s+50) on 1/(s(s+1)(s+10)).
    loop = make_loop(Zpk([], [0.0, -1.0, -10.0], 1.0), Zpk([-10.5], [-50.0], 20.0))
    t_ref = reference_to_output(loop)
    near = [p for p in t_ref.poles if abs(p + 10.5) < 0.3 * abs(p)]
    assert near, "expected a closed-loop pole near the lead zero"
    # the dominant (slowest uncancelled) poles are slower than it, not 3× faster
    assert min(abs(p) for p in t_ref.poles if p not in near) < abs(near[0])
    tail = slow_tail(loop, step_response(loop, BAND), BAND)
    assert tail.pairs == ()


def test_delay_loop_slow_pair_against_mpmath_and_the_exact_simulation():
    """L = (s + 0.1)/(s(s + 1)(s + 0.01))·e^{−0.2 s}: the slow root near the lag zero.

    Reference [derived]: the root of s(s + 1)(s + 0.01) + (s + 0.1)e^{−0.2 s} = 0 by
    mpmath.findroot at 40 digits, its residue r = C·P·e^{−sT}/(s·L'(s)) with L' by
    mpmath's numerical differentiation (not the analytic form the code uses), and the
    tail against the exact-delay step simulation: y(t) − y∞ − r·e^{pt} must be small
    against r·e^{pt} once the other modes have died out.
    """
    import mpmath as mp

    loop = make_loop(Zpk([], [0.0, -1.0], 1.0), Zpk([-0.1], [-0.01], 1.0), delay=0.2)
    step = step_response(loop, BAND)
    tail = slow_tail(loop, step, BAND)
    assert len(tail.pairs) == 1
    pair = tail.pairs[0]
    mp.mp.dps = 40

    def lf(s):
        return (s + mp.mpf("0.1")) / (s * (s + 1) * (s + mp.mpf("0.01"))) * mp.exp(-s / 5)

    p_ref = mp.findroot(lambda s: 1 + lf(s), mp.mpf("-0.1"))
    r_ref = lf(p_ref) / (p_ref * mp.diff(lf, p_ref))
    assert pair.pole.real == pytest.approx(float(p_ref), rel=1e-12)
    assert pair.pole.imag == 0.0 and pair.zero == -0.1
    assert pair.residue == pytest.approx(float(r_ref), rel=1e-9)
    expected_tail = math.log(abs(float(r_ref)) / BAND) / -float(p_ref)
    assert pair.tail_time_s == pytest.approx(expected_tail, rel=1e-9)
    # the simulated response (exact delay) carries that term
    t, y = step.step.time_s, step.step.value
    late = (t > 0.5 * t[-1]) & (t < 0.8 * t[-1])
    term = float(r_ref) * np.exp(float(p_ref) * t[late])
    assert np.max(np.abs(y[late] - 1.0 - term)) < 1e-3 * np.max(np.abs(term))
