"""Gain, phase and delay margins against closed forms and REFERENCE_VALUES.md.

Each case names its source: [derived] values are recomputed here from the stated formula
(tolerance: the 1e-6 relative target of the analysis); [memory] values are checked to the
rounding of the digits printed in the source.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from loopwarden.analysis.margins import compute_margins, plot_grid, wrap_phase_margin_deg
from loopwarden.analysis.stability import closed_loop_stability
from loopwarden.lti import Loop, Zpk

RTOL = 1e-6          # target accuracy of margins and crossover frequencies
ONE = Zpk.constant(1.0)


def loop(zeros, poles, gain, delay=0.0, controller=ONE) -> Loop:
    return Loop(plant=Zpk(zeros, poles, gain), controller=controller, sensor=ONE,
                delay_s=delay)


def db(x: float) -> float:
    return 20.0 * math.log10(x)


# --------------------------------------------------------------------------- table
def test_integrator_double_lag_derived():
    """1/(s(s+1)²) — [derived] REFERENCE_VALUES.md: L(j1) = −1/2, so GM = 2 at 1 rad/s;
    crossover is the real root of ω³ + ω − 1 = 0, PM = 90° − 2·atan(ωc)."""
    m = compute_margins(loop([], [0, -1, -1], 1.0))
    wc = float(np.real(np.roots([1, 0, 1, -1])[np.isreal(np.roots([1, 0, 1, -1]))][0]))
    pm = 90.0 - 2.0 * math.degrees(math.atan(wc))
    assert m.gain_margin_db == pytest.approx(db(2.0), rel=RTOL)
    assert m.phase_crossover_rad_s == pytest.approx(1.0, rel=RTOL)
    assert m.gain_crossover_rad_s == pytest.approx(wc, rel=RTOL)
    assert m.phase_margin_deg == pytest.approx(pm, rel=RTOL)
    assert m.delay_margin_s == pytest.approx(math.radians(pm) / wc, rel=RTOL)
    # The table's rounded figures [derived]: 21.386° at 0.68233 rad/s, DM 0.54704 s.
    assert m.phase_margin_deg == pytest.approx(21.386, abs=5e-4)
    assert m.gain_crossover_rad_s == pytest.approx(0.68233, abs=5e-6)
    assert m.delay_margin_s == pytest.approx(0.54704, abs=5e-6)
    assert m.gain_margin_lower_db is None
    assert len(m.gain_crossings) == 1 and len(m.phase_crossings) == 1


def test_triple_lag_derived():
    """3/(s+1)³ — [derived]: GM 8/3 at √3 rad/s; PM 180° − 3·atan(ωc), ωc = √(3^(2/3) − 1)."""
    m = compute_margins(loop([], [-1, -1, -1], 3.0))
    wc = math.sqrt(3.0 ** (2.0 / 3.0) - 1.0)
    assert m.gain_margin_db == pytest.approx(db(8.0 / 3.0), rel=RTOL)
    assert m.phase_crossover_rad_s == pytest.approx(math.sqrt(3.0), rel=RTOL)
    assert m.gain_crossover_rad_s == pytest.approx(wc, rel=RTOL)
    assert m.phase_margin_deg == pytest.approx(180.0 - 3.0 * math.degrees(math.atan(wc)),
                                               rel=RTOL)
    assert m.phase_margin_deg == pytest.approx(41.69, abs=5e-3)     # table rounding
    assert wc == pytest.approx(1.0393, abs=5e-5)


def test_integrator_with_delay_derived():
    """e^(−0.5s)/s — [derived]: PM 90° − 0.5 rad at 1 rad/s; DM π/2 − 0.5 s; GM π at π."""
    m = compute_margins(loop([], [0], 1.0, delay=0.5))
    assert m.gain_crossover_rad_s == pytest.approx(1.0, rel=RTOL)
    assert m.phase_margin_deg == pytest.approx(90.0 - math.degrees(0.5), rel=RTOL)
    assert m.phase_margin_deg == pytest.approx(61.352, abs=5e-4)
    assert m.delay_margin_s == pytest.approx(math.pi / 2 - 0.5, rel=RTOL)
    assert m.gain_margin_db == pytest.approx(db(math.pi), rel=RTOL)
    assert m.phase_crossover_rad_s == pytest.approx(math.pi, rel=RTOL)
    # Every turn of the delay spiral is a crossing [derived]: −π/2 − 0.5ω = −π − 2π(n − 1)
    # gives ω_n = (4n − 3)π with |L| = 1/ω_n.
    pcs = m.phase_crossings
    assert len(pcs) > 50
    for n, pc in enumerate(pcs[:20], start=1):
        assert pc.frequency_rad_s == pytest.approx((4 * n - 3) * math.pi, rel=RTOL)
        assert pc.magnitude == pytest.approx(1.0 / ((4 * n - 3) * math.pi), rel=RTOL)


def test_simc_fopdt_memory():
    """e^(−θs)/(2θs), θ = 1 — Skogestad, J. Process Control 13 (2003) [memory]:
    GM 3.14, PM 61.4°; closed forms [derived]: GM = π at π/2, PM = 90° − 0.5 rad at 0.5."""
    m = compute_margins(loop([], [0], 0.5, delay=1.0))
    assert 10 ** (m.gain_margin_db / 20) == pytest.approx(3.14, abs=5e-3)
    assert m.phase_margin_deg == pytest.approx(61.4, abs=0.05)
    assert 10 ** (m.gain_margin_db / 20) == pytest.approx(math.pi, rel=RTOL)
    assert m.phase_crossover_rad_s == pytest.approx(math.pi / 2, rel=RTOL)
    assert m.gain_crossover_rad_s == pytest.approx(0.5, rel=RTOL)
    assert m.delay_margin_s == pytest.approx((math.pi / 2 - 0.5) / 0.5, rel=RTOL)


def sp_inverse_response_loop() -> Loop:
    """G = 3(−2s+1)/((10s+1)(5s+1)) with the Ziegler–Nichols PI Kc = 1.1364, τI = 12.699."""
    plant = Zpk([0.5], [-0.1, -0.2], 3.0 * -2.0 / 50.0)
    pi = Zpk([-1.0 / 12.699], [0.0], 1.1364)
    return Loop(plant=plant, controller=pi, sensor=ONE, stages=(pi,))


def test_inverse_response_pi_memory():
    """Skogestad & Postlethwaite, Multivariable Feedback Control, 2nd ed., §2.4 [memory]:
    GM 1.63, PM 19.4°, ωc 0.236 rad/s."""
    m = compute_margins(sp_inverse_response_loop())
    assert 10 ** (m.gain_margin_db / 20) == pytest.approx(1.63, abs=5e-3)
    assert m.phase_margin_deg == pytest.approx(19.4, abs=0.05)
    assert m.gain_crossover_rad_s == pytest.approx(0.236, abs=5e-4)


def test_ogata_lag_design_memory():
    """Ogata, Modern Control Engineering, lag design [memory, matched]; derived figures in
    REFERENCE_VALUES.md: PM 41.61° at 0.4544 rad/s, GM 5.188 (14.30 dB) at 1.3154 rad/s."""
    plant = Zpk([], [0, -1, -2], 2.0)                  # 1/(s(s+1)(0.5s+1))
    lag = Zpk([-0.1], [-0.01], 5.0 * 10.0 / 100.0)     # 5(10s+1)/(100s+1)
    m = compute_margins(Loop(plant=plant, controller=lag, sensor=ONE, stages=(lag,)))
    assert m.phase_margin_deg == pytest.approx(41.61, abs=5e-3)
    assert m.gain_crossover_rad_s == pytest.approx(0.4544, abs=5e-5)
    assert 10 ** (m.gain_margin_db / 20) == pytest.approx(5.188, abs=5e-4)
    assert m.gain_margin_db == pytest.approx(14.30, abs=5e-3)
    assert m.phase_crossover_rad_s == pytest.approx(1.3154, abs=5e-5)


def test_ogata_plant_without_lag_memory():
    """Same plant with gain 5 and no lag: closed-loop unstable, GM 0.6 [memory]; by Routh
    the loop 10/(s(s+1)(s+2)) reaches −1 at √2 rad/s with |L| = 10/6 [derived]."""
    m = compute_margins(loop([], [0, -1, -2], 10.0))
    assert m.gain_margin_db == math.inf                 # no crossing with |L| ≤ 1
    assert m.gain_margin_lower_db == pytest.approx(db(0.6), rel=RTOL)
    assert m.phase_crossings[0].frequency_rad_s == pytest.approx(math.sqrt(2.0), rel=RTOL)
    assert m.phase_margin_deg < 0


def test_fpe_lag_example_derived():
    """Franklin, Powell & Emami-Naeini lag example L = 10(10s+1)/(s(s+1)(100s+1))
    [derived]: PM 45.19° at 0.7906 rad/s, GM infinite."""
    m = compute_margins(loop([-0.1], [0, -1, -0.01], 10.0 * 10.0 / 100.0))
    assert m.phase_margin_deg == pytest.approx(45.19, abs=5e-3)
    assert m.gain_crossover_rad_s == pytest.approx(0.7906, abs=5e-5)
    assert m.gain_margin_db == math.inf
    assert m.phase_crossover_rad_s is None


def test_type_two_lead_derived():
    """10(s+1)/(s²(s+10)) — REFERENCE_VALUES.md tracking table [derived]: PM 44.46°."""
    m = compute_margins(loop([-1], [0, 0, -10], 10.0))
    assert m.phase_margin_deg == pytest.approx(44.46, abs=5e-3)


@pytest.mark.parametrize(("zeta", "pm_table"), [(0.3, 33.27), (0.5, 51.83), (0.7, 65.16)],
                         ids=["zeta0.3", "zeta0.5", "zeta0.7"])
def test_second_order_pm_column_derived(zeta, pm_table):
    """ωn²/(s(s + 2ζωn)), ωn = 1 — REFERENCE_VALUES.md time-response table [derived]; closed
    form PM = atan(2ζ / √(√(1 + 4ζ⁴) − 2ζ²)), ωc = √(√(1 + 4ζ⁴) − 2ζ²)."""
    m = compute_margins(loop([], [0, -2 * zeta], 1.0))
    wc = math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)
    assert m.gain_crossover_rad_s == pytest.approx(wc, rel=RTOL)
    assert m.phase_margin_deg == pytest.approx(math.degrees(math.atan(2 * zeta / wc)),
                                               rel=RTOL)
    assert m.phase_margin_deg == pytest.approx(pm_table, abs=5e-3)


# --------------------------------------------------------------------------- hard cases
def test_conditionally_stable_upper_and_lower_derived():
    """L = 5·100(s+1)²/(s³(s+10)²): the phase −270° + 2atan ω − 2atan(ω/10) meets −180°
    where 0.1ω² − 0.9ω + 1 = 0 [derived], ω = (0.9 ∓ √0.41)/0.2; both margins exist and
    the closed loop is stable between them."""
    k = 5.0
    lp = loop([-1, -1], [0, 0, 0, -10, -10], 100.0 * k)
    m = compute_margins(lp)
    w1, w2 = (0.9 - math.sqrt(0.41)) / 0.2, (0.9 + math.sqrt(0.41)) / 0.2

    def mag(w):
        return k * (1 + w * w) / (w**3 * (1 + 0.01 * w * w))

    assert [c.frequency_rad_s for c in m.phase_crossings] == pytest.approx([w1, w2], rel=RTOL)
    assert m.gain_margin_db == pytest.approx(-db(mag(w2)), rel=RTOL)
    assert m.gain_margin_lower_db == pytest.approx(-db(mag(w1)), rel=RTOL)
    assert m.phase_crossover_rad_s == pytest.approx(w2, rel=RTOL)
    assert closed_loop_stability(lp).closed_loop_stable
    # Scaling the gain by the margins puts a closed-loop pole on the imaginary axis.
    for margin_db in (m.gain_margin_db, m.gain_margin_lower_db):
        st = closed_loop_stability(lp.scaled(10 ** (margin_db / 20)))
        assert st.marginal


def test_open_loop_unstable_with_lead_derived():
    """P = 1/((s−1)(s+5)), lead 100(s+1)/(s+10): L(0) = −2, so ω = 0 is a phase crossing
    with a gain-reduction margin of −6.02 dB [derived]; by Routh on
    s³ + 14s² + (35 + 100g)s + 100g − 50 the loop is stable for every g > 1/2 (no upper
    limit)."""
    lead = Zpk([-1.0], [-10.0], 100.0)
    lp = Loop(plant=Zpk([], [1.0, -5.0], 1.0), controller=lead, sensor=ONE, stages=(lead,))
    m = compute_margins(lp)
    assert m.gain_margin_lower_db == pytest.approx(db(0.5), rel=RTOL)
    assert m.phase_crossings[0].frequency_rad_s == 0.0
    assert m.gain_margin_db == math.inf
    st = closed_loop_stability(lp)
    assert st.closed_loop_stable and st.open_loop_rhp_poles == 1
    assert closed_loop_stability(lp.scaled(0.5)).marginal


def colocated_resonance_loop() -> Loop:
    """1/s times an anti-resonance at 8 rad/s and a resonance at 10 rad/s, ζ = 0.02."""
    zeta = 0.02

    def pair(wn):
        r = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
        return [r, r.conjugate()]

    return loop(pair(8.0), [0.0, *pair(10.0)], 100.0 / 64.0)


def test_lightly_damped_mode_three_gain_crossings_derived():
    """Three gain crossings around a lightly damped mode [derived]: |L(jω)| = 1 where
    ω²·|ωp² − ω² + 2jζωpω|²·64² = 100²·|ωz² − ω² + 2jζωzω|², a polynomial in ω²."""
    m = compute_margins(colocated_resonance_loop())
    zeta, wz, wp = 0.02, 8.0, 10.0
    # (x·((wp²−x)² + 4ζ²wp²x))·64² − 100²·((wz²−x)² + 4ζ²wz²x) = 0 with x = ω².
    lhs = np.polymul([1, 0], np.polyadd(np.polymul([-1, wp**2], [-1, wp**2]),
                                        [4 * zeta**2 * wp**2, 0])) * 64.0**2
    rhs = np.polyadd(np.polymul([-1, wz**2], [-1, wz**2]), [4 * zeta**2 * wz**2, 0]) * 1e4
    x = np.roots(np.polysub(lhs, rhs))
    w_ref = np.sort(np.sqrt(x[np.isreal(x) & (x.real > 0)].real))
    assert len(m.gain_crossings) == 3
    assert [c.frequency_rad_s for c in m.gain_crossings] == pytest.approx(list(w_ref), rel=RTOL)
    for c in m.gain_crossings:
        w = c.frequency_rad_s
        ph = (-90.0 + math.degrees(math.atan2(2 * zeta * wz * w, wz**2 - w**2))
              - math.degrees(math.atan2(2 * zeta * wp * w, wp**2 - w**2)))
        assert c.phase_margin_deg == pytest.approx(float(wrap_phase_margin_deg(ph)), rel=RTOL)
    # The margin is the crossing needing the smallest rotation (≈ 90° at 1 rad/s); the
    # crossings inside the resonance sit far from −1 even though one wraps negative.
    assert m.phase_margin_deg == pytest.approx(m.gain_crossings[0].phase_margin_deg)
    assert min(c.phase_margin_deg for c in m.gain_crossings) < 0
    assert m.delay_margin_s == pytest.approx(
        min(c.delay_margin_s for c in m.gain_crossings), rel=RTOL)
    assert closed_loop_stability(colocated_resonance_loop()).closed_loop_stable


def test_undamped_plant_mode_skips_the_jump():
    """k/(s(s² + 4)) with an undamped mode at 2 rad/s [derived]: the phase jumps by −180°
    at the pole, which is not a crossing; it reaches −180° exactly nowhere else, while
    |L| = 1 on both sides of the pole and where ω(4 − ω²) = k below it."""
    k = 1.0
    m = compute_margins(loop([], [0, 2j, -2j], k))
    assert m.phase_crossings == ()
    roots = np.roots([1, 0, -4, k])            # ω³ − 4ω + k = 0 (|L| = 1, ω < 2)
    roots2 = np.roots([1, 0, -4, -k])          # ω(ω² − 4) = k (ω > 2)
    expected = sorted([r.real for r in np.concatenate([roots, roots2])
                       if abs(r.imag) < 1e-12 and r.real > 0])
    assert [c.frequency_rad_s for c in m.gain_crossings] == pytest.approx(expected, rel=RTOL)


def test_biproper_negative_loop_has_crossings_at_zero_and_infinity_derived():
    """L = −2(s+1)/(s+3): L(0) = −2/3 (upper margin 3.52 dB at ω = 0) and L(∞) = −2
    (lower margin −6.02 dB at ω = ∞) [derived]."""
    m = compute_margins(loop([-1], [-3], -2.0))
    assert [c.frequency_rad_s for c in m.phase_crossings] == [0.0, math.inf]
    assert m.gain_margin_db == pytest.approx(db(1.5), rel=RTOL)
    assert m.phase_crossover_rad_s == 0.0
    assert m.gain_margin_lower_db == pytest.approx(db(0.5), rel=RTOL)


def test_no_crossing_margins_are_infinite():
    """A loop with |L| < 1 and phase above −180° everywhere: GM, PM and DM infinite."""
    m = compute_margins(loop([], [-1], 0.5))
    assert m.gain_margin_db == math.inf and m.phase_margin_deg == math.inf
    assert m.delay_margin_s == math.inf
    assert m.gain_crossover_rad_s is None and m.phase_crossover_rad_s is None
    zero = compute_margins(loop([], [-1], 0.0))
    assert zero.gain_crossings == () and zero.phase_crossings == ()


def test_wrap_convention():
    """180° + ∠L wrapped to (−180°, 180°]."""
    assert wrap_phase_margin_deg([-180.0, 0.0, -1.0, -359.0, 10.0]) == pytest.approx(
        [0.0, 180.0, 179.0, -179.0, -170.0])


def test_delay_margin_reaches_instability_exactly():
    """Adding the delay margin puts a closed-loop root on the imaginary axis: the loop with
    the extra delay has PM 0 at the same crossover [derived]."""
    base = loop([], [0, -1, -1], 1.0)
    m = compute_margins(base)
    tipped = compute_margins(loop([], [0, -1, -1], 1.0, delay=m.delay_margin_s))
    assert tipped.phase_margin_deg == pytest.approx(0.0, abs=1e-7)
    assert tipped.gain_crossover_rad_s == pytest.approx(m.gain_crossover_rad_s, rel=RTOL)


def test_plot_grid_is_moderate_and_resolves_resonance():
    for lp in (colocated_resonance_loop(), loop([], [0], 1.0, delay=0.5),
               sp_inverse_response_loop()):
        w = plot_grid(lp)
        assert 100 < w.size <= 2000
        assert np.all(np.diff(w) > 0)
    w = plot_grid(colocated_resonance_loop())
    peak = 10.0 * math.sqrt(1 - 0.02**2)            # resonance at Im p, |Re p| = 0.2
    assert np.sum(np.abs(w - peak) <= 0.2) >= 10


def test_small_gain_delay_loop_first_crossing_far_out_derived():
    """1e−4·e^(−0.001s)/(s+1): the only relevant phase crossing lies where
    atan ω + 0.001ω = π, far above the pole [derived, solved here with scipy brentq on
    the closed-form phase]; GM = −20·log10(1e−4/√(1 + ω²))."""
    from scipy.optimize import brentq

    w180 = brentq(lambda w: math.atan(w) + 0.001 * w - math.pi, 1.0, 1e4, xtol=1e-14)
    m = compute_margins(loop([], [-1], 1e-4, delay=0.001))
    assert m.phase_crossover_rad_s == pytest.approx(w180, rel=RTOL)
    assert m.gain_margin_db == pytest.approx(-db(1e-4 / math.hypot(1.0, w180)), rel=RTOL)
    assert m.gain_crossings == ()


def test_pi_on_pure_delay_biproper_derived():
    """PI on a pure delay, L = 0.5(1 + 1/s)·e^(−s): |L| = 0.5·√(1 + 1/ω²) falls towards
    0.5 while the delay keeps turning L [derived].  Crossings solve −π/2 + atan ω − ω =
    −π(2n − 1); the first one with |L| ≤ 1 sets the upper margin, and ω = ∞ is listed
    with the limit |L(j∞)| = 0.5."""
    from scipy.optimize import brentq

    lp = Loop(plant=Zpk([], [], 0.5), controller=Zpk([-1.0], [0.0], 1.0), sensor=ONE,
              delay_s=1.0)
    m = compute_margins(lp)
    finite = [c for c in m.phase_crossings if math.isfinite(c.frequency_rad_s)]
    for n, c in enumerate(finite[:10], start=1):
        w = brentq(lambda x, n=n: -math.pi / 2 + math.atan(x) - x + math.pi * (2 * n - 1),
                   1e-9, 1e3, xtol=1e-14)
        assert c.frequency_rad_s == pytest.approx(w, rel=RTOL)
        assert c.magnitude == pytest.approx(0.5 * math.sqrt(1 + 1 / w**2), rel=RTOL)
    assert m.phase_crossings[-1].frequency_rad_s == math.inf
    assert m.phase_crossings[-1].magnitude == 0.5
    first_upper = next(c for c in finite if c.magnitude <= 1.0)
    assert m.gain_margin_db == pytest.approx(first_upper.gain_margin_db, rel=RTOL)
