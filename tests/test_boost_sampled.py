"""Boost band and lag phase budget of sampled (z) and delay loops, against an independent
evaluation: scipy.signal.cont2discrete (ZOH plant, Tustin / ZOH controller), a dense grid
on the unit circle (or the jω axis with the exact delay) and scipy's brentq."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy import optimize, signal

from helpers import FPE_SAMPLED, NEW_LAG_DESIGNS, SAMPLED_T, Z_LAG, z_stage_design
from loopwarden.analysis import analyze
from loopwarden.analysis.boost_band import dc_boost, find_boosts, improvement, is_boost
from loopwarden.analysis.discrete_loop import NOT_IN_Z
from loopwarden.analysis.discrete_margins import compute_discrete_margins
from loopwarden.analysis.margins import compute_margins
from loopwarden.design.loader import parse_design

T = SAMPLED_T

#: Lead and lag both continuous, discretised together by ZOH: removing the lag changes
#: the ZOH equivalent of the whole continuous part, not just one factor.
LEAD_LAG_ZOH = f"""
[design]
name = "conveyor axis, digital lead-lag"
[plant]
zpk = {{ poles = [0.0, -5.0], gain = 20.0 }}
[[controller]]
type = "lead"
zero = 2.0
pole = 10.0
[[controller]]
type = "lag"
zero = 0.2
pole = 0.02
[sampling]
period = {T!r}
method = "zoh"
"""


def _poly(num, den, z):
    return np.polyval(np.ravel(num), z) / np.polyval(np.ravel(den), z)


def _d(num, den, method):
    n, d, _ = signal.cont2discrete((num, den), T, method=method)
    return np.ravel(n), np.ravel(d)


def reference_fpe():
    """L_with, L_without and the lag alone on the unit circle, from scipy only."""
    pn, pd = _d([1.0], [1.0, 1.0, 0.0], "zoh")                   # 1/(s(s+1)) behind a ZOH
    ln, ld = _d([1.0, 0.1], [1.0, 0.01], "bilinear")             # the lag by Tustin

    def with_lag(w):
        z = np.exp(1j * np.asarray(w) * T)
        return _poly(ln, ld, z) * _poly(pn, pd, z)

    def without(w):
        return _poly(pn, pd, np.exp(1j * np.asarray(w) * T))

    def lag(w):
        return _poly(ln, ld, np.exp(1j * np.asarray(w) * T))

    return with_lag, without, lag


def reference_lead_lag():
    pn, pd = _d([20.0], [1.0, 5.0, 0.0], "zoh")
    lead = np.polymul([5.0, 10.0], [1.0])                         # (p/z)(s+z): 5(s+2)
    both_n = np.polymul([5.0, 10.0], [1.0, 0.2])
    both_d = np.polymul([1.0, 10.0], [1.0, 0.02])
    cn, cd = _d(both_n, both_d, "zoh")
    un, ud = _d(lead, [1.0, 10.0], "zoh")

    def with_lag(w):
        z = np.exp(1j * np.asarray(w) * T)
        return _poly(cn, cd, z) * _poly(pn, pd, z)

    def without(w):
        z = np.exp(1j * np.asarray(w) * T)
        return _poly(un, ud, z) * _poly(pn, pd, z)

    return with_lag, without


def ref_edge(with_lag, without, level: float, w_hi: float) -> float:
    """Dense log grid up to w_hi, then brentq on the first step where the factor < level."""
    grid = np.logspace(-6, math.log10(w_hi), 20001)
    f = np.abs(1 + with_lag(grid)) / np.abs(1 + without(grid)) - level
    k = int(np.flatnonzero(f < 0)[0])

    def g(lw: float) -> float:
        w = math.exp(lw)
        return float(abs(1 + with_lag(w)) / abs(1 + without(w)) - level)

    return math.exp(optimize.brentq(g, math.log(grid[k - 1]), math.log(grid[k]),
                                    xtol=1e-15, rtol=1e-15))


def ref_crossover(with_lag, lo: float, hi: float) -> float:
    return optimize.brentq(lambda w: abs(with_lag(w)) - 1.0, lo, hi, xtol=1e-15, rtol=1e-15)


def boosts_of(text: str):
    d = parse_design(text, "z.toml")
    loop = d.loop(d.variants[0])
    m = compute_discrete_margins(loop)
    return d, loop, m, find_boosts(loop, d.controller, m, None, d.sampling)


def test_fpe_sampled_band_edges_and_phase_cost():
    # [derived] factor |1 + L_with(e^{jωT})| / |1 + L_without(e^{jωT})|, independent
    # evaluation with scipy.signal.cont2discrete (ZOH plant, Tustin lag) and brentq.
    d, loop, m, (boost,) = boosts_of(FPE_SAMPLED)
    with_lag, without, lag = reference_fpe()
    nyq = math.pi / T
    assert boost.band_2x_rad_s == pytest.approx(ref_edge(with_lag, without, 2.0, nyq),
                                                rel=1e-6)
    assert boost.band_3db_rad_s == pytest.approx(
        ref_edge(with_lag, without, math.sqrt(2.0), nyq), rel=1e-6)
    # the factor tends to the DC boost β = 10 as ω → 0 (type-1 loop)
    assert improvement(loop, d.controller, 1, np.array([1e-7]), d.sampling)[0] == \
        pytest.approx(10.0, rel=1e-5)
    # one gain crossover; the lag's phase there from the Tustin lag alone
    wc = ref_crossover(with_lag, 0.3, 2.0)
    (cost,) = boost.costs
    assert cost.crossover_rad_s == pytest.approx(wc, rel=1e-6)
    ref_cost = math.degrees(float(np.angle(lag(wc))))
    assert cost.phase_cost_deg == pytest.approx(ref_cost, rel=1e-6)
    assert cost.zero_ratio == pytest.approx(0.1 / wc, rel=1e-6)
    # the continuous lag costs about the same: −5.71°·… close to atan(ω/0.1) − atan(ω/0.01)
    cont = math.degrees(math.atan(wc / 0.1) - math.atan(wc / 0.01))
    assert cost.phase_cost_deg == pytest.approx(cont, abs=0.05)
    assert boost.dc_boost == pytest.approx(10.0, rel=1e-12)
    assert boost.zero_rad_s == 0.1 and boost.pole_rad_s == 0.01


def test_zoh_controller_is_rediscretised_without_the_stage():
    # ZOH of lead·lag is not ZOH(lead)·ZOH(lag): "without" must be ZOH(lead) [derived]
    d, loop, m, (boost,) = boosts_of(LEAD_LAG_ZOH)
    with_lag, without = reference_lead_lag()
    nyq = math.pi / T
    assert boost.stage == 2
    assert boost.band_2x_rad_s == pytest.approx(ref_edge(with_lag, without, 2.0, nyq),
                                                rel=1e-6)
    assert boost.band_3db_rad_s == pytest.approx(
        ref_edge(with_lag, without, math.sqrt(2.0), nyq), rel=1e-6)
    (cost,) = boost.costs
    wc = ref_crossover(with_lag, 1.0, 10.0)
    assert cost.crossover_rad_s == pytest.approx(wc, rel=1e-6)
    ref_cost = math.degrees(float(np.angle(with_lag(wc) / without(wc))))
    assert cost.phase_cost_deg == pytest.approx(ref_cost, rel=1e-6)


def test_band_bounded_by_nyquist():
    # A boost that still helps ≥ 2× at π/T: the band is reported as π/T itself.  Static
    # plant 10 under the matched equivalent of (s+200)/(s+20) at T = 0.1 s: [derived]
    # G(z) = k(z − e^{−20})/(z − e^{−2}), G(1) = 10, |G(−1)| = 7.62, so the factor at π/T
    # is |1 + 76.2|/11 ≈ 7.0; closed-loop pole 0.0015 (stable).
    text = """
