"""PID forms (ideal, parallel, series), time units, filter as n or tf, setpoint weights b, c,
and the optional stage name.

Sources: the form conversions are Åström & Hägglund, Advanced PID Control (2006), ch. 3
[memory] — parallel kp + ki/s + kd·s: ti = kp/ki, td = kd/kp; series (interacting)
k'(1 + 1/(ti' s))(1 + td' s): kp = k'(1 + td'/ti'), ti = ti' + td', td = ti'·td'/(ti' + td');
with the filter 1/(tf s + 1) on the series controller's output the exact conversion is
ti = ti' + td' − tf, kp = k'·ti/ti', td = ti'·td'/ti − tf, tf unchanged [derived: equate
numerators over ti·s·(tf s + 1)].  Each stage is also checked against python-control's
frequency response of the form as written, built independently with control.tf.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import control as ct
import numpy as np
import pytest

from loopwarden.analysis import analyze
from loopwarden.analysis.closed_loop import closed_loop
from loopwarden.analysis.disturbance import load_response
from loopwarden.analysis.margins import compute_margins
from loopwarden.analysis.time_response import step_response
from loopwarden.cli import main
from loopwarden.design.loader import parse_design
from loopwarden.errors import DesignError

S = ct.tf("s")
W = np.geomspace(1e-3, 1e3, 61)
BAND = 0.02


def _design(stage: str, plant: str = 'tf = { num = [1.0], den = [4.0, 4.0, 1.0] }',
            extra: str = "") -> str:
    return (f'[design]\nname = "t"\n\n[plant]\n{plant}\n\n[[controller]]\ntype = "pid"\n'
            f"{stage}\n{extra}")


def _stage(stage: str):  # type: ignore[no-untyped-def]
    return parse_design(_design(stage), "t.toml").controller[0]


def _agree(model, reference) -> float:  # type: ignore[no-untyped-def]
    """Largest relative difference of the stage and a control.tf over W."""
    ours = model(1j * W)
    theirs = np.array([complex(reference(1j * w)) for w in W])
    return float(np.max(np.abs(ours - theirs) / np.abs(theirs)))


# --------------------------------------------------------------------------- forms
def test_parallel_converts_to_ideal_and_matches_python_control() -> None:
    st = _stage('form = "parallel"\nkp = 2.0\nki = 0.8\nkd = 1.5\ntf = 0.1')
    p = st.params
    # ti = kp/ki, td = kd/kp, n = td/tf [memory: Åström & Hägglund ch. 3]
    assert p["kp"] == 2.0 and p["ti"] == pytest.approx(2.5, rel=1e-15)
    assert p["td"] == pytest.approx(0.75, rel=1e-15)
    assert p["n"] == pytest.approx(7.5, rel=1e-15)
    assert (p["b"], p["c"], p["form"]) == (1.0, 1.0, "parallel")
    ref = 2.0 + 0.8 / S + 1.5 * S / (0.1 * S + 1)
    assert _agree(st.model, ref) < 1e-12


def test_parallel_filter_as_n_is_relative_to_kd_over_kp() -> None:
    st = _stage('form = "parallel"\nkp = 2.0\nki = 0.8\nkd = 1.5\nn = 5.0')
    tf = 1.5 / 2.0 / 5.0
    assert _agree(st.model, 2.0 + 0.8 / S + 1.5 * S / (tf * S + 1)) < 1e-12
    assert st.params["n"] == pytest.approx(5.0, rel=1e-15)


def test_series_unfiltered_limit_is_the_published_conversion() -> None:
    # A very fast filter (n = 1e7): the published formulas within about 1/n [memory].
    k, ti_s, td_s = 1.2, 8.0, 2.0
    st = _stage(f'form = "series"\nkp = {k}\nti = {ti_s}\ntd = {td_s}\nn = 1e7')
    p = st.params
    assert p["kp"] == pytest.approx(k * (1 + td_s / ti_s), rel=1e-6)
    assert p["ti"] == pytest.approx(ti_s + td_s, rel=1e-6)
    assert p["td"] == pytest.approx(ti_s * td_s / (ti_s + td_s), rel=1e-6)


@pytest.mark.parametrize(("k", "ti_s", "td_s", "filt"), [
    (1.2, 8.0, 2.0, "n = 10.0"),
    (-0.5, 3.0, 3.0, "tf = 0.2"),
    (4.0, 0.5, 2.0, "tf = 0.5"),          # tf = ti': the filter cancels a zero: a PI
])
def test_series_with_output_filter_matches_python_control(k: float, ti_s: float, td_s: float,
                                                          filt: str) -> None:
    st = _stage(f'form = "series"\nkp = {k}\nti = {ti_s}\ntd = {td_s}\n{filt}')
    tf = td_s / 10.0 if filt.startswith("n") else float(filt.split("=")[1])
    ref = k * (1 + 1 / (ti_s * S)) * (1 + td_s * S) / (tf * S + 1)
    assert _agree(st.model, ref) < 1e-12
    # The ideal-form params rebuild the same controller [derived].
    p = st.params
    kp, ti, td, n = (float(p[x]) for x in ("kp", "ti", "td", "n"))
    ideal = kp * (1 + 1 / (ti * S) + td * S / ((td / n) * S + 1))
    assert _agree(st.model, ideal) < 1e-12
    assert ti == pytest.approx(ti_s + td_s - tf, rel=1e-14)


def test_minutes_scale_times_and_gains() -> None:
    # ti, td, tf in minutes are 60× in seconds; ki is per minute, kd in minutes [derived].
    a = _stage('kp = 1.5\nti = 2.0\ntd = 0.5\ntf = 0.05\ntime_unit = "min"')
    b = _stage("kp = 1.5\nti = 120.0\ntd = 30.0\ntf = 3.0")
    for key in ("kp", "ti", "td", "n"):
        assert a.params[key] == pytest.approx(b.params[key], rel=1e-15)
    c = _stage('form = "parallel"\nkp = 1.5\nki = 0.75\nkd = 0.75\ntf = 0.05\n'
               'time_unit = "min"')
    assert _agree(c.model, 1.5 + (0.75 / 60) / S + 0.75 * 60 * S / (3.0 * S + 1)) < 1e-12
    assert c.params["ti"] == pytest.approx(120.0, rel=1e-15)


def test_default_ideal_form_is_unchanged() -> None:
    st = _stage("kp = 2.0\nti = 3.0\ntd = 0.5")
    ref = 2.0 * (1 + 1 / (3.0 * S) + 0.5 * S / (0.05 * S + 1))
    assert _agree(st.model, ref) < 1e-12
    assert st.reference_model is None and st.params["form"] == "ideal"


# --------------------------------------------------------------------------- 2-DOF
def _step_at(tf: ct.TransferFunction, times: np.ndarray) -> np.ndarray:
    """Step response of python-control's realisation of ``tf`` at any instants:
    y(t) = C·A⁻¹(e^{At} − I)·B + D [derived]."""
    from scipy import linalg

    sys = ct.ss(tf)
    a, b, c, d = (np.asarray(m, dtype=float) for m in (sys.A, sys.B, sys.C, sys.D))
    eye = np.eye(a.shape[0])
    return np.array([float((c @ np.linalg.solve(a, (linalg.expm(a * t) - eye) @ b))[0, 0]
                           + d[0, 0]) for t in times])


PLANT = 'tf = { num = [1.0], den = [4.0, 4.0, 1.0] }'
P = 1 / (4 * S**2 + 4 * S + 1)


@pytest.mark.parametrize(("b", "c"), [(0.4, 0.0), (0.0, 0.0), (1.0, 0.3), (1.5, 1.0)])
def test_setpoint_weights_step_against_python_control(b: float, c: float) -> None:
    text = _design(f'form = "parallel"\nkp = 2.0\nki = 0.8\nkd = 1.5\ntf = 0.1\n'
                   f"b = {b}\nc = {c}", PLANT)
    d = parse_design(text, "t.toml")
    loop = d.continuous_loop(d.variants[0])
    # Independent closed loop r → y and r → u: u = C_r·r − C·y [Åström & Hägglund ch. 3].
    C = 2.0 + 0.8 / S + 1.5 * S / (0.1 * S + 1)
    Cr = 2.0 * b + 0.8 / S + c * 1.5 * S / (0.1 * S + 1)
    t_ry = ct.minreal(Cr * P / (1 + C * P), verbose=False)
    t_ru = ct.minreal(Cr / (1 + C * P), verbose=False)
    res = step_response(loop, BAND)
    t = res.step.time_s
    ref = _step_at(t_ry, t)
    assert float(np.max(np.abs(res.step.value - ref))) < 1e-9
    u_ref = ct.step_response(t_ru, np.linspace(0, t[-1], 20001)).outputs
    # u jumps at t = 0+ by C_r(∞) = kp·b + c·kd/tf: the peak includes it.
    assert res.metrics.u_peak == pytest.approx(max(np.max(np.abs(u_ref)),
                                                   abs(2 * b + c * 15.0)), rel=1e-6)
    # The feedback loop is unchanged: margins and poles as without weights.
    plain = parse_design(_design('form = "parallel"\nkp = 2.0\nki = 0.8\nkd = 1.5\ntf = 0.1',
                                 PLANT), "t.toml")
    loop0 = plain.continuous_loop(plain.variants[0])
    assert np.array_equal(closed_loop(loop).a, closed_loop(loop0).a)
    m, m0 = compute_margins(loop), compute_margins(loop0)
    assert m.phase_margin_deg == m0.phase_margin_deg
    assert m.gain_margin_db == m0.gain_margin_db


@pytest.mark.parametrize(("b", "c"), [(1.0, 1.0), (0.0, 0.0), (0.5, 0.2)])
def test_load_integral_is_one_over_ki_for_any_weights(b: float, c: float) -> None:
    # A unit load step at the plant input: ∫y dt = 1/ki whatever b and c (they act on the
    # reference only) [derived; Åström & Hägglund ch. 3].
    text = _design(f"kp = 0.3\nti = 0.25\ntd = 0.04\nn = 8.0\nb = {b}\nc = {c}",
                   "zpk = { zeros = [], poles = [0.0, -20.0], gain = 400.0 }")
    d = parse_design(text, "t.toml")
    resp = load_response(d.continuous_loop(d.variants[0]), "plant_input", 1.0, BAND, None)
    assert resp.ie == pytest.approx(0.25 / 0.3, rel=1e-6)
    # Every load figure is that of the unweighted loop: the load never passes C_r.
    d1 = parse_design(text.replace(f"b = {b}\nc = {c}", ""), "t.toml")
    same = load_response(d1.continuous_loop(d1.variants[0]), "plant_input", 1.0, BAND, None)
    assert (resp.peak, resp.iae, resp.recovery_time_s, resp.u_peak) == (
        same.peak, same.iae, same.recovery_time_s, same.u_peak)


def test_weighted_step_with_a_delay_against_an_exact_inverse_laplace() -> None:
    # FOPDT 2e^(−s)/(10 s + 1), PID with b = 0.5, c = 0: y(t) from the exact delay
    # simulation against mpmath's de Hoog inversion of T_r(s)/s with the exact e^(−s)
    # [derived]; the simulation's stated hold error is DELAY_HOLD_TOL·band = 2e-5.
    import mpmath as mp

    text = _design("kp = 1.2\nti = 6.0\ntd = 0.4\nn = 10.0\nb = 0.5\nc = 0.0",
                   "tf = { num = [2.0], den = [10.0, 1.0] }\ndelay = 1.0")
    d = parse_design(text, "t.toml")
    res = step_response(d.continuous_loop(d.variants[0]), BAND)
    t, y = res.step.time_s, res.step.value

    def transform(s):  # type: ignore[no-untyped-def]
        p, dl = 2 / (10 * s + 1), mp.exp(-s)
        c = 1.2 * (1 + 1 / (6 * s) + 0.4 * s / (0.04 * s + 1))
        cr = 1.2 * (0.5 + 1 / (6 * s))
        return cr * p * dl / (1 + c * p * dl) / s

    with mp.workdps(30):
        for when in (1.5, 2.5, 4.0, 7.3, 12.0, 25.0):
            i = int(np.argmin(np.abs(t - when)))
            ref = float(mp.invertlaplace(transform, float(t[i]), method="dehoog"))
            assert abs(y[i] - ref) < 1e-3 * BAND


def test_derivative_on_measurement_is_c_zero() -> None:
    a = _stage('kp = 2.0\nti = 3.0\ntd = 0.5\nderivative_on = "measurement"')
    b = _stage("kp = 2.0\nti = 3.0\ntd = 0.5\nc = 0.0")
    assert a.params["c"] == 0.0
    s0 = np.array([0.3 + 0.7j])
    assert a.reference_model(s0) == pytest.approx(b.reference_model(s0), rel=1e-15)
    # kp (b + 1/(ti s)) with b = 1, c = 0 [derived]
    assert complex(a.reference_model(s0)[0]) == pytest.approx(2.0 * (1 + 1 / (3.0 * s0[0])),
                                                             rel=1e-14)


# --------------------------------------------------------------------------- bad input
@pytest.mark.parametrize(("stage", "key"), [
    ('kp = 1.0\nti = 2.0\ntd = 0.5\ntime_unit = "h"', "time_unit"),
    ("kp = 1.0\nti = 2.0\ntd = 0.5\nn = 5.0\ntf = 0.1", "tf"),
    ("kp = 1.0\nti = 2.0\ntd = 0.5\nb = -0.5", "b"),
    ("kp = 1.0\nti = 2.0\ntd = 0.5\nc = 11.0", "c"),
    ('kp = 1.0\nti = 2.0\ntd = 0.5\nc = 0.5\nderivative_on = "measurement"', "c"),
    ('form = "parallel"\nkp = 1.0\nki = 0.0\nkd = 0.0', "ki"),
    ('form = "parallel"\nkp = 1.0\nki = -1.0\nkd = 0.0', "ki"),
    ('form = "parallel"\nkp = 1.0\nki = 1.0\nkd = -1.0', "kd"),
    ('form = "parallel"\nkp = 1.0\nti = 1.0\nkd = 0.1', "ti"),
    ('form = "series"\nkp = 1.0\nti = 2.0\ntd = 0.5\ntf = 1.0', "tf"),
    ('form = "series"\nkp = 1.0\nti = 2.0\ntd = 0.0\ntf = 0.1', "tf"),
    ('form = "series"\nkp = 1.0\nti = 2.0\ntd = 1.0\nn = 0.5', "n"),
    ('form = "pidf"\nkp = 1.0\nti = 2.0\ntd = 1.0', "form"),
    ('kp = 1.0\nti = 2.0\ntd = 1.0\nname = "a\\nb"', "name"),
])
def test_bad_pid_names_file_table_and_key(stage: str, key: str, tmp_path: Path) -> None:
    with pytest.raises(DesignError) as err:
        parse_design(_design(stage), "t.toml")
    assert f"controller[1].{key}" in str(err.value)
    path = tmp_path / "d.toml"
    path.write_text(_design(stage), encoding="utf-8")
    assert main(["review", str(path), "--json", str(tmp_path / "r.json")]) == 2


def test_weighted_pid_must_be_first_and_continuous() -> None:
    later = ('[design]\nname = "t"\n[plant]\n' + PLANT + '\n[[controller]]\ntype = "gain"\n'
             'k = 1.0\n[[controller]]\ntype = "pid"\nkp = 1.0\nti = 2.0\ntd = 0.5\nb = 0.5\n')
    with pytest.raises(DesignError, match=r"controller\[2\]\.b.*first"):
        parse_design(later, "t.toml")
    sampled = _design("kp = 1.0\nti = 2.0\ntd = 0.5\nc = 0.0", PLANT,
                      "[sampling]\nperiod = 0.01\n")
    with pytest.raises(DesignError, match=r"controller\[1\]\.c.*sampled"):
        parse_design(sampled, "t.toml")


# --------------------------------------------------------------------------- stage names
HOIST = Path(__file__).parents[1] / "sample_designs" / "hoist_lag_tail.toml"


def test_stage_name_in_json_snippet_findings_and_disturbance_comparison(tmp_path: Path
                                                                        ) -> None:
    text = HOIST.read_text(encoding="utf-8").replace(
        'type = "lag" ', 'name = "drum \\"boost\\" <lag>"\ntype = "lag" ')
    text += "\n[disturbance]\nat = \"plant_input\"\nsize = 1.0\n"
    path = tmp_path / "d.toml"
    path.write_text(text, encoding="utf-8")
    out = tmp_path / "r.json"
    md = tmp_path / "r.md"
    assert main(["review", str(path), "--json", str(out), "--markdown", str(md)]) in (0, 1)
    data = json.loads(out.read_text(encoding="utf-8"))
    summary = md.read_text(encoding="utf-8")
    assert "Alternative IE" in summary and "<lag>" not in summary.split("```toml")[0]
    names = [s["name"] for s in data["design"]["controller"]]
    assert names == [None, 'drum "boost" <lag>']
    v = data["variants"][0]
    alt = v["integral_alternatives"][0]
    snippet = alt["snippet_toml"]
    assert 'name = "drum \\"boost\\" <lag>"' in snippet
    assert 'controller[2] lag "drum "boost" <lag>"' in snippet
    assert any('"drum "boost" <lag>"' in f["message"] for f in data["findings"])
    # The load comparison: the current controller's IE is the review's own; the
    # alternative (a PI after the gain, on a type-0 plant) has ∫y dt = 1/lim s·C(s)
    # [derived: P·S → s/(s·C) near s = 0].
    assert alt["current_disturbance_ie"] == v["disturbance"]["ie"]
    assert alt["current_disturbance_iae"] == v["disturbance"]["iae"]
    ki_alt = 1.25 * alt["gain_factor"] * 0.5          # k · (s + 0.5)/s → k·0.5 at s → 0
    assert alt["disturbance_ie"] == pytest.approx(1.0 / ki_alt, rel=1e-6)
    # IAE ≥ |IE| [derived]; IE is exact (1/ki above), IAE a quadrature good to about 1e-6.
    assert alt["disturbance_iae"] >= abs(alt["disturbance_ie"]) * (1 - 1e-6)


def test_the_snippet_with_a_name_loads_back() -> None:
    text = HOIST.read_text(encoding="utf-8").replace(
        'type = "lag" ', 'name = "drum \\\\ boost"\ntype = "lag" ')
    d = parse_design(text, "t.toml")
    a = analyze(d)[0]
    snippet = a.integral_alternatives[0].snippet_toml
    body = "\n".join(line for line in snippet.splitlines() if not line.startswith("#"))
    base = text.split("[[controller]]")[0]
    again = parse_design(base + body + "\n", "t.toml")
    assert again.controller[0].title == "drum \\ boost"
    assert math.isfinite(float(again.controller[0].params["kp"]))


@pytest.mark.parametrize(("b", "c"), [(0.4, 0.0), (1.0, 0.0), (0.0, 1.0)])
def test_steady_errors_use_the_reference_path(b: float, c: float) -> None:
    # Ramp error lim (1 − T_r(s))/s with T_r = C_r·P/(1 + C·P) [derived], from a
    # python-control transfer function built independently; type-1 loop (PI on type 0).
    from loopwarden.analysis.tracking import compute_tracking

    text = _design(f'form = "parallel"\nkp = 2.0\nki = 0.8\nkd = 1.5\ntf = 0.1\n'
                   f"b = {b}\nc = {c}", PLANT)
    d = parse_design(text, "t.toml")
    loop = d.continuous_loop(d.variants[0])
    C = 2.0 + 0.8 / S + 1.5 * S / (0.1 * S + 1)
    Cr = 2.0 * b + 0.8 / S + c * 1.5 * S / (0.1 * S + 1)
    # minreal's default tolerance leaves a near-cancelled pair at the origin (3.750044
    # against the closed form's 3.75 below): cancel at 1e-12.
    e_r = ct.minreal((1 + C * P - Cr * P) / (S * (1 + C * P)), tol=1e-12, verbose=False)
    tr = compute_tracking(loop)
    assert tr.step_error == 0.0 and tr.kv == pytest.approx(0.8, rel=1e-14)
    assert tr.ramp_error == pytest.approx(float(np.real(ct.dcgain(e_r))), rel=1e-9)
    # (1 + kp(1 − b)·P(0))/ki in closed form [derived]
    assert tr.ramp_error == pytest.approx((1 + 2.0 * (1 - b)) / 0.8, rel=1e-12)
    res = step_response(loop, BAND)
    assert res.ramp_error.value[-1] == pytest.approx(tr.ramp_error, rel=1e-3)


def test_weight_b_on_a_double_integrator_leaves_a_ramp_error() -> None:
    # Double integrator 1/s² under a PID: type 2 (zero ramp error) for b = 1; with b ≠ 1
    # E/R → kp(1 − b)·s/ki near 0, a ramp error (1 − b)·ti [derived].
    from loopwarden.analysis.tracking import compute_tracking

    text = _design("kp = 1.0\nti = 10.0\ntd = 2.0\nb = 0.5",
                   "zpk = { zeros = [], poles = [0.0, 0.0], gain = 1.0 }")
    d = parse_design(text, "t.toml")
    tr = compute_tracking(d.continuous_loop(d.variants[0]))
    assert tr.system_type == 3 and tr.step_error == 0.0
    assert tr.ramp_error == pytest.approx(0.5 * 10.0, rel=1e-12)
    assert tr.parabola_error == math.inf


def test_pdf_shows_the_stage_name_and_the_load_comparison(tmp_path: Path) -> None:
    import io
    import re

    from pypdf import PdfReader

    import loopwarden
    from loopwarden.report.pdf import render_pdf

    text = HOIST.read_text(encoding="utf-8").replace(
        'type = "lag" ', 'name = "drum <b>boost</b>"\ntype = "lag" ')
    text += "\n[disturbance]\nat = \"plant_input\"\nsize = 1.0\n"
    path = tmp_path / "d.toml"
    path.write_text(text, encoding="utf-8")
    review = loopwarden.review(loopwarden.load_design(str(path)), today="2026-01-15")
    pdf = render_pdf(review, embedded={})
    pages = " ".join(re.sub(r"\s+", " ", p.extract_text() or "")
                     for p in PdfReader(io.BytesIO(pdf)).pages)
    assert "drum <b>boost</b>" in pages           # escaped, not taken as markup
    alt = review.analyses[0].integral_alternatives[0]
    assert "Load step IE" in pages and "Load step IAE" in pages
    assert f"{alt.disturbance_ie:.4g}"[:4] in pages
