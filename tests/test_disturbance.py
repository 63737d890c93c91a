"""Load disturbance, noise to the actuator and actuator peaks (issue 13, parts 1-2).

Each reference names its source: [derived] follows from the stated formula, [memory] is
recalled from the cited book.  python-control is a reference library for the delay-free
|K·S| peak.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from loopwarden.analysis import analyze
from loopwarden.analysis.disturbance import gain_peak, load_response
from loopwarden.analysis.effort import controller_hf_gain, ks_peak
from loopwarden.cli import main
from loopwarden.design.loader import parse_design
from loopwarden.errors import DesignError
from loopwarden.lti import Loop, Zpk

BAND = 0.02


def design(body: str, disturbance: str = "[disturbance]\n", extra: str = "") -> str:
    return f'[design]\nname = "t"\n\n{body}\n\n{disturbance}\n{extra}\n'


def nominal(text: str):  # type: ignore[no-untyped-def]
    return analyze(parse_design(text, "t.toml"))[0]


# --------------------------------------------------------------------------- IE = 1/ki
# Åström & Hägglund, Advanced PID Control [derived; memory]: a unit load step at the plant
# input under any stabilising controller with integral gain ki gives ∫y dt = 1/ki
# (∫e dt = −1/ki): near s = 0, P·S = P/(1 + CP) → 1/C → s/ki.

FOPDT_PI = """
[plant]
tf = { num = [2.0], den = [60.0, 1.0] }
delay = 8.0

[[controller]]
type = "pi"
kp = 1.875
ti = 60.0
"""

# A position servo J s² + b s with a PID whose derivative is filtered (n = 8).
SERVO_PID = """
[plant]
zpk = { zeros = [], poles = [0.0, -20.0], gain = 400.0 }

[[controller]]
type = "pid"
kp = 0.3
ti = 0.25
td = 0.04
n = 8.0
"""


@pytest.mark.parametrize(("body", "kp", "ti"), [
    pytest.param(FOPDT_PI, 1.875, 60.0, id="PI-with-delay"),
    pytest.param(SERVO_PID, 0.3, 0.25, id="PID-filtered-servo"),
])
def test_integrated_error_is_one_over_ki(body: str, kp: float, ti: float) -> None:
    a = nominal(design(body))
    assert a.stability.closed_loop_stable
    d = a.disturbance
    assert d is not None
    ki = kp / ti
    # [derived] IE = 1/ki; the delay loop integrates the exact simulation (its ramp run),
    # the rational loop uses C A⁻¹ x∞: both far tighter than 1e-5.
    assert d.ie == pytest.approx(1.0 / ki, rel=1e-5)
    assert d.static_deviation == pytest.approx(0.0, abs=1e-9)
    # IAE ≥ |IE| always; equal when y never changes sign.
    assert d.iae >= abs(d.ie) * (1.0 - 1e-5)


def test_integrated_error_scales_with_the_load_size() -> None:
    # Linearity [derived]: a load of size −3 gives IE = −3/ki and three times the peak.
    one = nominal(design(FOPDT_PI)).disturbance
    three = nominal(design(FOPDT_PI, "[disturbance]\nsize = -3.0\n")).disturbance
    assert one is not None and three is not None
    assert three.ie == pytest.approx(-3.0 * one.ie, rel=1e-9)
    assert three.peak == pytest.approx(3.0 * one.peak, rel=1e-9)


SAMPLED_PI = """
[sampling]
period = 0.05
method = "{method}"

[plant]
tf = {{ num = [0.06], den = [0.096, 0.92, 1.0] }}
delay = 0.035

