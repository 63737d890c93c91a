"""Sampled-data loops: discretisation and margins on the unit circle.

References: python-control (``control.c2d``, ``control.stability_margins`` on dt systems)
and scipy (``signal.cont2discrete``, ``signal.lsim`` on a fine grid) where they are right;
closed forms [derived] where they are not — python-control misses a phase crossing at the
Nyquist frequency (REFERENCE_VALUES.md), e.g. the held integrator kT/(z − 1), whose gain
margin 2/(kT) lies exactly there.
"""

from __future__ import annotations

import math
import warnings

import control as ct
import numpy as np
import pytest
from scipy import optimize, signal

from loopwarden.analysis.discrete_margins import (
    closed_loop_bandwidth,
    compute_discrete_margins,
    compute_discrete_sensitivity,
)
from loopwarden.design.loader import parse_design
from loopwarden.lti import Zpk
from loopwarden.lti_discrete import matched, sample_plant, tustin, zoh

T = 0.1
PHI = np.linspace(0.01, math.pi - 0.01, 60)
Z = np.exp(1j * PHI)


def zpk(zeros, poles, gain) -> Zpk:
    return Zpk(np.array(zeros, dtype=complex), np.array(poles, dtype=complex), gain)


def ct_tf(g: Zpk, dt=None):
    return ct.zpk(g.zeros, g.poles, g.gain) if dt is None else ct.zpk(g.zeros, g.poles,
                                                                        g.gain, dt)


def rel(a, b):
    return np.max(np.abs(np.asarray(a) - np.asarray(b)) / np.maximum(np.abs(b), 1e-300))


def sampled(text_plant: str, controller: str, *, cd: int = 0, method: str = "tustin",
            extra: str = ""):
    text = (f'[design]\nname = "t"\n[sampling]\nperiod = {T}\nmethod = "{method}"\n'
            f"compute_delay = {cd}\n{extra}[plant]\n{text_plant}\n{controller}\n")
    d = parse_design(text, "t.toml")
    return d, d.sampled_loop(d.variants[0])


# --------------------------------------------------------------------------- discretisation
PLANTS = {
    "integrator-pair": zpk([-3.0], [0.0, -1.0, -5 + 2j, -5 - 2j], 7.0),
    "double-integrator": zpk([], [0.0, 0.0], 2.0),
    "biproper-lead": zpk([-2.0], [-20.0], 10.0),
    "resonance": zpk([], [-0.5 + 30j, -0.5 - 30j, -4.0], 3600.0),
}


@pytest.mark.parametrize("name", PLANTS)
def test_zoh_matches_control_c2d(name):
    # Source: control.c2d(method="zoh") on the same continuous system.
    g = PLANTS[name]
    ref = ct.c2d(ct_tf(g), T, "zoh")
    gd = zoh(g, T)
    assert rel(gd(Z), ref(Z)) < 1e-9
    assert np.allclose(np.sort_complex(gd.poles), np.sort_complex(np.exp(g.poles * T)))


def test_zoh_matches_scipy_cont2discrete():
    # Source: scipy.signal.cont2discrete(method="zoh") on the state space.
    g = PLANTS["integrator-pair"]
    a, b, c, d = g.to_ss()
    ad, bd, cd, dd, _ = signal.cont2discrete((a, b, c, d), T, method="zoh")
    h = np.array([(cd @ np.linalg.solve(z * np.eye(ad.shape[0]) - ad, bd))[0, 0] + dd[0, 0]
                  for z in Z])
    assert rel(zoh(g, T)(Z), h) < 1e-9


@pytest.mark.parametrize("prewarp", [None, 4.0, 25.0])
def test_tustin_matches_control(prewarp):
    # Sources: the definition G_d(z) = G(c (z − 1)/(z + 1)), c = 2/T or ω0/tan(ω0T/2)
    # [derived], to rounding; control.c2d(method="tustin", prewarp_frequency=...), whose
    # polynomial form loses relative accuracy beside the double zero at z = −1, so it is
    # compared against the response's peak.
    g = zpk([-3.0, -0.5], [0.0, -1.0, -5 + 2j, -5 - 2j], 7.0)
    gd = tustin(g, T, prewarp)
    c = 2 / T if prewarp is None else prewarp / math.tan(prewarp * T / 2)
    assert rel(gd(Z), g(c * (Z - 1) / (Z + 1))) < 1e-12
    kw = {} if prewarp is None else {"prewarp_frequency": prewarp}
    ref = ct.c2d(ct_tf(g), T, "tustin", **kw)
    assert np.max(np.abs(gd(Z) - ref(Z))) < 1e-10 * np.max(np.abs(ref(Z)))
    if prewarp is not None:
        # Prewarping keeps the response exact at ω0 [derived].
        w0 = np.array([prewarp])
        assert rel(tustin(g, T, prewarp)(np.exp(1j * w0 * T)), g.freqresp(w0)) < 1e-12


