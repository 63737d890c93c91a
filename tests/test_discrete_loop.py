"""Sampled closed loops: poles, verdict, step response, tracking, and the design file.

References: python-control's dt closed loop (``feedback``, ``poles``, ``step_response``,
``step_info``) built from ``control.c2d`` of the plant and of sensor·plant; an independent
sub-sample simulation of the hybrid loop (continuous plant stepped exactly 100 times per
period, held input delayed by a fractional number of samples, controller run at the
samples); closed forms [derived] for the error constants.
"""

from __future__ import annotations

import json
import math
import textwrap
import warnings
from pathlib import Path

import control as ct
import numpy as np
import pytest
from scipy import linalg

from loopwarden.analysis import analyze_variant
from loopwarden.analysis.discrete_response import (
    discrete_internal_stability,
    discrete_stability,
    discrete_step_response,
    discrete_tracking,
)
from loopwarden.cli import main
from loopwarden.design.loader import parse_design

ROOT = Path(__file__).resolve().parents[1]
T = 0.05

#: Plant 0.06/((0.8 s + 1)(0.12 s + 1)), sensor 1/(0.02 s + 1), digital PI in z.
PLANT = (0.06, [0.096, 0.92, 1.0])
SENSOR = (1.0, [0.02, 1.0])
PI_NUM, PI_DEN = [21.25, -20.0], [1.0, -1.0]


def design(*, delay: float = 2 * T, cd: int = 1, gain: float = 1.0, sensor: bool = True,
           extra_stage: str = ""):
    text = f"""
    [design]
    name = "pump"
    [sampling]
    period = {T}
    compute_delay = {cd}
    [plant]
    tf = {{ num = [{PLANT[0]}], den = {PLANT[1]} }}
    delay = {delay}
    {"[sensor]" if sensor else ""}
    {f"tf = {{ num = [{SENSOR[0]}], den = {SENSOR[1]} }}" if sensor else ""}
    [[controller]]
    type = "tf"
    domain = "z"
    num = {PI_NUM}
    den = {PI_DEN}
    [[controller]]
    type = "gain"
    k = {gain}
    {extra_stage}
    """
    d = parse_design(textwrap.dedent(text), "pump.toml")
    return d, d.sampled_loop(d.variants[0])


def reference_loop(*, delay_samples: int = 2, cd: int = 1, gain: float = 1.0):
    """python-control: C(z)·z^{−cd}, P_d = c2d(P)·z^{−m} (to y), c2d(H·P)·z^{−m} (to ym)."""
    p = ct.tf([PLANT[0]], PLANT[1])
    h = ct.tf([SENSOR[0]], SENSOR[1])
    shift = ct.tf([1], [1] + [0] * delay_samples, T)
    c = gain * ct.tf(PI_NUM, PI_DEN, T) * ct.tf([1], [1] + [0] * cd, T)
    return c, ct.c2d(p, T, "zoh") * shift, ct.c2d(h * p, T, "zoh") * shift


# --------------------------------------------------------------------------- poles, verdict
@pytest.mark.parametrize("gain", [1.0, 8.0])
def test_closed_loop_poles_match_python_control(gain):
    # Source: control.feedback(C·P_ym, 1).poles() of the dt loop; gain 8 (beyond the
    # 13 dB gain margin) is unstable.
    _, loop = design(gain=gain)
    c, _, p_ym = reference_loop(gain=gain)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = np.sort_complex(ct.feedback(c * p_ym, 1).poles())
    st = discrete_stability(loop)
    ours = np.sort_complex(np.array(st.closed_loop_poles))
    assert ours.size == ref.size
    for r in ref:
        assert np.min(np.abs(ours - r)) < 1e-7 * max(1.0, abs(r))
    assert st.closed_loop_stable == bool(np.max(np.abs(ref)) < 1.0)
    assert st.domain == "z"
    assert st.closed_loop_stable is (gain == 1.0)