[design]
name = "fast digital boost"
[plant]
zpk = { poles = [], gain = 10.0 }
[[controller]]
type = "lag"
zero = 200.0
pole = 20.0
[sampling]
period = 0.1
method = "matched"
"""
    d, loop, _, (boost,) = boosts_of(text)
    nyq = math.pi / 0.1
    assert boost.band_2x_rad_s == nyq and boost.band_3db_rad_s == nyq
    f = improvement(loop, d.controller, 1, np.array([nyq]), d.sampling)
    k = 10.0 * (1 - math.exp(-2.0)) / (1 - math.exp(-20.0))      # DC gain 10 (matched)
    g_pi = k * (-1.0 - math.exp(-20.0)) / (-1.0 - math.exp(-2.0))
    assert f[0] == pytest.approx(abs(1 + 10.0 * g_pi) / 11.0, rel=1e-9)


def test_z_domain_lag_boost():
    # A lag written in z: boost = |G(1)|/|G(−1)|; Tustin sends s = ∞ to z = −1, so the
    # Tustin lag in z keeps the continuous boost z/p = 10 [derived].  Its band and phase
    # cost equal those of the same loop with the lag written in s.
    d, loop, m, (boost,) = boosts_of(z_stage_design())
    st = d.controller[0]
    assert st.domain == "z" and is_boost(st)
    assert dc_boost(st) == pytest.approx(10.0, rel=1e-9)
    assert boost.dc_boost == pytest.approx(10.0, rel=1e-9)
    # s-plane images |ln r|/T of the z roots: for Tustin, 2/T·atanh(aT/2)-close to 0.1, 0.01
    zr, pr = Z_LAG.zeros[0].real, Z_LAG.poles[0].real
    assert boost.zero_rad_s == pytest.approx(-math.log(zr) / T, rel=1e-12)
    assert boost.pole_rad_s == pytest.approx(-math.log(pr) / T, rel=1e-12)
    assert boost.zero_rad_s == pytest.approx(0.1, rel=1e-4)
    _, _, _, (cont,) = boosts_of(FPE_SAMPLED)
    assert boost.band_2x_rad_s == pytest.approx(cont.band_2x_rad_s, rel=1e-9)
    assert boost.band_3db_rad_s == pytest.approx(cont.band_3db_rad_s, rel=1e-9)
    assert boost.costs[0].phase_cost_deg == pytest.approx(cont.costs[0].phase_cost_deg,
                                                          rel=1e-9)


def test_z_integrator_and_lowpass_are_not_boosts():
    # a pole at z = 1 is integral action; a zero at z = −1 is a roll-off: neither a boost
    base = z_stage_design()
    for num, den in (("[1.0, -0.9]", "[1.0, -1.0]"), ("[0.5, 0.5]", "[1.0, -0.5]")):
        text = base.replace(base[base.index("num = "):base.index("[sampling]")],
                            f"num = {num}\nden = {den}\n")
        d = parse_design(text, "z.toml")
        assert not is_boost(d.controller[0])


def test_sampled_review_prices_boost_checks():
    # no check of the boost family (slow pairs included) is declared n/a in z any more
    assert set(NOT_IN_Z) == set()
    d = parse_design(FPE_SAMPLED, "z.toml")
    (a,) = analyze(d)
    assert len(a.boosts) == 1 and "boost_band" not in a.not_applicable
    assert a.curves is not None and 1 in a.curves.improvement
    assert a.curves.improvement[1].shape == a.curves.frequency_rad_s.shape


# --------------------------------------------------------------------------- delay
DELAY = next(p.values[0] for p in NEW_LAG_DESIGNS if p.id == "pump-with-delay")


def test_delay_lag_loop_band_and_phase_cost():
    # pump: 3·(s+0.1)/(s+0.025)·1/(s(s+2))·e^{−0.05s}.  [derived] the factor with the
    # exact delay: python-control responses × e^{−jωτ}, brentq; the delay cancels in the
    # stage's phase, which is the lag's own atan(ω/0.1) − atan(ω/0.025).
    d = parse_design(DELAY, "pump.toml")
    loop = d.loop(d.variants[0])
    assert loop.has_delay
    m = compute_margins(loop)
    (boost,) = find_boosts(loop, d.controller, m, None)
    plant = control.zpk([], [0.0, -2.0], 1.0) * 3.0
    lag = control.zpk([-0.1], [-0.025], 1.0)

    def with_lag(w):
        return plant(1j * w) * lag(1j * w) * np.exp(-1j * w * 0.05)

    def without(w):
        return plant(1j * w) * np.exp(-1j * w * 0.05)

    assert boost.band_2x_rad_s == pytest.approx(ref_edge(with_lag, without, 2.0, 100.0),
                                                rel=1e-6)
    assert boost.band_3db_rad_s == pytest.approx(
        ref_edge(with_lag, without, math.sqrt(2.0), 100.0), rel=1e-6)
    wc = optimize.brentq(lambda w: abs(with_lag(w)) - 1.0, 0.5, 5.0, xtol=1e-15)
    (cost,) = boost.costs
    assert cost.crossover_rad_s == pytest.approx(wc, rel=1e-6)
    assert cost.phase_cost_deg == pytest.approx(
        math.degrees(math.atan(wc / 0.1) - math.atan(wc / 0.025)), rel=1e-6)
    # the delay matters for the band: without it the edges move
    no_delay = parse_design(DELAY.replace("delay = 0.05", ""), "pump0.toml")
    lp0 = no_delay.loop(no_delay.variants[0])
    (b0,) = find_boosts(lp0, no_delay.controller, compute_margins(lp0), None)
    assert abs(b0.band_3db_rad_s / boost.band_3db_rad_s - 1) > 1e-4


def test_z_stage_with_pole_at_origin():
    # (z + 0.5)/z: |G(1)| = 1.5 > |G(−1)| = 0.5, a boost of 3 [derived] whose pole has no
    # finite s-plane image; the band search is bounded by the Nyquist frequency instead.
    text = z_stage_design()
    text = text.replace(text[text.index("num = "):text.index("[sampling]")],
                        "num = [1.0, 0.5]\nden = [1.0, 0.0]\n")
    d, loop, m, (boost,) = boosts_of(text)
    assert boost.dc_boost == pytest.approx(3.0, rel=1e-12)
    assert boost.pole_rad_s is None
    assert boost.zero_rad_s == pytest.approx(abs(np.log(complex(-0.5))) / T, rel=1e-12)
    f = improvement(loop, d.controller, 1, np.array([1e-6]), d.sampling)[0]
    # type-1 loop: the factor tends to |G(1)| = 1.5 (the stage against no stage at all),
    # which is the boost only for a stage with |G(−1)| = 1 [derived]
    assert f == pytest.approx(1.5, rel=1e-4)