def test_tustin_matches_scipy_bilinear():
    # Source: scipy.signal.cont2discrete(method="bilinear").
    g = zpk([-2.0], [-20.0, -3.0], 40.0)
    num, den = ct.tfdata(ct_tf(g))
    nd, dd, _ = signal.cont2discrete((num[0][0], den[0][0]), T, method="bilinear")
    ref = np.polyval(nd.ravel(), Z) / np.polyval(dd, Z)
    assert rel(tustin(g, T)(Z), ref) < 1e-9


def test_matched_biproper_matches_control():
    # Source: control.c2d(method="matched"); it adds no zeros at z = −1 and matches the DC
    # gain, which equals our definition for a biproper block without roots at s = 0.
    g = zpk([-2.0], [-15.0], 7.5)
    ref = ct.c2d(ct_tf(g), T, "matched")
    assert rel(matched(g, T)(Z), ref(Z)) < 1e-10


def test_matched_lowpass_and_integrator_closed_forms():
    # [derived] matched a/(s + a) = K (z + 1)/(z − e^{−aT}), K = (1 − e^{−aT})/2 (DC match);
    # matched k/s = (kT/2)(z + 1)/(z − 1) (low-frequency coefficient match).
    a, k = 8.0, 3.0
    e = math.exp(-a * T)
    lp = matched(zpk([], [-a], a), T)
    assert rel(lp(Z), (1 - e) / 2 * (Z + 1) / (Z - e)) < 1e-12
    integ = matched(zpk([], [0.0], k), T)
    assert rel(integ(Z), k * T / 2 * (Z + 1) / (Z - 1)) < 1e-12


# --------------------------------------------------------------------------- delays
def _fine_simulation(g: Zpk, delay: float, u: np.ndarray, sub: int = 100) -> np.ndarray:
    """y(kT) of the continuous plant fed the held, delayed samples u (scipy lsim, exact
    for piecewise-constant input whose switching instants lie on the fine grid)."""
    a, b, c, d = g.to_ss()
    h = T / sub
    n = len(u) * sub
    t = np.arange(n + 1) * h
    shift = round(delay / h)
    held = np.repeat(u, sub)
    v = np.concatenate([np.zeros(shift), held])[: n + 1]
    v = np.pad(v, (0, n + 1 - v.size))
    _, y, _ = signal.lsim((a, b, c, d), v, t, interp=False)
    return y[::sub][: len(u)]


@pytest.mark.parametrize("delay", [0.237, 0.2, 0.05])
@pytest.mark.parametrize("name", ["integrator-pair", "biproper-lead"])
def test_fractional_delay_matches_fine_simulation(name, delay):
    # Source: scipy.signal.lsim on a grid of T/100 (switching instants on the grid).
    g = PLANTS[name]
    a, b, c, d = g.to_ss()
    sp = sample_plant(a, b, c, d, T, delay, poles=g.poles)
    u = np.random.default_rng(7).normal(size=40)
    _, y_ss, _ = signal.dlsim((sp.a, sp.b, sp.c, sp.d, T), u)
    y_ref = _fine_simulation(g, delay, u)
    assert np.max(np.abs(y_ss.ravel() - y_ref)) < 1e-9 * np.max(np.abs(y_ref))
    # The zpk form (whole samples as exact poles at z = 0) is the same transfer function.
    assert rel(sp.transfer()(Z), sp.response(Z)) < 1e-9


def test_whole_sample_delay_is_a_power_of_z():
    # [derived] a delay of exactly 2T is z^{−2} times the undelayed hold equivalent.
    g = PLANTS["integrator-pair"]
    a, b, c, d = g.to_ss()
    pd = sample_plant(a, b, c, d, T, 2 * T, poles=g.poles).transfer()
    assert rel(pd(Z), zoh(g, T)(Z) / Z**2) < 1e-9
    assert np.sum(pd.poles == 0) == 2