[[controller]]
type = "pi"
kp = 20.0
ti = 0.8
"""


@pytest.mark.parametrize("method", ["tustin", "zoh"])
def test_sampled_integrated_error(method: str) -> None:
    # [derived] At the instants Σ y[k] = (P_d·S)(z)·z/(z − 1) at z = 1 = 1/lim (z−1)C(z).
    # Tustin kp(1 + T(z+1)/(2ti(z−1))) and zoh kp(1 + T/(ti(z−1))) both have residue
    # kp·T/ti = ki·T, so T·Σ y[k] = 1/ki exactly (the transport delay and the sampled plant
    # drop out).  Not the continuous ∫y dt: the figure of the samples themselves.
    a = nominal(design(SAMPLED_PI.format(method=method)))
    d = a.disturbance
    assert d is not None and d.sampled
    ki = 20.0 / 0.8
    assert d.ie == pytest.approx(1.0 / ki, rel=1e-9)
    # |a| + |b| ≥ |a + b|: the absolute sum can only exceed the signed one.
    assert d.iae >= d.ie * (1.0 - 1e-12)


def test_sampled_z_domain_integrator() -> None:
    # The pump's z-domain PI (21.25 z − 20)/(z − 1) has residue 1.25 at z = 1, its unity-DC
    # lowpass keeps it: T·Σ y[k] = 0.05/1.25 = 0.04 [derived].
    text = Path("sample_designs/pump_pressure.toml").read_text(encoding="utf-8")
    a = analyze(parse_design(text + "\n[disturbance]\n", "pump.toml"))[0]
    assert a.disturbance is not None
    assert a.disturbance.ie == pytest.approx(0.04, rel=1e-9)


# --------------------------------------------------------------------------- first order
TAU, K = 2.0, 4.0
FIRST_ORDER_P = f"""
[plant]
tf = {{ num = [1.0], den = [{TAU}, 1.0] }}

