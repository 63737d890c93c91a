"""Measured (frd) plants: margins on the data, the Nyquist count, coverage, bad CSV files.

References: sweeps generated here from known models, whose margins come from
python-control's ``stability_margins`` (rational loops) or from a dense independent
evaluation of the model with the exact delay and brentq; closed-loop poles of the model
from ``control.feedback(...).poles()`` for the stability count.  A sweep from a model must
give that model's margins within 0.5 % (the interpolation error is far smaller).
"""

from __future__ import annotations

import json
import math
import os
import textwrap
import warnings
from pathlib import Path

import control as ct
import numpy as np
import pytest
from scipy import optimize

from loopwarden.analysis import analyze_variant
from loopwarden.cli import main
from loopwarden.design.loader import load_design
from loopwarden.lti import Zpk

ROOT = Path(__file__).resolve().parents[1]


def zpk(zeros, poles, gain) -> Zpk:
    return Zpk(np.array(zeros, dtype=complex), np.array(poles, dtype=complex), gain)


def write_sweep(folder: Path, plant: Zpk, *, delay: float = 0.0, lo: float = 0.1,
                hi: float = 1000.0, per_decade: int = 60, name: str = "sweep.csv",
                header: str = "frequency,magnitude,phase") -> Path:
    """A noise-free sweep of ``plant·e^{−s·delay}`` in rad/s, dB and wrapped degrees."""
    w = np.logspace(math.log10(lo), math.log10(hi),
                    round(per_decade * math.log10(hi / lo)) + 1)
    p = plant.freqresp(w) * np.exp(-1j * w * delay)
    rows = [f"{float(a)!r},{float(b)!r},{float(c)!r}"
            for a, b, c in zip(w, 20 * np.log10(np.abs(p)), np.degrees(np.angle(p)),
                               strict=True)]
    path = folder / name
    path.write_text(header + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return path


def frd_design(folder: Path, controller: str, *, file: str = "sweep.csv", extra: str = "",
               units: str = 'frequency_unit = "rad/s", magnitude_unit = "db", '
                            'phase_unit = "deg"', name: str = "design.toml") -> Path:
    text = f"""
    [design]
    name = "measured"
    [plant]
    frd = {{ file = "{file}", {units} }}
    {extra}
    {controller}
    """
    path = folder / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def analysed(path: Path):
    d = load_design(path)
    return analyze_variant(d, d.variants[0])


PI = '[[controller]]\ntype = "pi"\nkp = {kp}\nti = {ti}'


def pi_zpk(kp: float, ti: float) -> Zpk:
    return zpk([-1.0 / ti], [0.0], kp)


# --------------------------------------------------------------------------- margins
def test_rational_sweep_matches_python_control(tmp_path):
    # Source: control.stability_margins(returnall=True) on the model the sweep came from.
    plant = zpk([], [-1.0, -5.0, -20.0], 400.0)
    write_sweep(tmp_path, plant, lo=0.05, hi=500.0)
    a = analysed(frd_design(tmp_path, PI.format(kp=0.4, ti=1.0)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gm, pm, _, wpc, wgc, _ = ct.stability_margins(
            ct.zpk((pi_zpk(0.4, 1.0) * plant).zeros, (pi_zpk(0.4, 1.0) * plant).poles,
                   (pi_zpk(0.4, 1.0) * plant).gain), returnall=True)
    m = a.margins
    assert a.coverage is not None and not a.coverage.uncovered
    assert m.gain_margin_db == pytest.approx(20 * math.log10(gm[0]), rel=5e-3)
    assert m.phase_crossover_rad_s == pytest.approx(wpc[0], rel=5e-3)
    assert m.phase_margin_deg == pytest.approx(pm[0], rel=5e-3)
    assert m.gain_crossover_rad_s == pytest.approx(wgc[0], rel=5e-3)
    # The spline interpolation is in fact far closer than the 0.5 % asked for.
    assert m.phase_margin_deg == pytest.approx(pm[0], rel=1e-5)


def _dense_reference(loop_zpk: Zpk, delay: float, lo: float, hi: float):
    """(PM°, ωc, GM dB, ω180, Ms) of L = loop_zpk·e^{−s·delay} by a dense grid and brentq."""
    w = np.logspace(math.log10(lo), math.log10(hi), 400_001)

    def lval(x):
        return loop_zpk.freqresp(np.atleast_1d(x)) * np.exp(-1j * np.atleast_1d(x) * delay)

    lv = lval(w)
    lm = np.log(np.abs(lv))
    i = int(np.flatnonzero(np.sign(lm[:-1]) != np.sign(lm[1:]))[0])
    wc = optimize.brentq(lambda x: math.log(abs(lval(x)[0])), w[i], w[i + 1], xtol=1e-14)
    pm = 180.0 + math.degrees(np.angle(lval(wc)[0]))
    ph = np.unwrap(np.angle(lv))
    k = int(np.flatnonzero((ph[:-1] > -math.pi) & (ph[1:] <= -math.pi))[0])
    w180 = optimize.brentq(lambda x: math.sin(np.angle(lval(x)[0])), w[k], w[k + 1],
                           xtol=1e-14)
    gm = -20 * math.log10(abs(lval(w180)[0]))
    ms = float(np.max(np.abs(1 / (1 + lv))))
    return pm, wc, gm, w180, ms


def test_delay_sweep_matches_the_model(tmp_path):
    # Source: dense independent evaluation of the model with its exact delay (brentq), and
    # a resonance (ζ = 0.05) at the phase crossover, swept at 100 points per decade (a
    # spacing of half the resonance's half-power width there).
    plant = zpk([], [-2.0, -2.0 + 40j, -2.0 - 40j], 2.0 * 1604.0)
    delay = 0.01
    write_sweep(tmp_path, plant, delay=delay, lo=0.05, hi=400.0, per_decade=100)
    a = analysed(frd_design(tmp_path, PI.format(kp=0.3, ti=0.5)))
    pm, wc, gm, w180, ms = _dense_reference(pi_zpk(0.3, 0.5) * plant, delay, 0.05, 400.0)
    m = a.margins
    assert m.phase_margin_deg == pytest.approx(pm, rel=5e-3)
    assert m.gain_crossover_rad_s == pytest.approx(wc, rel=5e-3)
    assert m.gain_margin_db == pytest.approx(gm, rel=5e-3)
    assert m.phase_crossover_rad_s == pytest.approx(w180, rel=5e-3)
    assert m.delay_margin_s == pytest.approx(math.radians(pm) / wc, rel=5e-3)
    assert a.sensitivity.peak_sensitivity == pytest.approx(ms, rel=5e-3)


def test_units_and_layout_do_not_change_the_result(tmp_path):
    # The same sweep in Hz / abs / rad with reordered and extra columns, comments and a BOM.
    plant = zpk([], [-1.0, -5.0, -20.0], 400.0)
    ref = write_sweep(tmp_path, plant, lo=0.05, hi=500.0)
    rows = [r.split(",") for r in ref.read_text().splitlines()[1:]]
    other = ["# analyser export", "phase,note,frequency,magnitude"]
    for w, db, deg in rows:
        other.append(f"{math.radians(float(deg))!r},x,{float(w) / (2 * math.pi)!r},"
                     f"{10 ** (float(db) / 20)!r}")
        if len(other) == 10:
            other.append("# a comment between the rows")
    (tmp_path / "other.csv").write_text("\ufeff" + "\n".join(other) + "\n", encoding="utf-8")
    a = analysed(frd_design(tmp_path, PI.format(kp=0.4, ti=1.0)))
    b = analysed(frd_design(tmp_path, PI.format(kp=0.4, ti=1.0), file="other.csv",
                            units='frequency_unit = "Hz", magnitude_unit = "abs", '
                                  'phase_unit = "rad"', name="other.toml"))
    assert b.margins.phase_margin_deg == pytest.approx(a.margins.phase_margin_deg, rel=1e-9)
    assert b.margins.gain_margin_db == pytest.approx(a.margins.gain_margin_db, rel=1e-9)


# --------------------------------------------------------------------------- Nyquist count
def _model_unstable_count(loop_zpk: Zpk) -> int:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        poles = ct.feedback(ct.zpk(loop_zpk.zeros, loop_zpk.poles, loop_zpk.gain), 1).poles()
    return int(np.sum(poles.real > 0))


@pytest.mark.parametrize(("kp", "stable"), [(0.4, True), (10.0, False)])
def test_nyquist_count_matches_model_poles(tmp_path, kp, stable):
    # Source: closed-loop poles of the model (python-control); kp = 10 (beyond |L(j10)| = 1
    # at the phase crossover ω = 10 rad/s) puts two poles in the right half-plane, which
    # the count must give as Z = 2.
    plant = zpk([], [-1.0, -5.0, -20.0], 400.0)
    write_sweep(tmp_path, plant, lo=0.01, hi=2000.0)
    a = analysed(frd_design(tmp_path, PI.format(kp=kp, ti=1.0)))
    z_ref = _model_unstable_count(pi_zpk(kp, 1.0) * plant)
    assert a.stability.method == "nyquist"
    assert a.stability.closed_loop_stable is stable
    assert a.stability.rhp_closed_loop_poles == z_ref == (0 if stable else 2)


LEAD = ('[[controller]]\ntype = "gain"\nk = {k}\n[[controller]]\ntype = "lead"\n'
        "zero = 2.0\npole = 40.0")


@pytest.mark.parametrize(("declared", "verdict"), [(1, True), (0, None)])
def test_open_loop_unstable_plant(tmp_path, declared, verdict):
    # Source: model poles (python-control): P = 60/((s − 3)(s + 10)) with a lead is stable
    # in closed loop; the count is N = −1, so it needs the declared unstable pole. With
    # unstable_poles = 0 the count is impossible (Z < 0): an error, never a verdict.
    plant = zpk([], [3.0, -10.0], 60.0)
    write_sweep(tmp_path, plant, lo=0.01, hi=5000.0)
    extra = f"unstable_poles = {declared}"
    path = frd_design(tmp_path, LEAD.format(k=2.0), extra=extra)
    a = analysed(path)
    lead = zpk([-2.0], [-40.0], 20.0)
    assert _model_unstable_count(lead.scaled(2.0) * plant) == 0
    if verdict:
        assert a.stability.closed_loop_stable
        assert a.stability.clockwise_encirclements == -1
    else:
        assert "closed_loop_stability" in a.coverage.uncovered
        assert "Z = N + P = -1" in a.coverage.uncovered["closed_loop_stability"]
        assert main(["review", str(path), "--quiet"]) == 1


def test_plant_integrator_declared(tmp_path):
    # Source: model poles: P = 50/(s(s + 10)) under a PI is stable (type 2, m = 2 at the
    # low end); with too much integral action (ti = 0.05) it is not (Z = 2).
    plant = zpk([], [0.0, -10.0], 50.0)
    write_sweep(tmp_path, plant, lo=0.01, hi=2000.0)
    for ti, stable in ((1.0, True), (0.01, False)):
        a = analysed(frd_design(tmp_path, PI.format(kp=1.0, ti=ti), extra="integrators = 1"))
        assert a.coverage.integrators == 2
        assert a.stability.closed_loop_stable is stable
        assert a.stability.rhp_closed_loop_poles == _model_unstable_count(
            pi_zpk(1.0, ti) * plant)


# --------------------------------------------------------------------------- coverage
def _review(path: Path, out: Path) -> tuple[int, dict]:
    rc = main(["review", str(path), "--quiet", "--date", "2025-01-01", "--json", str(out)])
    return rc, json.loads(out.read_text(encoding="utf-8"))


def test_gain_crossover_above_the_range_is_not_guessed(tmp_path):
    # L = 400/(s(s + 5)(s + 20)) (the PI zero cancels the plant's pole at −1): |L(j2)| =
    # 1.85, so the sweep stopping at 2 rad/s ends below the crossover. No margin is reported
    # from the data; every margin finding is an error asking for a longer sweep.
    plant = zpk([], [-1.0, -5.0, -20.0], 400.0)
    write_sweep(tmp_path, plant, lo=0.01, hi=2.0)
    rc, doc = _review(frd_design(tmp_path, PI.format(kp=1.0, ti=1.0)), tmp_path / "r.json")
    assert rc == 1
    by_rule = {f["rule"]: f for f in doc["findings"] if f["variant"] == "nominal"}
    for rule in ("stability.closed_loop", "margin.phase", "margin.gain",
                 "robustness.sensitivity_peak"):
        assert by_rule[rule]["status"] == "error"
        assert "extend the sweep to higher frequencies" in by_rule[rule]["message"]
    margins = doc["variants"][0]["margins"]
    assert margins["phase_margin_deg"] is None and margins["gain_margin_db"] is None
    assert doc["variants"][0]["frequency_coverage"]["frequency_max_rad_s"] == 2.0


def test_phase_crossover_above_the_range_is_not_guessed(tmp_path):
    # The same loop: the sweep covers the gain crossover (≈ 3.5 rad/s) but stops at 8 rad/s,
    # before the phase crossover at √(5·20) = 10 rad/s [derived]: PM is decided, GM is an
    # error with the bound the range can give.
    plant = zpk([], [-1.0, -5.0, -20.0], 400.0)
    write_sweep(tmp_path, plant, lo=0.01, hi=8.0)
    rc, doc = _review(frd_design(tmp_path, PI.format(kp=1.0, ti=1.0)), tmp_path / "r.json")
    by_rule = {f["rule"]: f for f in doc["findings"] if f["variant"] == "nominal"}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pm_ref = ct.stability_margins(ct.zpk([], [0.0, -5.0, -20.0], 400.0))[1]
    assert by_rule["margin.phase"]["status"] in ("pass", "warn")
    assert by_rule["margin.phase"]["measured"] == pytest.approx(pm_ref, rel=1e-5)
    assert by_rule["margin.gain"]["status"] == "error"
    assert "no phase crossover" in by_rule["margin.gain"]["message"]
    assert "at least" in by_rule["margin.gain"]["message"]
    assert rc == 1


def test_gain_crossover_below_the_range_is_not_guessed(tmp_path):
    # With the PI's integrator |L| → ∞ at low frequency; a sweep starting above the
    # crossover (|L| < 1 at its lowest point) cannot decide the margins.
    plant = zpk([], [-1.0, -5.0, -20.0], 400.0)
    write_sweep(tmp_path, plant, lo=5.0, hi=500.0)
    a = analysed(frd_design(tmp_path, PI.format(kp=0.4, ti=1.0)))
    assert "extend the sweep to lower frequencies" in a.coverage.uncovered["phase_margin"]
    assert "closed_loop_stability" in a.coverage.uncovered


def test_model_checks_are_not_applicable_and_tracking_unknown(tmp_path):
    plant = zpk([], [-1.0, -5.0, -20.0], 400.0)
    write_sweep(tmp_path, plant, lo=0.05, hi=500.0)
    rc, doc = _review(frd_design(tmp_path, PI.format(kp=0.4, ti=1.0)), tmp_path / "r.json")
    assert rc == 0
    by_rule = {f["rule"]: f for f in doc["findings"] if f["variant"] == "nominal"}
    for rule in ("stability.internal", "tracking.type", "response.settling",
                 "boost.slow_tail"):
        assert by_rule[rule]["status"] == "n/a"
        assert "measured plant" in by_rule[rule]["message"]
    tracking = doc["variants"][0]["tracking"]
    # The PI's integrator makes the loop type 1: Kp infinite and the step error 0 are
    # known; Kv needs the plant's DC gain and is null, as is the ramp error.
    assert tracking["system_type"] == 1 and tracking["kp"] == "inf"
    assert tracking["step_error"] == 0.0
    assert tracking["kv"] is None and tracking["ramp_error"] is None


# --------------------------------------------------------------------------- bad files
GOOD_ROWS = [f"{0.1 * 1.5 ** i!r},{-3.0 * i!r},{-10.0 * i!r}" for i in range(12)]


def _rows(*rows: str) -> str:
    return "\n".join(rows) + "\n"


BAD_CSV = {
    "missing-column": (_rows("frequency,magnitude", *[",".join(r.split(",")[:2])
                                                      for r in GOOD_ROWS]),
                       "line 1", "missing column 'phase'"),
    "not-increasing": (_rows("frequency,magnitude,phase", *GOOD_ROWS[:5], GOOD_ROWS[3],
                             *GOOD_ROWS[5:]), "line 7, column 1 (frequency)",
                       "frequencies must increase"),
    "nan": (_rows("frequency,magnitude,phase", *GOOD_ROWS[:4], "0.9,nan,-40.0",
                  *GOOD_ROWS[5:]), "line 6, column 2 (magnitude)", "finite number"),
    "text-cell": (_rows("# header comment", "frequency,magnitude,phase", *GOOD_ROWS[:2],
                        "0.3,-6.0,abc", *GOOD_ROWS[3:]), "line 5, column 3 (phase)",
                  "expected a number"),
    "too-few": (_rows("frequency,magnitude,phase", *GOOD_ROWS[:6]), "line 7",
                "at least 10"),
    "empty": ("", None, "no header row"),
    "empty-cell": (_rows("frequency,magnitude,phase", *GOOD_ROWS[:3], "0.4,,-3",
                         *GOOD_ROWS[4:]), "line 5, column 2 (magnitude)",
                   "missing magnitude value"),
}


@pytest.mark.parametrize("case", BAD_CSV)
def test_malformed_csv_exits_2(tmp_path, capsys, case):
    text, where, fragment = BAD_CSV[case]
    (tmp_path / "sweep.csv").write_text(text, encoding="utf-8")
    path = frd_design(tmp_path, PI.format(kp=0.4, ti=1.0))
    assert main(["review", str(path), "--quiet", "--json", str(tmp_path / "r.json")]) == 2
    err = capsys.readouterr().err
    assert "sweep.csv" in err and fragment in err, err
    if where:
        assert where in err, err
    assert not (tmp_path / "r.json").exists()


def test_negative_abs_magnitude_exits_2(tmp_path, capsys):
    rows = [f"{r.split(',')[0]},{1.0 if i != 3 else -0.5},{-10.0 * i}"
            for i, r in enumerate(GOOD_ROWS)]
    (tmp_path / "sweep.csv").write_text(_rows("frequency,magnitude,phase", *rows))
    path = frd_design(tmp_path, PI.format(kp=0.4, ti=1.0),
                      units='magnitude_unit = "abs", phase_unit = "deg"')
    assert main(["review", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "line 5, column 2 (magnitude)" in err and "positive magnitude" in err


def _good(folder: Path) -> None:
    (folder / "sweep.csv").write_text(_rows("frequency,magnitude,phase", *GOOD_ROWS))


@pytest.mark.parametrize("case", ["dotdot", "absolute", "symlink", "missing"])
def test_path_must_stay_in_the_design_folder(tmp_path, capsys, case):
    inner = tmp_path / "designs"
    inner.mkdir()
    _good(tmp_path)                                    # outside the design's folder
    file = {"dotdot": "../sweep.csv", "absolute": str(tmp_path / "sweep.csv"),
            "symlink": "link.csv", "missing": "nowhere.csv"}[case]
    if case == "symlink":
        os.symlink(tmp_path / "sweep.csv", inner / "link.csv")
    path = frd_design(inner, PI.format(kp=0.4, ti=1.0), file=file)
    assert main(["review", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err
    if case == "missing":
        assert "measurement file not found" in err and "nowhere.csv" in err
    else:
        assert "outside the design file's folder" in err and "plant.frd.file" in err


def test_subfolder_and_absolute_inside_are_accepted(tmp_path):
    (tmp_path / "data").mkdir()
    write_sweep(tmp_path / "data", zpk([], [-1.0, -5.0, -20.0], 400.0), lo=0.05, hi=500.0)
    for file in ("data/sweep.csv", str(tmp_path / "data" / "sweep.csv")):
        a = analysed(frd_design(tmp_path, PI.format(kp=0.4, ti=1.0), file=file))
        assert a.coverage is not None and a.coverage.file == file


BAD_TABLE = {
    "missing-magnitude-unit": ('frequency_unit = "rad/s", phase_unit = "deg"', "",
                               "plant.frd.magnitude_unit", "missing required key"),
    "unknown-unit": ('magnitude_unit = "decibel", phase_unit = "deg"', "",
                     "plant.frd.magnitude_unit", "unknown unit"),
    "frd-and-zpk": ('magnitude_unit = "db", phase_unit = "deg"',
                    "zpk = { poles = [-1.0], gain = 1.0 }", "plant.frd", "both 'zpk' and 'frd'"),
    "negative-unstable-poles": ('magnitude_unit = "db", phase_unit = "deg"',
                                "unstable_poles = -1", "plant.unstable_poles", "≥ 0"),
    "sampled-measured": ('magnitude_unit = "db", phase_unit = "deg"', "",
                         "plant", "cannot be sampled"),
}


@pytest.mark.parametrize("case", BAD_TABLE)
def test_bad_frd_table_exits_2(tmp_path, capsys, case):
    units, extra, where, fragment = BAD_TABLE[case]
    _good(tmp_path)
    path = frd_design(tmp_path, PI.format(kp=0.4, ti=1.0), units=units, extra=extra)
    if case == "sampled-measured":
        path.write_text(path.read_text() + "\n[sampling]\nperiod = 0.01\n")
    assert main(["review", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert where in err and fragment in err, err


def test_unstable_poles_need_a_measured_plant(tmp_path, capsys):
    path = tmp_path / "d.toml"
    path.write_text('[design]\nname = "x"\n[plant]\nzpk = { poles = [-1.0], gain = 1.0 }\n'
                    'unstable_poles = 1\n[[controller]]\ntype = "gain"\nk = 1.0\n')
    assert main(["review", str(path), "--quiet"]) == 2
    assert "applies only to a measured plant" in capsys.readouterr().err


# --------------------------------------------------------------------------- the sample
def test_committed_sweep_is_the_generators_output():
    # The sample's CSV is synthetic and reproducible (seeded): regenerate and compare.
    import spindle_sweep_data

    text = (ROOT / "sample_designs" / "spindle_sweep.csv").read_text(encoding="utf-8")
    assert text == spindle_sweep_data.sweep_csv()
    assert "SYNTHETIC" in text.splitlines()[0]
    assert "SYNTHETIC DATA" in (ROOT / "sample_designs" / "spindle_sweep.toml").read_text()


def test_spindle_sample_matches_its_model(tmp_path):
    # The sweep came from the "identified model" variant (plus 0.02 dB / 0.1° noise): the
    # measured margins must be that model's within 0.5 %.
    rc, doc = _review(ROOT / "sample_designs" / "spindle_sweep.toml", tmp_path / "r.json")
    assert rc == 0
    meas, model = doc["variants"]
    assert model["name"] == "identified model" and meas["frequency_coverage"]["uncovered"] == {}
    for key in ("gain_margin_db", "phase_margin_deg", "gain_crossover_rad_s",
                "phase_crossover_rad_s", "delay_margin_s", "peak_sensitivity"):
        assert meas["margins"][key] == pytest.approx(model["margins"][key], rel=5e-3), key
    assert doc["design"]["measured_plants"][0]["file"] == "spindle_sweep.csv"
    assert len(doc["design"]["measured_plants"][0]["sha256"]) == 64
    assert meas["stability"]["method"] == "nyquist" and meas["closed_loop_stable"]


def test_relative_delay_margin_is_na_for_a_measured_plant(tmp_path):
    # The dead time of a measured plant is inside its data: no ratio can be formed.
    rc, doc = _review_with(ROOT / "sample_designs" / "spindle_sweep.toml", tmp_path,
                           "process-control")
    f = next(f for f in doc["findings"] if f["check"] == "delay_margin"
             and f["variant"] == "nominal")
    assert f["status"] == "n/a" and "measured plant" in f["message"]


def _review_with(path: Path, folder: Path, rules: str) -> tuple[int, dict]:
    out = folder / "r.json"
    rc = main(["review", str(path), "--quiet", "--rules", rules, "--json", str(out)])
    return rc, json.loads(out.read_text(encoding="utf-8"))


def test_no_phase_crossover_and_negligible_gain_bounds_the_margin(tmp_path):
    # L = (s + 1)/s · 5/((s + 1)(s + 5)) = 5/(s(s + 5)) never reaches −180° [derived]; a
    # sweep to 2000 rad/s ends where |L| = 1.25e−6 (−118 dB). Under the stated assumptions a
    # phase crossover beyond would leave at least that much margin: GM is reported as that
    # bound ("at least"), not as an error and not as infinity.
    plant = zpk([], [-1.0, -5.0], 5.0)
    write_sweep(tmp_path, plant, lo=0.01, hi=2000.0)
    path = frd_design(tmp_path, PI.format(kp=1.0, ti=1.0))
    a = analysed(path)
    l_max = 5.0 / (2000.0 * math.hypot(2000.0, 5.0))       # |L(j2000)| [derived]
    assert "gain_margin" in a.coverage.bounded and not a.coverage.uncovered
    assert a.margins.gain_margin_db == pytest.approx(-20 * math.log10(l_max), rel=1e-3)
    rc, doc = _review(path, tmp_path / "r.json")
    f = next(f for f in doc["findings"] if f["rule"] == "margin.gain")
    assert f["status"] == "pass" and "at least" in f["message"]