# --------------------------------------------------------------------------- margins
def test_held_integrator_margins_closed_form():
    # [derived] L = kT/(z − 1): |L| = kT/(2 sin(φ/2)), ∠L = −(φ/2 + π/2); the phase reaches
    # −180° only at the Nyquist frequency, where L = −kT/2: GM = 2/(kT) at π/T.
    # python-control reports no gain margin for this loop (it misses that crossing).
    k = 4.0
    _, loop = sampled(f"zpk = {{ poles = [0.0], gain = {k} }}", '[[controller]]\ntype = "gain"'
                      "\nk = 1.0", method="zoh")
    m = compute_discrete_margins(loop)
    kt = k * T
    phi_c = 2 * math.asin(kt / 2)
    pm = 90.0 - math.degrees(phi_c) / 2
    assert m.gain_margin_db == pytest.approx(20 * math.log10(2 / kt), rel=1e-12)
    assert m.phase_crossover_rad_s == pytest.approx(math.pi / T, rel=1e-14)
    assert m.gain_crossover_rad_s == pytest.approx(phi_c / T, rel=1e-10)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-10)
    assert m.delay_margin_s == pytest.approx(math.radians(pm) / (phi_c / T), rel=1e-10)
    assert m.delay_margin_samples == pytest.approx(m.delay_margin_s / T, rel=1e-14)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gm_ct = ct.stability_margins(ct.tf([kt], [1, -1], T), returnall=True)[0]
    assert gm_ct.size == 0                      # the reference's known blind spot
    s = compute_discrete_sensitivity(loop)
    # [derived] |S| = |z − 1|/|z − (1 − kT)| is largest at z = −1: Ms = 2/(2 − kT); Mt = 1
    # at ω = 0; |T| = kT/|e^{jφ} − c| = 1/√2 at cos φ = (1 + c² − 2k²T²)/(2c), c = 1 − kT.
    assert s.peak_sensitivity == pytest.approx(2 / (2 - kt), rel=1e-12)
    assert s.peak_sensitivity_rad_s == pytest.approx(math.pi / T)
    assert s.peak_complementary == pytest.approx(1.0, rel=1e-12)
    c = 1 - kt
    bw = math.acos((1 + c * c - 2 * kt * kt) / (2 * c)) / T
    assert closed_loop_bandwidth(loop) == pytest.approx(bw, rel=1e-10)


def test_held_integrator_with_compute_delay_closed_form():
    # [derived] L = kT/(z(z − 1)): same crossover, ∠L = −3φ/2 − π/2, so PM = 90° − 1.5φc
    # and the phase crossing is at φ = π/3 where |L| = kT: GM = 1/(kT).
    k = 4.0
    _, loop = sampled(f"zpk = {{ poles = [0.0], gain = {k} }}",
                      '[[controller]]\ntype = "gain"\nk = 1.0', cd=1, method="zoh")
    m = compute_discrete_margins(loop)
    kt = k * T
    phi_c = 2 * math.asin(kt / 2)
    assert m.gain_margin_db == pytest.approx(-20 * math.log10(kt), rel=1e-10)
    assert m.phase_crossover_rad_s == pytest.approx(math.pi / 3 / T, rel=1e-10)
    assert m.phase_margin_deg == pytest.approx(90.0 - 1.5 * math.degrees(phi_c), rel=1e-10)


def _ct_loop(g: Zpk, c_num, c_den, cd: int, k: float = 1.0):
    pd = ct.c2d(ct_tf(g), T, "zoh")
    c = ct.tf(c_num, c_den, T)
    return k * c * pd * ct.tf([1], [1] + [0] * cd, T) if cd else k * c * pd


LOOPS = {
    # plant, controller num/den in z, compute delay, gain
    "motor-pi-delay": (zpk([], [0.0, -1.0], 1.0), [0.3 * (1 + T / 2), -0.3], [1, -1], 1, 1.0),
    "resonant-lowgain": (PLANTS["resonance"], [1.0], [1.0], 0, 0.5),
    "third-order": (zpk([], [-1.0, -1.0, -1.0], 3.0), [1.0, -0.5], [1.0, 0.0], 1, 1.0),
}


def _design_for(g: Zpk, num, den, cd, k):
    zeros = ", ".join(_root(z) for z in g.zeros if z.imag >= 0)
    poles = ", ".join(_root(p) for p in g.poles if p.imag >= 0)
    ctrl = (f'[[controller]]\ntype = "tf"\ndomain = "z"\nnum = {list(map(float, num))}\n'
            f'den = {list(map(float, den))}\n[[controller]]\ntype = "gain"\nk = {k}')
    return sampled(f"zpk = {{ zeros = [{zeros}], poles = [{poles}], gain = {float(g.gain)!r} }}",
                   ctrl, cd=cd)


def _root(r: complex) -> str:
    return repr(float(r.real)) if r.imag == 0 else f"[{float(r.real)!r}, {float(r.imag)!r}]"