def test_hidden_unstable_mode_is_kept():
    # [derived] A controller zero at e^{T} cancels the sampled pole of P = 1/(s − 1) in L,
    # but the mode stays a closed-loop pole: the loop is unstable and not internally stable.
    e = math.exp(T)
    text = f"""
    [design]
    name = "hidden"
    [sampling]
    period = {T}
    [plant]
    zpk = {{ poles = [1.0], gain = 1.0 }}
    [[controller]]
    type = "tf"
    domain = "z"
    num = [{2.0!r}, {-2.0 * e!r}]
    den = [1.0, -0.2]
    """
    d = parse_design(textwrap.dedent(text), "hidden.toml")
    loop = d.sampled_loop(d.variants[0])
    st = discrete_stability(loop)
    assert not st.closed_loop_stable
    assert np.min(np.abs(np.array(st.closed_loop_poles) - e)) < 1e-9
    blocks = [("controller[1] tf (z)", loop.stages[0]), ("sampled plant", loop.plant)]
    assert not discrete_internal_stability(blocks).internally_stable


# --------------------------------------------------------------------------- step
def test_step_matches_python_control_step_info():
    # Source: control.step_response / step_info of r → y = P_d·C/(1 + C·P_ym), sampled
    # (SettlingTimeThreshold 0.02; rise 10–90 %, read at the samples as step_info does).
    _, loop = design()
    c, p_y, p_ym = reference_loop()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t_ry = p_y * ct.feedback(c, p_ym)
        # [derived] type 1 with a sensor of DC gain 1: y∞ = 1 exactly.
        final = 1.0
        resp = ct.step_response(t_ry, T=np.arange(0, 400) * T)
        info = ct.step_info(resp.outputs, resp.time, yfinal=final,
                            SettlingTimeThreshold=0.02)
    res = discrete_step_response(loop, 0.02)
    m = res.metrics
    assert m.final_value == pytest.approx(final, rel=1e-9)
    assert m.overshoot_pct == pytest.approx(info["Overshoot"], rel=1e-7, abs=1e-9)
    assert m.settling_time_s == pytest.approx(info["SettlingTime"], abs=1e-12)
    assert m.rise_time_s == pytest.approx(info["RiseTime"], abs=1e-12)
    k = min(400, res.step.time_s.size)
    stride = round((res.step.time_s[1] - res.step.time_s[0]) / T)
    y_ref = np.asarray(resp.outputs)[::stride][:k]
    assert np.max(np.abs(res.step.value[:y_ref.size] - y_ref)) < 1e-9


def _hybrid_simulation(delay_s: float, cd: int, samples: int, sub: int = 100):
    """Step response y(kT) of the hybrid loop, simulated without the sampled model.

    The continuous plant and sensor are stepped exactly over T/sub (matrix exponential);
    the plant input is the held controller output delayed by delay_s (a multiple of
    T/sub); the controller (PI difference equation) runs at each sample on ym(kT) and its
    output is applied cd samples later.
    """
    p = ct.ss(ct.tf([PLANT[0]], PLANT[1]))
    h = ct.ss(ct.tf([SENSOR[0]], SENSOR[1]))
    ph = ct.series(p, h)
    a, b = ph.A, ph.B
    c_ym = ph.C
    # Plant output y from the series state: the plant part comes first in control.series.
    n_p = p.A.shape[0]
    c_y = np.hstack([p.C, np.zeros((1, a.shape[0] - n_p))])
    hstep = T / sub
    big = np.zeros((a.shape[0] + 1, a.shape[0] + 1))
    big[:-1, :-1] = a * hstep
    big[:-1, -1:] = b * hstep
    e = linalg.expm(big)
    phi, gam = e[:-1, :-1], e[:-1, -1:]
    lag = round(delay_s / hstep)
    x = np.zeros((a.shape[0], 1))
    u_hold = [0.0] * (samples * sub + lag + 1)       # plant input at each sub-step
    outputs = [0.0] * (cd + 1)                        # controller outputs in flight
    u_prev = e_prev = 0.0
    ys = []
    for k in range(samples):
        ym = float((c_ym @ x)[0, 0])
        ys.append(float((c_y @ x)[0, 0]))
        err = 1.0 - ym
        u = u_prev + PI_NUM[0] * err + PI_NUM[1] * e_prev
        u_prev, e_prev = u, err
        outputs.append(u)
        applied = outputs[-1 - cd]
        for j in range(sub):
            u_hold[k * sub + j + lag] = applied
        for j in range(sub):
            x = phi @ x + gam * u_hold[k * sub + j]
    return np.array(ys)


