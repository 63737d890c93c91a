"""Closed-loop stability: eigenvalues and the Nyquist count against independent references.

References: REFERENCE_VALUES.md closed-loop poles [memory]/[derived]; closed-form stability
boundaries [derived]; the roots of first-order delay loops from the Lambert W function
(scipy.special.lambertw); the eigenvalue count of the delay-free loop for the Nyquist
count on rational loops.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import lambertw

from loopwarden.analysis.stability import closed_loop_stability, nyquist_count
from loopwarden.lti import Loop, Zpk

ONE = Zpk.constant(1.0)


def loop(zeros, poles, gain, delay=0.0, controller=ONE) -> Loop:
    return Loop(plant=Zpk(zeros, poles, gain), controller=controller, sensor=ONE,
                delay_s=delay, stages=(controller,))


def sorted_roots(x):
    x = np.asarray(x, dtype=complex)
    return x[np.lexsort((x.imag, x.real))]


def assert_rounded(got, printed, digits: int = 4):
    """Real and imaginary parts agree to the rounding of the printed digits."""
    got, printed = sorted_roots(got), sorted_roots(printed)
    half = 0.5 * 10.0**-digits + 1e-12
    assert got.real == pytest.approx(printed.real, abs=half)
    assert got.imag == pytest.approx(printed.imag, abs=half)


# --------------------------------------------------------------------------- rational
def test_ogata_lag_closed_loop_poles_memory():
    """Ogata lag design [memory, matched]: −0.2859 ± j0.5196, −0.1228, −2.3155."""
    lag = Zpk([-0.1], [-0.01], 0.5)
    st = closed_loop_stability(loop([], [0, -1, -2], 2.0, controller=lag))
    assert st.method == "poles" and st.closed_loop_stable and not st.marginal
    assert_rounded(st.closed_loop_poles, [-2.3155, -0.2859 - 0.5196j, -0.2859 + 0.5196j,
                                          -0.1228])


def test_fpe_lag_closed_loop_poles_derived():
    """FPE lag example [derived]: −0.4501 ± 0.8418j, −0.10975."""
    st = closed_loop_stability(loop([-0.1], [0, -1, -0.01], 1.0))
    poles = sorted_roots(st.closed_loop_poles)
    assert_rounded(poles[:2], [-0.4501 - 0.8418j, -0.4501 + 0.8418j])
    assert_rounded(poles[2:], [-0.10975], digits=5)


def test_unstable_loop_poles_and_nyquist_agree_derived():
    """10/(s(s+1)(s+2)) is unstable (Routh: 3·2 < 10) [derived]: two right-half-plane
    poles by eigenvalues; the Nyquist count gives N = 2, P = 0, Z = 2."""
    lp = loop([], [0, -1, -2], 10.0)
    st = closed_loop_stability(lp)
    assert not st.closed_loop_stable and st.rhp_closed_loop_poles == 2
    nc = nyquist_count(lp)
    assert (nc.clockwise_encirclements, nc.open_loop_rhp_poles, nc.rhp_closed_loop_poles) \
        == (2, 0, 2)


def test_double_integrator_is_marginal_derived():
    """1/s²: closed-loop poles ±j exactly [derived]; on the axis → not stable, marginal."""
    st = closed_loop_stability(loop([], [0, 0], 1.0))
    assert st.marginal and not st.closed_loop_stable
    assert sorted_roots(st.closed_loop_poles) == pytest.approx([-1j, 1j], abs=1e-12)


def test_cancelled_integrator_is_marginal():
    """A controller zero at the origin cancels the plant integrator: the hidden mode stays
    at s = 0 in closed loop [derived], which the eigenvalues keep."""
    washout = Zpk([0.0], [-1.0], 1.0)
    st = closed_loop_stability(loop([], [0.0, -2.0], 1.0, controller=washout))
    assert st.marginal and not st.closed_loop_stable


def test_unstable_cancellation_stays_unstable():
    """Plant pole +1 cancelled by a controller zero: L looks stable but the interconnection
    keeps the mode at +1 [derived]."""
    ctrl = Zpk([1.0], [-5.0], 4.0)
    lp = loop([], [1.0, -2.0], 1.0, controller=ctrl)
    st = closed_loop_stability(lp)
    assert not st.closed_loop_stable and st.rhp_closed_loop_poles == 1
    assert np.min(np.abs(np.asarray(st.closed_loop_poles) - 1.0)) < 1e-9
    assert nyquist_count(lp).rhp_closed_loop_poles == 1


def test_improper_controller_uses_characteristic_polynomial_derived():
    """PD without filter 2(s+1) on 1/(s(s+3)): s² + 5s + 2 = 0 [derived]."""
    pd = Zpk([-1.0], [], 2.0)
    st = closed_loop_stability(loop([], [0, -3], 1.0, controller=pd))
    ref = sorted_roots(np.roots([1, 5, 2]))
    assert st.closed_loop_stable
    assert sorted_roots(st.closed_loop_poles) == pytest.approx(ref, rel=1e-12)


def random_rational_loop(rng: np.random.Generator) -> Loop:
    """Integrators, undamped modes, unstable and lightly damped roots, either gain sign."""
    poles: list[complex] = []
    for _ in range(int(rng.integers(1, 5))):
        u = rng.random()
        w = 10 ** rng.uniform(-1, 1)
        if u < 0.15:
            poles.append(0.0)
        elif u < 0.25:
            poles += [1j * w, -1j * w]
        elif u < 0.6:
            poles.append(-w if rng.random() < 0.8 else w)
        else:
            z = rng.uniform(-0.9, 0.9) if rng.random() < 0.8 else rng.uniform(0.005, 0.05)
            r = complex(-z * w, w * math.sqrt(1 - z * z))
            poles += [r, r.conjugate()]
    zeros = [(-1 if rng.random() < 0.8 else 1) * 10 ** rng.uniform(-1, 1)
             for _ in range(int(rng.integers(0, len(poles))))]
    gain = 10 ** rng.uniform(-2, 2) * (1 if rng.random() < 0.85 else -1)
    return loop(zeros, poles, gain)


def test_nyquist_count_matches_eigenvalues_on_random_rational_loops():
    """Z from the Nyquist count = number of right-half-plane eigenvalues of the
    delay-free interconnection (independent method), on 150 seeded random loops with
    integrators, undamped modes and open-loop unstable poles."""
    rng = np.random.default_rng(20240611)
    compared = 0
    for _ in range(150):
        lp = random_rational_loop(rng)
        st = closed_loop_stability(lp)
        if st.marginal:
            continue
        nc = nyquist_count(lp)
        assert nc.rhp_closed_loop_poles == st.rhp_closed_loop_poles, (
            lp.rational.zeros, lp.rational.poles, lp.rational.gain)
        compared += 1
    assert compared > 120


# --------------------------------------------------------------------------- delay
def lambert_rhp_roots(k: float, a: float, delay: float) -> int:
    """Right-half-plane roots of s − a + k·e^(−sT) = 0: s = a + W_n(−kT·e^(−aT))/T."""
    x = -k * delay * math.exp(-a * delay)
    roots = [a + complex(lambertw(x, n)) / delay for n in range(-60, 61)]
    return sum(r.real > 0 for r in roots)


@pytest.mark.parametrize(("k", "a", "delay"), [
    (1.0, 0.0, 0.5), (1.0, 0.0, 1.5), (1.0, 0.0, 1.6), (1.0, 0.0, 8.0),
    (2.0, 1.0, 0.5), (2.0, 1.0, 0.7), (2.0, 1.0, 3.0), (0.5, 1.0, 0.1),
    (3.0, -1.0, 0.2), (3.0, -1.0, 2.0), (20.0, -1.0, 0.5),
], ids=lambda v: f"{v:g}")
def test_first_order_delay_loops_against_lambert_w(k, a, delay):
    """k·e^(−sT)/(s − a): Nyquist count = right-half-plane roots from the Lambert W
    branches (scipy.special.lambertw) [derived]."""
    st = closed_loop_stability(loop([], [a], k, delay=delay))
    assert st.method == "nyquist"
    assert st.rhp_closed_loop_poles == lambert_rhp_roots(k, a, delay)
    assert st.open_loop_rhp_poles == (1 if a > 0 else 0)
    assert st.closed_loop_stable == (st.rhp_closed_loop_poles == 0)


def test_integrator_delay_boundary_derived():
    """k·e^(−sT)/s is stable iff kT < π/2 [derived]."""
    for kt in (1.5, 1.57, 1.572, 2.0):
        st = closed_loop_stability(loop([], [0.0], kt, delay=1.0))
        assert st.closed_loop_stable == (kt < math.pi / 2)


def test_unstable_plant_delay_boundary_derived():
    """k·e^(−sT)/(s − 1), k = 2: stable iff T < acos(1/k)/√(k² − 1) = 0.6046 s [derived]."""
    t_max = math.acos(0.5) / math.sqrt(3.0)
    assert closed_loop_stability(loop([], [1.0], 2.0, delay=0.99 * t_max)).closed_loop_stable
    assert not closed_loop_stability(loop([], [1.0], 2.0, delay=1.01 * t_max)).closed_loop_stable


def test_pure_delay_static_gain_derived():
    """1 + k·e^(−sT) = 0 has roots Re s = ln(k)/T [derived]: 0.5·e^(−s) is stable;
    2·e^(−s) is a neutral loop (|L(j∞)| ≥ 1) and is reported unstable with no count."""
    assert closed_loop_stability(loop([], [], 0.5, delay=1.0)).closed_loop_stable
    st = closed_loop_stability(loop([], [], 2.0, delay=1.0))
    assert not st.closed_loop_stable and st.rhp_closed_loop_poles is None
    assert "neutral" in st.note


def test_delay_loop_with_undamped_mode_and_integrator():
    """k(s + 0.5)(s + 3)·e^(−0.1s)/(s(s² + 4)(s + 10)) — indentations at 0 and ±2j; stable
    only for intermediate k.  Reference: closed-loop poles of the rational loop with the
    python-control Padé approximation of order 10 of the delay (accurate far beyond the
    loop's bandwidth for T = 0.1 s)."""
    control = pytest.importorskip("control")
    zeros, poles = [-0.5, -3.0], [0.0, 2j, -2j, -10.0]
    num, den = control.pade(0.1, 10)
    counts = []
    for k in (2.0, 20.0, 80.0):
        rat = control.tf(np.real(np.poly(zeros)) * k, np.real(np.poly(poles)))
        cl = control.feedback(rat * control.tf(num, den), 1)
        ref = int(np.sum(np.real(cl.poles()) > 0))
        st = closed_loop_stability(loop(zeros, poles, k, delay=0.1))
        assert st.rhp_closed_loop_poles == ref
        assert st.open_loop_imag_axis_poles == 3
        counts.append(ref)
    assert counts == [2, 0, 2]


def test_delay_loop_hidden_modes():
    """Exact cancellations under a delay: a hidden +1 mode counts in Z; a hidden
    integrator makes the loop marginal [derived]."""
    st = closed_loop_stability(loop([], [1.0], 1.0, delay=0.5,
                                    controller=Zpk([1.0], [-2.0], 0.5)))
    assert not st.closed_loop_stable and st.rhp_closed_loop_poles == 1
    st = closed_loop_stability(loop([], [0.0], 1.0, delay=0.5,
                                    controller=Zpk([0.0], [-1.0], 0.5)))
    assert st.marginal and not st.closed_loop_stable


def test_delay_loop_at_its_delay_margin_is_marginal_derived():
    """e^(−Ts)/s with T = π/2 puts a root exactly on the axis at ω = 1 [derived]."""
    st = closed_loop_stability(loop([], [0.0], 1.0, delay=math.pi / 2))
    assert st.marginal and not st.closed_loop_stable


def rectangle_count(poles, zeros, gain, delay, size):
    """Roots of D(s) + k·N(s)·e^(−sT) in [0, size] × [−size, size] by the argument
    principle on the rectangle's boundary (plain numpy; no poles inside, since the
    quasi-polynomial is entire) [derived]."""
    t = np.linspace(0.0, 1.0, 200_001)
    z = np.concatenate([-1j * size + size * t, size - 1j * size + 2j * size * t,
                        size + 1j * size - size * t, 1j * size - 2j * size * t])

    def poly(s, roots):
        return np.prod([s - r for r in roots], axis=0) if roots else np.ones_like(s)

    v = poly(z, poles) + gain * poly(z, zeros) * np.exp(-z * delay)
    winding = float(np.sum(np.angle(v[1:] / v[:-1]))) / (2 * math.pi)
    assert abs(winding - round(winding)) < 1e-6
    # Right-half-plane roots need |k·N/D| ≥ 1 (|e^(−sT)| ≤ 1 there); on the far sides of
    # the box it is below 1/2, so no root lies outside it.
    outer = z[(z.real > 0.5 * size) | (np.abs(z.imag) > 0.5 * size)]
    assert np.max(np.abs(gain * poly(outer, zeros) / poly(outer, poles))) < 0.5
    return int(round(winding))


def test_random_delay_loops_against_rectangle_argument_principle():
    """Seeded delay loops with open-loop unstable, lightly damped and integrating poles:
    the D-contour count equals an independent argument-principle count of the
    characteristic quasi-polynomial's roots in a large right-half-plane box."""
    rng = np.random.default_rng(99)
    counts = []
    for _ in range(12):
        poles: list[complex] = []
        for _ in range(int(rng.integers(1, 4))):
            w = 10 ** rng.uniform(-0.5, 0.5)
            u = rng.random()
            if u < 0.2:
                poles.append(0.0)
            elif u < 0.6:
                poles.append(-w if rng.random() < 0.7 else w)
            else:
                z = rng.choice([0.01, 0.3])
                r = complex(-z * w, w * math.sqrt(1 - z * z))
                poles += [r, r.conjugate()]
        zeros = [-(10 ** rng.uniform(-0.5, 0.5)) for _ in range(int(rng.integers(0, len(poles))))]
        gain = 10 ** rng.uniform(-0.5, 1.0)
        delay = 10 ** rng.uniform(-1.5, 0)
        st = closed_loop_stability(loop(zeros, poles, gain, delay=delay))
        ref = rectangle_count(poles, zeros, gain, delay, size=60.0)
        assert st.rhp_closed_loop_poles == ref, (zeros, poles, gain, delay)
        counts.append(ref)
    assert len(set(counts)) >= 3          # the set holds stable and unstable loops