@pytest.mark.parametrize("name", LOOPS)
def test_margins_match_python_control_dt(name):
    # Source: control.stability_margins(returnall=True) on the dt loop, interior crossings
    # (0 < ω < π/T; it misses the Nyquist frequency and may report a spurious 0).
    g, num, den, cd, k = LOOPS[name]
    _, loop = _design_for(g, num, den, cd, k)
    m = compute_discrete_margins(loop)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gm, pm, _, wpc, wgc, _ = ct.stability_margins(_ct_loop(g, num, den, cd, k),
                                                      returnall=True)
    inside = (wpc > 1e-6) & (wpc < math.pi / T * (1 - 1e-9))
    ours = [c for c in m.phase_crossings if 0 < c.frequency_rad_s < math.pi / T * (1 - 1e-9)]
    assert len(ours) == int(inside.sum())
    for c, w_ref, g_ref in zip(ours, wpc[inside], gm[inside], strict=True):
        assert c.frequency_rad_s == pytest.approx(w_ref, rel=1e-6)
        assert c.magnitude == pytest.approx(1 / g_ref, rel=1e-6)
    assert [c.frequency_rad_s for c in m.gain_crossings] == pytest.approx(list(wgc), rel=1e-6)
    assert [c.phase_margin_deg for c in m.gain_crossings] == pytest.approx(list(pm), rel=1e-6)


def test_nyquist_frequency_crossing_with_compute_delay():
    # A held-out style case: L = C(z)·P_d(z)·z^{−2}, P = 4(s + 5)/(s(s + 20)), C = 1 − 0.5/z.
    # The gain margin is set by the phase crossing exactly at π/T (L(−1) < 0), beside an
    # interior one. Reference: python-control's evaluation of the same dt loop, with the
    # Nyquist value L(−1) read directly and the interior crossings by brentq.
    g = zpk([-5.0], [0.0, -20.0], 4.0)
    _, loop = _design_for(g, [1.0, -0.5], [1.0, 0.0], 2, 1.0)
    ref = _ct_loop(g, [1.0, -0.5], [1.0, 0.0], 2)
    m = compute_discrete_margins(loop)
    l_pi = complex(ref(-1.0))
    assert l_pi.real < 0 and abs(l_pi.imag) < 1e-12
    assert m.phase_crossover_rad_s == pytest.approx(math.pi / T, rel=1e-14)
    assert m.gain_margin_db == pytest.approx(-20 * math.log10(abs(l_pi)), rel=1e-10)

    def lz(phi):
        return np.array([complex(ref(np.exp(1j * p))) for p in np.atleast_1d(phi)])

    # Interior crossings by brentq on python-control's response (coarse scan, fine roots).
    phi = np.linspace(1e-3, math.pi - 1e-3, 4001)
    vals = lz(phi)
    mag = np.log(np.abs(vals))
    ph = np.unwrap(np.angle(vals))
    i = int(np.flatnonzero(np.sign(mag[:-1]) != np.sign(mag[1:]))[0])
    phi_gc = optimize.brentq(lambda p: math.log(abs(lz(p)[0])), phi[i], phi[i + 1],
                             xtol=1e-15)
    g_idx = np.flatnonzero(np.floor((ph[:-1] + math.pi) / (2 * math.pi))
                           != np.floor((ph[1:] + math.pi) / (2 * math.pi)))
    j = int(g_idx[0])
    phi_pc = optimize.brentq(lambda p: math.sin(np.angle(lz(p)[0])), phi[j], phi[j + 1],
                             xtol=1e-15)
    assert m.gain_crossover_rad_s == pytest.approx(phi_gc / T, rel=1e-9)
    pm_ref = 180.0 + math.degrees(np.angle(lz(phi_gc)[0]))
    assert m.phase_margin_deg == pytest.approx(pm_ref, rel=1e-9)
    interior = [c for c in m.phase_crossings if c.frequency_rad_s < math.pi / T * 0.999]
    assert interior[0].frequency_rad_s == pytest.approx(phi_pc / T, rel=1e-9)
    assert interior[0].magnitude == pytest.approx(abs(lz(phi_pc)[0]), rel=1e-9)
    assert interior[0].magnitude < abs(l_pi)     # the Nyquist crossing sets the margin


def test_sensitivity_peaks_match_dense_evaluation():
    # Source: |S|, |T| and |S − 1/2| of python-control's dt loop on 200 001 points; the
    # refined peak may only exceed the dense maximum, by at most the grid's curvature error.
    g, num, den, cd, k = LOOPS["motor-pi-delay"]
    _, loop = _design_for(g, num, den, cd, k)
    s = compute_discrete_sensitivity(loop)
    ref = _ct_loop(g, num, den, cd, k)
    phi = np.linspace(1e-4, math.pi, 200_001)
    lv = ref(np.exp(1j * phi))
    ms = np.max(np.abs(1 / (1 + lv)))
    mt = np.max(np.abs(lv / (1 + lv)))
    dmax = np.max(np.abs((1 - lv) / (2 * (1 + lv))))
    assert s.peak_sensitivity == pytest.approx(ms, rel=1e-6)
    assert s.peak_sensitivity >= ms * (1 - 1e-12)
    assert s.peak_complementary == pytest.approx(mt, rel=1e-6)
    assert s.disk_margin == pytest.approx(1 / dmax, rel=1e-6)