@pytest.mark.parametrize("delay", [0.035, 2 * T])
def test_step_matches_hybrid_simulation(delay):
    # Source: _hybrid_simulation (independent of the sampled model); the fractional delay
    # 0.7 T is what python-control cannot discretise.
    _, loop = design(delay=delay, sensor=True)
    res = discrete_step_response(loop, 0.02)
    ref = _hybrid_simulation(delay, 1, 200)
    t = res.step.time_s
    assert t[1] - t[0] == pytest.approx(T)          # every sample kept for this horizon
    assert np.max(np.abs(res.step.value[:200] - ref)) < 1e-9


# --------------------------------------------------------------------------- tracking
def test_error_constants_discrete_definitions():
    # [derived] the hold equivalent keeps the low-frequency coefficient: ZOH of k/(s(s+1))
    # gives Kv = lim (z−1)L/T = k; ZOH of k/s² gives Ka = lim (z−1)²L/T² = k; the PI in z
    # adds one more pole at z = 1.
    for poles, which, typ in (("[0.0, -1.0]", "kv", 1), ("[0.0, 0.0]", "ka", 2)):
        text = f"""
        [design]
        name = "t"
        [sampling]
        period = {T}
        [plant]
        zpk = {{ poles = {poles}, gain = 3.0 }}
        [[controller]]
        type = "gain"
        k = 1.0
        """
        d = parse_design(textwrap.dedent(text), "t.toml")
        tr = discrete_tracking(d.sampled_loop(d.variants[0]))
        assert tr.system_type == typ
        assert getattr(tr, which) == pytest.approx(3.0, rel=1e-9)
    _, loop = design()
    tr = discrete_tracking(loop)
    # C(1)... PI in z: L has one pole at z = 1; Kv = lim (z − 1) C P_d z^{−3} / T
    # = (21.25 − 20)·0.06/T [derived: P_d(1) = P(0) = 0.06, sensor DC gain 1].
    assert tr.system_type == 1
    assert tr.kv == pytest.approx(1.25 * 0.06 / T, rel=1e-9)
    res = discrete_step_response(loop, 0.02)
    # Kv describes r − H·y. The ramp error of the plant output, r − y, settles at
    # −T·T_ry'(1) for r[k] = kT (final-value theorem, T_ry(1) = 1) [derived], with T_ry
    # = P_y·C/(1 + C·P_ym) from python-control's polynomials; it is close to 1/Kv − 0.02 s
    # (the sensor lag) but not equal: the held input ripples between the samples.
    c, p_y, p_ym = reference_loop()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t_ry = p_y * ct.feedback(c, p_ym)
    num, den = (np.asarray(x[0][0], dtype=float) for x in ct.tfdata(t_ry))
    n1, d1 = np.polyval(num, 1.0), np.polyval(den, 1.0)
    slope = (np.polyval(np.polyder(num), 1.0) * d1 - n1 * np.polyval(np.polyder(den), 1.0)) \
        / d1**2
    # The horizon ends when the decaying part is below 1e−2·band of the value (documented).
    assert res.metrics.ramp_error_final == pytest.approx(-T * slope, rel=1e-2 * 0.02)
    # Sample by sample the ramp error equals python-control's simulation of the same loop.
    k = np.arange(200)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ramp = ct.forced_response(t_ry, T=k * T, U=k * T)
    stride = round((res.ramp_error.time_s[1] - res.ramp_error.time_s[0]) / T)
    e_ref = (k * T - np.asarray(ramp.outputs))[::stride]
    n = min(e_ref.size, res.ramp_error.value.size)
    assert np.max(np.abs(res.ramp_error.value[:n] - e_ref[:n])) < 1e-9


