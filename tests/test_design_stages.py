"""Controller stage catalog: each stage's model against its formula, evaluated independently.

Reference: python-control ``tf`` objects built from the textbook formula of each stage
(DESIGN.md §3 table), evaluated at several frequencies, and closed-form properties
[derived] (lead/lag extreme phase, notch depth, lowpass peak).
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from loopwarden.design import parse_design

W = np.array([0.01, 0.3, 1.0, 2.7, 10.0, 55.0, 400.0])   # rad/s
S = control.tf("s")


def _stage(lines: str, unit: str = "rad/s"):
    text = f"""
[design]
name = "stage test"
frequency_unit = "{unit}"

[plant]
zpk = {{ poles = [-1.0], gain = 1.0 }}

[[controller]]
{lines}
"""
    design = parse_design(text, "stage.toml")
    assert len(design.controller) == 1
    return design.controller[0]


def _ref(sys: control.TransferFunction, w: np.ndarray) -> np.ndarray:
    return np.array([complex(sys(1j * wi)) for wi in w])


def _assert_matches(stage, sys: control.TransferFunction) -> None:
    got = stage.model.freqresp(W)
    np.testing.assert_allclose(got, _ref(sys, W), rtol=1e-10, atol=1e-14)


# ---------------------------------------------------------------------- formulas
@pytest.mark.parametrize("k", [1.0, -2.5, 40.0])
def test_gain_is_k(k):
    # formula k (DESIGN.md §3)
    _assert_matches(_stage(f'type = "gain"\nk = {k}'), control.tf([k], [1.0]))


@pytest.mark.parametrize("z,p", [(3.0, 30.0), (0.5, 2.0)])
def test_lead_dc_normalised(z, p):
    # formula (p/z)(s+z)/(s+p): unity DC gain (DESIGN.md §3)
    st = _stage(f'type = "lead"\nzero = {z}\npole = {p}')
    _assert_matches(st, (p / z) * (S + z) / (S + p))
    assert st.params == {"zero": z, "pole": p, "normalize": "dc"}
    assert st.model.low_frequency_coefficient() == pytest.approx(1.0, rel=1e-12)
    assert st.model.label == "controller[1] lead"


def test_lead_hf_normalised():
    # formula (s+z)/(s+p): unity high-frequency gain
    st = _stage('type = "lead"\nzero = 3.0\npole = 30.0\nnormalize = "hf"')
    _assert_matches(st, (S + 3.0) / (S + 30.0))
    assert st.model.high_frequency_gain() == pytest.approx(1.0)


@pytest.mark.parametrize("z,p", [(3.0, 30.0), (1.0, 4.0), (0.2, 50.0)])
def test_lead_max_phase_at_geometric_mean(z, p):
    # [derived] a lead (s+z)/(s+p) has its largest phase asin((β−1)/(β+1)), β = p/z, at √(zp)
    st = _stage(f'type = "lead"\nzero = {z}\npole = {p}')
    beta = p / z
    wm = math.sqrt(z * p)
    phase = np.angle(st.model.freqresp([wm])[0])
    assert phase == pytest.approx(math.asin((beta - 1) / (beta + 1)), rel=1e-12)
    grid = np.geomspace(z / 100, p * 100, 4001)
    assert np.max(np.angle(st.model.freqresp(grid))) <= phase + 1e-12


@pytest.mark.parametrize("norm,gain", [("hf", 1.0), ("dc", 0.1)])
def test_lag_formula(norm, gain):
    # hf: (s+z)/(s+p); dc: (p/z)(s+z)/(s+p) (DESIGN.md §3), here z = 1, p = 0.1
    st = _stage(f'type = "lag"\nzero = 1.0\npole = 0.1\nnormalize = "{norm}"')
    _assert_matches(st, gain * (S + 1.0) / (S + 0.1))


def test_lag_default_is_hf_and_dc_boost_is_beta():
    # [derived] DC boost of (s+z)/(s+p) is β = z/p
    st = _stage('type = "lag"\nzero = 0.1258\npole = 0.01258')
    assert st.params["normalize"] == "hf"
    assert st.model.low_frequency_coefficient() == pytest.approx(10.0, rel=1e-12)


@pytest.mark.parametrize("mult,deg", [(10.0, -5.14), (5.0, -10.16), (3.0, -16.53)])
def test_lag_phase_reference_values(mult, deg):
    # REFERENCE_VALUES.md, lag network β = 10 [derived]: −5.14° at 10z, −10.16° at 5z,
    # −16.53° at 3z (rounded to 0.01°)
    st = _stage('type = "lag"\nzero = 2.0\npole = 0.2')
    phase_deg = math.degrees(np.angle(st.model.freqresp([mult * 2.0])[0]))
    assert phase_deg == pytest.approx(deg, abs=0.006)


def test_lag_largest_lag_at_geometric_mean():
    # [derived] largest lag −asin((β−1)/(β+1)) at √(zp)
    st = _stage('type = "lag"\nzero = 2.0\npole = 0.2')
    phase = np.angle(st.model.freqresp([math.sqrt(0.4)])[0])
    assert phase == pytest.approx(-math.asin(9.0 / 11.0), rel=1e-12)


@pytest.mark.parametrize("kp,ti", [(2.0, 0.5), (-0.3, 60.0)])
def test_pi_formula(kp, ti):
    # formula kp (1 + 1/(ti s))
    st = _stage(f'type = "pi"\nkp = {kp}\nti = {ti}')
    _assert_matches(st, kp * (1 + 1 / (ti * S)))
    assert st.model.origin_poles == 1


@pytest.mark.parametrize("kp,ti,td,n", [
    (2.0, 1.0, 0.1, 10.0),      # real zeros
    (1.5, 1.0, 1.0, 10.0),      # complex zeros: (ti+tf)² < 4 ti (tf+td)
    (0.8, 10.0, 0.1, 4.0),
    (3.0, 2.0, 0.0, 10.0),      # td = 0: a PI
])
def test_pid_formula(kp, ti, td, n):
    # formula kp (1 + 1/(ti s) + td s/((td/n) s + 1)) built with python-control arithmetic
    st = _stage(f'type = "pid"\nkp = {kp}\nti = {ti}\ntd = {td}\nn = {n}')
    ref = kp * (1 + 1 / (ti * S)) if td == 0 else kp * (1 + 1 / (ti * S) + td * S / (
        (td / n) * S + 1))
    _assert_matches(st, ref)
    assert st.model.is_proper


def test_pid_default_filter_is_10():
    st = _stage('type = "pid"\nkp = 1.0\nti = 2.0\ntd = 0.5')
    assert st.params["n"] == 10.0
    _assert_matches(st, 1 + 1 / (2 * S) + 0.5 * S / (0.05 * S + 1))


@pytest.mark.parametrize("k", [1.0, 0.25])
def test_integrator_formula(k):
    # formula k/s
    _assert_matches(_stage(f'type = "integrator"\nk = {k}'), k / S)


@pytest.mark.parametrize("w,depth,zeta", [(50.0, 20.0, 0.5), (3.0, 6.0, 0.1), (8.0, 12.0, 2.0)])
def test_notch_formula_and_depth(w, depth, zeta):
    # formula (s²+2ζ_z ω s+ω²)/(s²+2ζωs+ω²), ζ_z = ζ·10^(−depth/20); [derived] at ω the
    # gain is ζ_z/ζ, i.e. −depth_db, and the phase is 0
    st = _stage(f'type = "notch"\nfreq = {w}\ndepth_db = {depth}\nzeta = {zeta}')
    zz = zeta * 10 ** (-depth / 20)
    _assert_matches(st, (S**2 + 2 * zz * w * S + w**2) / (S**2 + 2 * zeta * w * S + w**2))
    at = st.model.freqresp([w])[0]
    assert 20 * math.log10(abs(at)) == pytest.approx(-depth, abs=1e-9)
    assert abs(np.angle(at)) < 1e-9


def test_notch_default_zeta():
    st = _stage('type = "notch"\nfreq = 10.0\ndepth_db = 20.0')
    assert st.params["zeta"] == 0.5


def test_lowpass_first_order():
    # formula ω/(s+ω), unity DC gain, −3.01 dB at ω
    st = _stage('type = "lowpass"\nfreq = 20.0')
    _assert_matches(st, 20.0 / (S + 20.0))
    assert 20 * math.log10(abs(st.model.freqresp([20.0])[0])) == pytest.approx(
        -10 * math.log10(2), abs=1e-12)


@pytest.mark.parametrize("zeta", [0.7071, 0.2, 1.5])
def test_lowpass_second_order(zeta):
    # formula ω²/(s²+2ζωs+ω²); [derived] |H(jω)| = 1/(2ζ)
    st = _stage(f'type = "lowpass"\nfreq = 20.0\norder = 2\nzeta = {zeta}')
    _assert_matches(st, 400.0 / (S**2 + 2 * zeta * 20.0 * S + 400.0))
    assert abs(st.model.freqresp([20.0])[0]) == pytest.approx(1 / (2 * zeta), rel=1e-12)


def test_lowpass_second_order_default_zeta():
    st = _stage('type = "lowpass"\nfreq = 20.0\norder = 2')
    assert st.params["zeta"] == 0.7071


def test_tf_stage():
    st = _stage('type = "tf"\nnum = [2.0, 6.0]\nden = [1.0, 4.0, 3.0]')
    _assert_matches(st, control.tf([2.0, 6.0], [1.0, 4.0, 3.0]))


def test_zpk_stage_with_complex_pair():
    # gain·(s+2)/((s+1)((s+0.5)²+3²)): a pair [re, im] means re ± j·im
    st = _stage('type = "zpk"\nzeros = [-2.0]\npoles = [-1.0, [-0.5, 3.0]]\ngain = 4.0')
    _assert_matches(st, 4.0 * (S + 2) / ((S + 1) * ((S + 0.5) ** 2 + 9.0)))
    assert st.params["poles"] == "[-1, [-0.5, 3]]"


# ---------------------------------------------------------------------- hz conversion
def test_hz_converts_stage_frequencies():
    # frequency_unit = "hz": zero/pole/freq are multiplied by 2π; zpk roots too, gain kept
    f = 2 * math.pi
    lead = _stage('type = "lead"\nzero = 1.0\npole = 10.0', unit="hz")
    assert lead.params["zero"] == pytest.approx(f)
    assert lead.params["pole"] == pytest.approx(10 * f)
    _assert_matches(lead, 10.0 * (S + f) / (S + 10 * f))

    notch = _stage('type = "notch"\nfreq = 30.0\ndepth_db = 20.0', unit="hz")
    assert abs(notch.model.freqresp([30 * f])[0]) == pytest.approx(0.1, rel=1e-9)

    lp = _stage('type = "lowpass"\nfreq = 5.0', unit="hz")
    _assert_matches(lp, 5 * f / (S + 5 * f))

    zpk = _stage('type = "zpk"\nzeros = [-1.0]\npoles = [[-2.0, 3.0]]\ngain = 7.0', unit="hz")
    _assert_matches(zpk, 7.0 * (S + f) / ((S + 2 * f) ** 2 + (3 * f) ** 2))


def test_hz_leaves_times_and_tf_alone():
    pi = _stage('type = "pi"\nkp = 2.0\nti = 0.5', unit="hz")
    _assert_matches(pi, 2.0 * (1 + 1 / (0.5 * S)))
    tf = _stage('type = "tf"\nnum = [1.0]\nden = [1.0, 3.0]', unit="hz")
    _assert_matches(tf, 1 / (S + 3.0))