[[controller]]
type = "gain"
k = {K}
"""


def test_first_order_p_control_at_the_input() -> None:
    # [derived] y = d/(1+K)·(1 − e^{−at}), a = (1+K)/τ: static deviation 1/(1+K) (also the
    # peak, approached only as t → ∞), IE and IAE infinite, |y − y∞| < 0.02·|d·P(0)| after
    # t = ln(1/((1+K)·0.02))/a.
    d = nominal(design(FIRST_ORDER_P)).disturbance
    assert d is not None
    a = (1.0 + K) / TAU
    assert d.static_deviation == pytest.approx(1.0 / (1.0 + K), rel=1e-12)
    assert d.peak == pytest.approx(1.0 / (1.0 + K), rel=1e-12)
    assert d.peak_time_s is None
    assert d.ie == math.inf and d.iae == math.inf
    assert d.recovery_time_s == pytest.approx(math.log(1.0 / ((1.0 + K) * BAND)) / a,
                                              rel=1e-9)
    # |P·S| = 1/|τjω + 1 + K|: largest at ω = 0, 1/(1+K) [derived].
    assert d.gain_peak == pytest.approx(1.0 / (1.0 + K), rel=1e-5)
    assert d.gain_peak_rad_s == 0.0
    # The controller output u = −K·y: its peak K/(1+K) [derived].
    assert d.u_peak == pytest.approx(K / (1.0 + K), rel=1e-6)


def test_first_order_p_control_at_the_output() -> None:
    # [derived] y = d·(1/(1+K) + K/(1+K)·e^{−at}): peak |d| at t = 0, recovery to within
    # 0.02·|d| of y∞ after ln(K/((1+K)·0.02))/a; |S| ≤ 1 with the supremum as ω → ∞.
    d = nominal(design(FIRST_ORDER_P, '[disturbance]\nat = "plant_output"\nsize = 2.0\n'
                       'band = 1.0\n')).disturbance
    assert d is not None
    a = (1.0 + K) / TAU
    assert d.peak == pytest.approx(2.0, rel=1e-12)
    assert d.peak_time_s == pytest.approx(0.0, abs=1e-12)
    assert d.static_deviation == pytest.approx(2.0 / (1.0 + K), rel=1e-12)
    assert d.recovery_time_s == pytest.approx(math.log(K / ((1.0 + K) * BAND)) / a, rel=1e-9)
    # |S(jω)| = |τjω + 1|/|τjω + 1 + K| up to the band 1 rad/s: largest at the band edge.
    s_band = abs(2j + 1.0) / abs(2j + 1.0 + K)
    assert d.gain_peak == pytest.approx(s_band, rel=1e-12)
    assert d.gain_peak_rad_s == pytest.approx(1.0)


def test_pi_on_first_order_against_the_closed_form() -> None:
    # PI kp(1 + 1/(ti s)) with ti = τ cancels the plant pole: P·S = s/(τs+1)/(s + kp/τ)
    # (times 1/τ·τ...) — y(t) = (e^{−t/τ} − e^{−ct})/(τ(c − 1/τ))·τ with c = kp/τ [derived]:
    # for P = 1/(τs+1), C = kp(τs+1)/(τs): P·S = τs/((τs+1)(τs + kp)).
    kp = 3.0
    text = design(f"[plant]\ntf = {{ num = [1.0], den = [{TAU}, 1.0] }}\n\n[[controller]]\n"
                  f'type = "pi"\nkp = {kp}\nti = {TAU}\n')
    d = nominal(text).disturbance
    assert d is not None
    p1, p2 = 1.0 / TAU, kp / TAU           # y = (e^{−p1 t} − e^{−p2 t})/(p2 − p1)/τ·... :
    # τs/((τs+1)(τs+kp)) · 1/s = 1/τ · 1/((s + p1)(s + p2))  →  y = (e^{−p1 t} − e^{−p2 t})
    # / (τ (p2 − p1)); peak where p1 e^{−p1 t} = p2 e^{−p2 t}.
    t_pk = math.log(p2 / p1) / (p2 - p1)
    y_pk = (math.exp(-p1 * t_pk) - math.exp(-p2 * t_pk)) / (TAU * (p2 - p1))
    assert d.peak_time_s == pytest.approx(t_pk, rel=1e-9)
    assert d.peak == pytest.approx(y_pk, rel=1e-12)
    assert d.ie == pytest.approx(TAU / kp, rel=1e-12)           # 1/ki, ki = kp/ti
    assert d.iae == pytest.approx(TAU / kp, rel=1e-6)           # y ≥ 0 throughout


# --------------------------------------------------------------------------- |K·S|
def _servo_loop() -> tuple[Loop, Zpk]:
    a = parse_design(design(SERVO_PID), "t.toml")
    loop = a.continuous_loop(a.variants[0])
    return loop, loop.controller


def test_ks_peak_against_a_dense_grid_and_python_control() -> None:
    control = pytest.importorskip("control")
    loop, ctrl = _servo_loop()
    peak, where = ks_peak(loop)
    # python-control as the reference library: K·S = K/(1 + K·P) formed by feedback().
    c_tf = control.tf(np.real(np.poly(ctrl.zeros)) * ctrl.gain, np.real(np.poly(ctrl.poles)))
    p_tf = control.tf([400.0], [1.0, 20.0, 0.0])
    ks = control.feedback(c_tf, p_tf)
    w = np.geomspace(1e-3, 1e5, 400_001)
    mag = np.abs(ks(1j * w))
    # Here |K·S| rises monotonically towards |K(∞)|/|1 + L(∞)| = kp(1 + n) = 2.7 (the
    # plant rolls off, L → 0) [derived]: the supremum is approached as ω → ∞.
    assert np.all(np.diff(mag[w > 100.0]) > 0)
    assert where == math.inf
    assert peak == pytest.approx(0.3 * (1.0 + 8.0), rel=1e-12)
    assert peak >= mag.max() and peak == pytest.approx(mag.max(), rel=1e-5)
    # [derived] |K(∞)| of kp(1 + 1/(ti s) + td s/((td/n)s + 1)) is kp(1 + n).
    assert controller_hf_gain(loop) == pytest.approx(0.3 * (1.0 + 8.0), rel=1e-12)


def test_ks_peak_of_a_pi_loop_with_delay_on_a_dense_grid() -> None:
    a = parse_design(design(FOPDT_PI), "t.toml")
    loop = a.continuous_loop(a.variants[0])
    peak, where = ks_peak(loop)
    w = np.geomspace(1e-5, 1e2, 700_001)
    c = 1.875 * (1.0 + 1.0 / (60.0 * 1j * w))
    mag = np.abs(c / (1.0 + c * 2.0 * np.exp(-8j * w) / (60j * w + 1.0)))
    assert peak == pytest.approx(mag.max(), rel=1e-7)
    assert where == pytest.approx(w[np.argmax(mag)], rel=1e-3)


def test_gain_peak_up_to_the_band_is_the_band_limited_maximum() -> None:
    a = parse_design(design(FOPDT_PI), "t.toml")
    loop = a.continuous_loop(a.variants[0])
    w = np.geomspace(1e-6, 0.05, 200_001)
    c = 1.875 * (1.0 + 1.0 / (60.0 * 1j * w))
    p = 2.0 * np.exp(-8j * w) / (60j * w + 1.0)
    ref = np.abs(p / (1.0 + c * p)).max()
    peak, _ = gain_peak(loop, "plant_input", 0.05)
    assert peak == pytest.approx(ref, rel=1e-7)


# --------------------------------------------------------------------------- loading
@pytest.mark.parametrize(("table", "key", "pattern"), [
    pytest.param("[disturbance]\nsise = 1.0\n", "disturbance.sise", "size", id="unknown-key"),
    pytest.param('[disturbance]\nat = "input"\n', "disturbance.at", "plant_input",
                 id="unknown-place"),
    pytest.param("[disturbance]\nsize = nan\n", "disturbance.size", "finite", id="nan-size"),
    pytest.param("[disturbance]\nsize = 0.0\n", "disturbance.size", "nonzero", id="zero-size"),
    pytest.param('[disturbance]\nsize = "1"\n', "disturbance.size", "number", id="text-size"),
    pytest.param("[disturbance]\nband = -1.0\n", "disturbance.band", "positive",
                 id="negative-band"),
    pytest.param("[disturbance]\nband = inf\n", "disturbance.band", "finite", id="inf-band"),
])
def test_bad_disturbance_table_names_file_table_and_key(table: str, key: str,
                                                        pattern: str) -> None:
    with pytest.raises(DesignError) as err:
        parse_design(design(FIRST_ORDER_P, table), "bad.toml")
    msg = str(err.value)
    assert "bad.toml" in msg and key in msg and pattern in msg.lower()


def test_bad_disturbance_table_is_exit_2(tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(design(FIRST_ORDER_P, "[disturbance]\nsise = 1.0\n"), encoding="utf-8")
    assert main(["review", str(path), "--json", str(tmp_path / "r.json")]) == 2
    assert not (tmp_path / "r.json").exists()


def test_band_in_hz_is_converted() -> None:
    text = design(FIRST_ORDER_P, "[disturbance]\nband = 0.5\n").replace(
        'name = "t"', 'name = "t"\nfrequency_unit = "hz"')
    assert parse_design(text, "t.toml").disturbance.band_rad_s == pytest.approx(math.pi)


# --------------------------------------------------------------------------- checks, JSON
def test_checks_and_json_keys(tmp_path: Path) -> None:
    path = tmp_path / "d.toml"
    path.write_text(design(FOPDT_PI, "[disturbance]\nsize = 5.0\n",
                           "[requirements]\ndisturbance_peak = 1.0\ndisturbance_iae = 500.0\n"
                           "disturbance_recovery_time = 300.0\nactuator_limit = 100.0\n"),
                    encoding="utf-8")
    out = tmp_path / "r.json"
    main(["review", str(path), "--rules", "process-control", "--json", str(out)])
    data = json.loads(out.read_text(encoding="utf-8"))
    v = data["variants"][0]
    for key in ("peak", "peak_time_s", "ie", "iae", "recovery_time_s"):
        assert key in v["disturbance"]
    for key in ("ks_peak", "ks_peak_rad_s", "controller_hf_gain", "u_peak_step",
                "u_peak_disturbance"):
        assert key in v["effort"]
    assert v["disturbance"]["ie"] == pytest.approx(5.0 * 60.0 / 1.875, rel=1e-5)
    found = {f["rule"]: f for f in data["findings"] if f["variant"] == "nominal"}
    load = found["load.rejection"]
    # The peak (about 2.1 for a load of 5) breaches the design's 1.0.
    assert load["status"] == "fail" and load["measured"] == pytest.approx(
        v["disturbance"]["peak"])
    assert load["limit_source"] == "design [requirements].disturbance_peak"


def test_disturbance_rule_without_table_or_limit_is_not_applicable(tmp_path: Path) -> None:
    path = tmp_path / "d.toml"
    path.write_text(design(FOPDT_PI, ""), encoding="utf-8")
    out = tmp_path / "r.json"
    main(["review", str(path), "--rules", "process-control", "--json", str(out)])
    data = json.loads(out.read_text(encoding="utf-8"))
    load = next(f for f in data["findings"] if f["rule"] == "load.rejection")
    assert load["status"] == "n/a" and "[disturbance]" in load["message"]
    assert data["variants"][0]["disturbance"] is None
    path.write_text(design(FOPDT_PI), encoding="utf-8")
    main(["review", str(path), "--rules", "process-control", "--json", str(out), "--force"])
    data = json.loads(out.read_text(encoding="utf-8"))
    load = next(f for f in data["findings"] if f["rule"] == "load.rejection")
    assert load["status"] == "n/a" and "disturbance_peak" in load["message"]


@pytest.mark.parametrize(("limit_factor", "status"), [(1.01, "pass"), (0.99, "fail")])
def test_recovery_check_against_the_closed_form(tmp_path: Path, limit_factor: float,
                                                status: str) -> None:
    # [derived] as in test_first_order_p_control_at_the_output: y = d·(1/(1+K) +
    # K/(1+K)·e^{−at}), a = (1+K)/τ, back within 0.02·|d| of y∞ after ln(K/((1+K)·0.02))/a.
    t_rec = math.log(K / ((1.0 + K) * BAND)) / ((1.0 + K) / TAU)
    path = tmp_path / "d.toml"
    path.write_text(design(FIRST_ORDER_P, '[disturbance]\nat = "plant_output"\nsize = 2.0\n',
                           f"[requirements]\ndisturbance_recovery_time = "
                           f"{limit_factor * t_rec!r}\n"), encoding="utf-8")
    out = tmp_path / "r.json"
    main(["review", str(path), "--rules", "process-control", "--json", str(out)])
    data = json.loads(out.read_text(encoding="utf-8"))
    rec = next(f for f in data["findings"] if f["rule"] == "load.recovery")
    assert rec["check"] == "disturbance_recovery"
    assert rec["measured"] == pytest.approx(t_rec, rel=1e-9)
    assert rec["status"] == status
    assert rec["limit_source"] == "design [requirements].disturbance_recovery_time"


def test_load_response_of_an_unstable_loop_is_refused() -> None:
    loop = Loop(plant=Zpk([], [1.0], 1.0), controller=Zpk.constant(0.5),
                sensor=Zpk.constant(1.0), stages=(Zpk.constant(0.5),))
    from loopwarden.errors import AnalysisError

    with pytest.raises(AnalysisError):
        load_response(loop, "plant_input", 1.0, BAND, None)


# --------------------------------------------------------------------------- actuator peaks
def test_actuator_peak_of_the_reference_step_closed_forms() -> None:
    # [derived] FOPDT under PI: until the dead time θ = 8 s has passed the output has not
    # moved, so u(t) = kp(1 + t/ti) rises to kp(1 + θ/ti) = 2.125 at t = θ, then falls.
    e = nominal(design(FOPDT_PI)).effort
    assert e is not None
    assert e.u_peak_step == pytest.approx(1.875 * (1.0 + 8.0 / 60.0), rel=1e-9)
    # [derived] A strictly proper plant: u(0+) = K(∞)·1 = kp(1 + n) for the filtered PID.
    e = nominal(design(SERVO_PID)).effort
    assert e is not None
    assert e.u_peak_step == pytest.approx(0.3 * 9.0, rel=1e-9)
    # [derived] P control of a first-order plant: u = K(1 − y) is largest at t = 0: K.
    e = nominal(design(FIRST_ORDER_P)).effort
    assert e is not None
    assert e.u_peak_step == pytest.approx(K, rel=1e-12)
    assert e.u_peak_disturbance == pytest.approx(K / (1.0 + K), rel=1e-6)
    assert e.controller_hf_gain == pytest.approx(K)


def test_effort_check_against_the_actuator_limit(tmp_path: Path) -> None:
    path = tmp_path / "d.toml"
    path.write_text(design(SERVO_PID, "", "[requirements]\nactuator_limit = 2.5\n"
                                        "noise_gain_max = 3.0\n"), encoding="utf-8")
    out = tmp_path / "r.json"
    main(["review", str(path), "--rules", "motion-servo", "--json", str(out)])
    data = json.loads(out.read_text(encoding="utf-8"))
    found = {f["rule"]: f for f in data["findings"] if f["variant"] == "nominal"}
    assert found["effort.actuator_peak"]["status"] == "fail"          # 2.7 > 2.5
    assert found["effort.actuator_peak"]["measured"] == pytest.approx(2.7, rel=1e-9)
    assert found["noise.actuator"]["status"] == "pass"                # 2.7 ≤ 3.0


# --------------------------------------------------------------------------- reference libraries
def test_servo_load_response_against_python_control() -> None:
    # python-control as reference library: P·S = feedback(P, K) simulated on a fine grid;
    # its peak, peak time and ∫|y| dt agree with the exact closed-loop solution.
    control = pytest.importorskip("control")
    d = nominal(design(SERVO_PID)).disturbance
    assert d is not None
    loop, ctrl = _servo_loop()
    c_tf = control.tf(np.real(np.poly(ctrl.zeros)) * ctrl.gain, np.real(np.poly(ctrl.poles)))
    p_tf = control.tf([400.0], [1.0, 20.0, 0.0])
    t = np.linspace(0.0, d.horizon_s, 400_001)
    resp = control.step_response(control.feedback(p_tf, c_tf), T=t)
    y = np.squeeze(resp.outputs)
    k = int(np.argmax(np.abs(y)))
    assert d.peak == pytest.approx(abs(y[k]), rel=1e-6)
    assert d.peak_time_s == pytest.approx(t[k], abs=2.0 * (t[1] - t[0]))
    assert d.iae == pytest.approx(np.trapezoid(np.abs(y), t), rel=1e-5)
    assert d.ie == pytest.approx(np.trapezoid(y, t), rel=1e-5)


def test_sampled_load_response_against_scipy() -> None:
    # scipy.signal as reference: the plant 1/(s + 1) sampled through a zoh (cont2discrete),
    # the digital PI 2 + 0.5·T/(z − 1) (zoh form of kp(1 + 1/(ti s)), kp = 2, ti = 4), and
    # y[k] = (P_d/(1 + C·P_d)) applied to the held unit step, by dlsim.
    from scipy import signal

    T = 0.1
    text = design(f'[sampling]\nperiod = {T}\nmethod = "zoh"\n\n[plant]\ntf = {{ num = [1.0], '
                  'den = [1.0, 1.0] }\n\n[[controller]]\ntype = "pi"\nkp = 2.0\nti = 4.0\n')
    d = nominal(text).disturbance
    assert d is not None
    num_p, den_p, _ = signal.cont2discrete(([1.0], [1.0, 1.0]), T, method="zoh")
    num_p = np.trim_zeros(np.ravel(num_p), "f")
    num_c = np.polyadd(2.0 * np.array([1.0, -1.0]), [0.5 * T])     # 2(z − 1) + 0.5T
    den_c = np.array([1.0, -1.0])
    num = np.polymul(num_p, den_c)
    den = np.polyadd(np.polymul(den_p, den_c), np.polymul(num_p, num_c))
    n = round(d.horizon_s / T) + 1
    _, y = signal.dlsim((num, den, T), np.ones(n))
    y = np.ravel(y)
    k = int(np.argmax(np.abs(y)))
    assert d.peak == pytest.approx(abs(y[k]), rel=1e-9)
    assert d.peak_time_s == pytest.approx(k * T, rel=1e-12)
    assert d.iae == pytest.approx(T * np.sum(np.abs(y)), rel=1e-7)
    assert d.ie == pytest.approx(1.0 / 0.5, rel=1e-9)        # 1/ki, ki = kp/ti [derived]


def test_sampled_output_load_against_scipy() -> None:
    # S = 1/(1 + C·P_d) applied to a unit step at the instants (scipy dlsim) [derived].
    from scipy import signal

    T = 0.1
    body = (f'[sampling]\nperiod = {T}\nmethod = "zoh"\n\n[plant]\ntf = {{ num = [1.0], '
            'den = [1.0, 1.0] }\n\n[[controller]]\ntype = "gain"\nk = 3.0\n')
    d = nominal(design(body, '[disturbance]\nat = "plant_output"\n')).disturbance
    assert d is not None
    num_p, den_p, _ = signal.cont2discrete(([1.0], [1.0, 1.0]), T, method="zoh")
    num_p = np.trim_zeros(np.ravel(num_p), "f")
    den = np.polyadd(den_p, 3.0 * num_p)
    n = round(d.horizon_s / T) + 1
    _, y = signal.dlsim((np.ravel(den_p), den, T), np.ones(n))
    y = np.ravel(y)
    assert d.peak == pytest.approx(1.0, rel=1e-12)                   # y[0] = d
    assert d.static_deviation == pytest.approx(y[-1], rel=1e-9)      # 1/(1 + 3) [derived]
    assert d.static_deviation == pytest.approx(0.25, rel=1e-9)
    level = BAND * 1.0
    last = int(np.flatnonzero(np.abs(y - y[-1]) > level)[-1])
    assert d.recovery_time_s == pytest.approx((last + 1) * T, rel=1e-12)


def test_sampled_output_load_behind_a_sensor_against_scipy() -> None:
    # [derived] At the instants, with zoh images P_z, (HP)_z, H_z (cont2discrete) and the
    # digital controller C: u = −C·H_z·d/(1 + C·(HP)_z) and y = d + P_z·u, because the
    # held step d is exactly what the sensor sees between the instants. dlsim as reference.
    from scipy import signal

    T = 0.1
    body = (f'[sampling]\nperiod = {T}\nmethod = "zoh"\n\n[plant]\ntf = {{ num = [1.0], '
            'den = [1.0, 1.0] }\n\n[sensor]\ntf = { num = [1.0], den = [0.3, 1.0] }\n\n'
            '[[controller]]\ntype = "pi"\nkp = 1.0\nti = 1.0\n')
    d = nominal(design(body, '[disturbance]\nat = "plant_output"\n')).disturbance
    assert d is not None

    def zoh(num: list[float], den: list[float]) -> tuple[np.ndarray, np.ndarray]:
        n, m, _ = signal.cont2discrete((num, den), T, method="zoh")
        return np.ravel(n), np.ravel(m)

    n_p, d_p = zoh([1.0], [1.0, 1.0])
    n_h, d_h = zoh([1.0], [0.3, 1.0])
    n_hp, d_hp = zoh([1.0], np.polymul([0.3, 1.0], [1.0, 1.0]))
    n_c, d_c = np.array([1.0, -1.0 + T]), np.array([1.0, -1.0])    # kp(1 + T/(ti(z − 1)))
    closed = np.polyadd(np.polymul(d_c, d_hp), np.polymul(n_c, n_hp))
    den = np.polymul(np.polymul(d_p, d_h), closed)
    num = np.polysub(den, np.polymul(np.polymul(n_p, n_c), np.polymul(n_h, d_hp)))
    n = round(d.horizon_s / T) + 1
    _, y = signal.dlsim((num, den, T), np.ones(n))
    y = np.ravel(y)
    k = int(np.argmax(np.abs(y)))
    assert d.peak == pytest.approx(abs(y[k]), rel=1e-9)
    assert d.iae == pytest.approx(T * np.sum(np.abs(y)), rel=1e-7)
    assert d.ie == pytest.approx(T * np.sum(y), rel=1e-7, abs=1e-9)


def test_output_load_behind_a_sensor_against_python_control() -> None:
    # y = S·d with S = 1/(1 + C·P·H) (python-control feedback(1, C·P·H)); the sensor sees
    # the disturbed output.
    control = pytest.importorskip("control")
    body = ('[plant]\ntf = { num = [1.0], den = [1.0, 1.0] }\n\n'
            '[sensor]\ntf = { num = [1.0], den = [0.1, 1.0] }\n\n'
            '[[controller]]\ntype = "pi"\nkp = 2.0\nti = 0.5\n')
    d = nominal(design(body, '[disturbance]\nat = "plant_output"\n')).disturbance
    assert d is not None
    s = control.tf("s")
    loop_tf = 2.0 * (1.0 + 1.0 / (0.5 * s)) / (s + 1.0) / (0.1 * s + 1.0)
    t = np.linspace(0.0, d.horizon_s, 400_001)
    y = np.squeeze(control.step_response(control.feedback(1, loop_tf), T=t).outputs)
    assert d.peak == pytest.approx(np.max(np.abs(y)), rel=1e-9)        # y(0+) = 1
    assert d.iae == pytest.approx(np.trapezoid(np.abs(y), t), rel=1e-5)
    assert d.ie == pytest.approx(np.trapezoid(y, t), rel=1e-5, abs=1e-7)