# --------------------------------------------------------------------------- design file
def test_z_stage_is_not_converted_from_hz():
    # Coefficients in z are numbers of the difference equation: the frequency unit of the
    # file does not touch them (only the prewarp frequency and s-domain stages convert).
    base = """
    [design]
    name = "t"
    {unit}
    [sampling]
    period = 0.01
    prewarp = {prewarp}
    [plant]
    tf = {{ num = [1.0], den = [1.0, 1.0] }}
    [[controller]]
    type = "tf"
    domain = "z"
    num = [1.2, -1.0]
    den = [1.0, -1.0]
    [[controller]]
    type = "lowpass"
    freq = {freq}
    """
    a = parse_design(textwrap.dedent(base.format(unit="", prewarp=20.0, freq=20.0)), "a")
    b = parse_design(textwrap.dedent(base.format(unit='frequency_unit = "hz"',
                                                 prewarp=20.0 / (2 * math.pi),
                                                 freq=20.0 / (2 * math.pi))), "b")
    la, lb = a.sampled_loop(a.variants[0]), b.sampled_loop(b.variants[0])
    z = np.exp(1j * np.linspace(0.1, 3.0, 7))
    assert np.allclose(la.rational(z), lb.rational(z), rtol=1e-12)
    assert b.sampling.prewarp_rad_s == pytest.approx(20.0)


BAD = {
    "prewarp-with-zoh": ('method = "zoh"\nprewarp = 10.0', "sampling.prewarp", "Tustin"),
    "prewarp-above-nyquist": ("prewarp = 400.0", "sampling.prewarp", "Nyquist"),
    "negative-compute-delay": ("compute_delay = -1", "sampling.compute_delay", "≥ 0"),
    "fractional-compute-delay": ("compute_delay = 1.5", "sampling.compute_delay",
                                 "whole number"),
    "unknown-method": ('method = "tustn"', "sampling.method", "did you mean 'tustin'"),
    "zero-period": ("period = 0.0", "sampling.period", "positive"),
}


@pytest.mark.parametrize("case", BAD)
def test_bad_sampling_exits_2(tmp_path, capsys, case):
    line, where, fragment = BAD[case]
    period = "" if line.startswith("period") else "period = 0.01\n"
    path = tmp_path / "bad.toml"
    path.write_text(f'[design]\nname = "x"\n[sampling]\n{period}{line}\n[plant]\n'
                    'zpk = { poles = [-1.0], gain = 1.0 }\n[[controller]]\ntype = "gain"\n'
                    "k = 1.0\n", encoding="utf-8")
    assert main(["review", str(path), "--quiet", "--json", str(tmp_path / "r.json")]) == 2
    err = capsys.readouterr().err
    assert where in err and fragment in err and str(path) in err
    assert not (tmp_path / "r.json").exists()


BAD_STAGE = {
    "z-without-sampling": ('type = "tf"\ndomain = "z"\nnum = [1.0]\nden = [1.0, -0.5]',
                           False, "controller[1].domain", "needs a sampled design"),
    "z-not-causal": ('type = "tf"\ndomain = "z"\nnum = [1.0, 0.0, 0.0]\nden = [1.0, -0.5]',
                     True, "controller[1]", "not causal"),
    "z-zpk": ('type = "zpk"\ndomain = "z"\npoles = [0.5]\ngain = 1.0', True,
              "controller[1].type", 'must be type = "tf"'),
    "unknown-domain": ('type = "gain"\ndomain = "w"\nk = 1.0', True, "controller[1].domain",
                       "unknown value"),
}


