"""System type and error constants against REFERENCE_VALUES.md and python-control."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from loopwarden.analysis.tracking import compute_tracking
from loopwarden.lti import Loop, Zpk


def tf_loop(num: list[float], den: list[float], *, delay: float = 0.0,
            sensor: Zpk | None = None) -> Loop:
    """Unity controller around a plant given as a tf (the loop is the plant)."""
    plant = Zpk.from_tf(num, den)
    one = Zpk.constant(1.0)
    return Loop(plant=plant, controller=one, sensor=sensor or one, delay_s=delay,
                stages=(one,))


# Error-constant table of REFERENCE_VALUES.md ("Tracking (error constants)").
TABLE = [
    # [derived] 10/((s+1)(s+2)): type 0, Kp = 5, step error 1/6
    pytest.param([10.0], [1.0, 3.0, 2.0], 0, "kp", 5.0, "step_error", 1.0 / 6.0,
                 id="derived-type0-Kp5"),
    # [derived] 10(s+1)/(s²(s+10)): type 2, Ka = 1
    pytest.param([10.0, 10.0], [1.0, 10.0, 0.0, 0.0], 2, "ka", 1.0, "parabola_error", 1.0,
                 id="derived-type2-Ka1"),
    # Ogata, Modern Control Engineering, lag design by Bode diagram [memory]:
    # 5(10s+1)/(s(s+1)(0.5s+1)(100s+1)): type 1, Kv = 5, ramp error 0.2
    pytest.param([50.0, 5.0],
                 list(np.polymul(np.polymul([1.0, 0.0], [1.0, 1.0]),
                                 np.polymul([0.5, 1.0], [100.0, 1.0]))),
                 1, "kv", 5.0, "ramp_error", 0.2, id="ogata-lag-Kv5"),
]


@pytest.mark.parametrize(("num", "den", "typ", "const", "value", "err", "err_value"), TABLE)
def test_error_constant_table(num, den, typ, const, value, err, err_value):
    tr = compute_tracking(tf_loop(num, den))
    assert tr.system_type == typ
    assert getattr(tr, const) == pytest.approx(value, rel=1e-12)
    assert getattr(tr, err) == pytest.approx(err_value, rel=1e-12)


def test_constants_above_and_below_the_type():
    # [derived] type 1: Kp infinite, Ka zero; step error 0, parabola error infinite.
    tr = compute_tracking(tf_loop([50.0, 5.0], [50.0, 150.5, 101.5, 1.0, 0.0]))
    assert tr.system_type == 1
    assert tr.kp == math.inf and tr.step_error == 0.0
    assert tr.ka == 0.0 and tr.parabola_error == math.inf
    # type 0: Kv = Ka = 0, ramp error infinite
    tr0 = compute_tracking(tf_loop([10.0], [1.0, 3.0, 2.0]))
    assert tr0.kv == 0.0 and tr0.ka == 0.0 and tr0.ramp_error == math.inf
    # type 2: Kp = Kv = inf, zero step and ramp errors
    tr2 = compute_tracking(tf_loop([10.0, 10.0], [1.0, 10.0, 0.0, 0.0]))
    assert tr2.kp == math.inf and tr2.kv == math.inf
    assert tr2.step_error == 0.0 and tr2.ramp_error == 0.0


def test_net_zero_at_origin_is_negative_type():
    # [derived] s/(s+1)²: a net zero at s = 0, type −1, Kp = 0, step error 1.
    tr = compute_tracking(tf_loop([1.0, 0.0], [1.0, 2.0, 1.0]))
    assert tr.system_type == -1
    assert tr.kp == 0.0 and tr.step_error == 1.0


def test_delay_and_sensor_pole_do_not_change_constants():
    # [derived] e^{-sT} = 1 at s = 0; a sensor 1/(0.01s+1) has unit DC gain.
    lag_sensor = Zpk([], [-100.0], 100.0)
    base = compute_tracking(tf_loop([50.0, 5.0], [50.0, 150.5, 101.5, 1.0, 0.0]))
    other = compute_tracking(tf_loop([50.0, 5.0], [50.0, 150.5, 101.5, 1.0, 0.0],
                                     delay=0.3, sensor=lag_sensor))
    assert other.system_type == base.system_type == 1
    assert other.kv == pytest.approx(base.kv, rel=1e-14)
    assert other.kp == base.kp == math.inf


def test_against_python_control_limits():
    # python-control: s^m·L(s) evaluated close to s = 0 (reference, limited by the probe).
    rng = np.random.default_rng(7)
    for _ in range(20):
        typ = int(rng.integers(0, 3))
        zeros = -rng.uniform(0.2, 20.0, size=int(rng.integers(0, 3)))
        poles = np.concatenate([np.zeros(typ), -rng.uniform(0.1, 30.0, size=3)])
        gain = float(rng.uniform(0.5, 50.0))
        sys = control.zpk(zeros, poles, gain)
        loop = Loop(plant=Zpk(zeros, poles, gain), controller=Zpk.constant(1.0),
                    sensor=Zpk.constant(1.0))
        tr = compute_tracking(loop)
        s0 = 1e-7
        ref = float(np.real(sys(s0) * s0 ** typ))
        assert tr.system_type == typ
        assert (tr.kp, tr.kv, tr.ka)[typ] == pytest.approx(ref, rel=1e-5)