@pytest.mark.parametrize("case", BAD_STAGE)
def test_bad_z_stage_exits_2(tmp_path, capsys, case):
    stage, sampled, where, fragment = BAD_STAGE[case]
    sampling = "[sampling]\nperiod = 0.01\n" if sampled else ""
    path = tmp_path / "bad.toml"
    path.write_text(f'[design]\nname = "x"\n{sampling}[plant]\n'
                    f"zpk = {{ poles = [-1.0], gain = 1.0 }}\n[[controller]]\n{stage}\n",
                    encoding="utf-8")
    assert main(["review", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert where in err and fragment in err


# --------------------------------------------------------------------------- end to end
@pytest.fixture(scope="module")
def pump_review(tmp_path_factory):
    folder = tmp_path_factory.mktemp("pump")
    rc = main(["review", str(ROOT / "sample_designs" / "pump_pressure.toml"), "--quiet",
               "--date", "2025-01-01", "--json", str(folder / "r.json")])
    return rc, json.loads((folder / "r.json").read_text(encoding="utf-8"))


def test_pump_pressure_sample_review(pump_review):
    rc, doc = pump_review
    assert rc == 0 and doc["verdict"] == "pass"
    assert doc["design"]["sampling"]["period_s"] == 0.05
    nominal = doc["variants"][0]
    s = nominal["sampling"]
    assert s["period_s"] == 0.05 and s["compute_delay_samples"] == 1
    assert s["plant_delay_samples"] == pytest.approx((0.035) / 0.05)
    assert "between the instants" in s["note"].lower() and "sampling instants" in s["note"]
    m = nominal["margins"]
    assert m["delay_margin_samples"] == pytest.approx(m["delay_margin_s"] / 0.05, rel=1e-12)
    assert nominal["stability"]["domain"] == "z"
    rate = next(f for f in doc["findings"] if f["rule"] == "sampling.rate"
                and f["variant"] == "nominal")
    assert rate["status"] == "pass" and "sampling instants" in rate["message"]
    assert rate["measured"] == pytest.approx(s["sample_rate_ratio"])
    assert s["sample_rate_ratio"] == pytest.approx(
        s["sample_rate_rad_s"] / s["closed_loop_bandwidth_rad_s"])
    # The sample's stated character (its header): GM ≈ 13 dB, PM ≈ 65°, ≈ 15 samples.
    assert m["gain_margin_db"] == pytest.approx(13.1, abs=0.1)
    assert m["phase_margin_deg"] == pytest.approx(65.3, abs=0.2)
    assert m["delay_margin_samples"] == pytest.approx(15.2, abs=0.1)
    na = {f["rule"]: f for f in doc["findings"] if f["variant"] == "nominal"}
    # The slow-pair review runs in z now: the pump's PI leaves no slow pair (its zero is
    # not near a closed-loop root), so the rule passes with an empty list.
    assert na["boost.slow_tail"]["status"] == "pass"
    assert nominal["slow_pairs"] == []


def test_sample_rate_is_na_for_continuous_designs(tmp_path):
    rc = main(["review", str(ROOT / "sample_designs" / "tank_level.toml"), "--quiet",
               "--date", "2025-01-01", "--json", str(tmp_path / "r.json")])
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    assert rc in (0, 1)
    rate = [f for f in doc["findings"] if f["check"] == "sample_rate"]
    assert rate and all(f["status"] == "n/a" and "continuous-time" in f["message"]
                        for f in rate)
    assert doc["variants"][0]["sampling"] is None


def test_slow_sample_rate_warns(tmp_path):
    # [practice] 10–30x: at 0.4 s and Kc = 12 the loop still has good margins (judged
    # exactly in z) but samples fewer than 10 times per closed-loop bandwidth: a warning.
    d, _ = design()
    text = d.text.replace(f"period = {T}", "period = 0.4").replace(
        "num = [21.25, -20.0]", "num = [18.0, -12.0]")
    a = analyze_variant(parse_design(text, "slow.toml"), d.variants[0])
    assert a.stability.closed_loop_stable and a.margins.phase_margin_deg > 45
    assert a.sampling is not None and a.sampling.sample_rate_ratio < 10
    path = tmp_path / "slow.toml"
    path.write_text(text, encoding="utf-8")
    main(["review", str(path), "--quiet", "--json", str(tmp_path / "r.json")])
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    rate = next(f for f in doc["findings"] if f["check"] == "sample_rate")
    assert rate["status"] == "warn" and rate["measured"] < 10


def test_relative_delay_margin_counts_the_compute_delay(tmp_path):
    # process-control's relative delay margin divides by the loop's dead time: for a
    # sampled loop that is the transport delay plus the compute delay (0.035 + 0.05 s).
    main(["review", str(ROOT / "sample_designs" / "pump_pressure.toml"), "--quiet",
          "--rules", "process-control", "--json", str(tmp_path / "r.json")])
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    f = next(f for f in doc["findings"] if f["check"] == "delay_margin"
             and f["variant"] == "nominal")
    assert f["details"]["loop_delay_s"] == pytest.approx(0.085)
    dm = doc["variants"][0]["margins"]["delay_margin_s"]
    assert f["measured"] == pytest.approx(dm / 0.085, rel=1e-12)
