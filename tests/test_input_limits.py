"""Input limits (issue 12): ranges of every number, regular files only, nesting, NUL bytes,
failing analysis parts as error findings, and the batch's per-design timeout and skip rows.

The ranges are the ones README.md states ("Input limits").  The loops are invented for
these tests: G = 1/(s(s+1)) under a gain K, whose phase margin 90° − atan(ωc) with
ωc·√(1 + ωc²) = K is 51.83° at K = 1 [derived].
"""

from __future__ import annotations

import json
import os
import textwrap
from pathlib import Path
from unittest import mock

import pandas as pd
import pytest

from loopwarden.batch import collect_inputs, run_batch
from loopwarden.cli import main
from loopwarden.design.bounds import (
    MAX_COMPUTE_DELAY,
    MAX_DELAY_PHASE_RAD,
    MAX_LOOP_ORDER,
    MAX_ROOT_RANGE,
)
from loopwarden.design.loader import load_design, parse_design
from loopwarden.errors import AnalysisError, DesignError, RuleSetError
from loopwarden.input_files import MAX_NESTING
from loopwarden.report import renderer
from loopwarden.review_run import run_review
from loopwarden.ruleset.loader import load_ruleset
from loopwarden.ruleset.model import Status

ROOT = Path(__file__).resolve().parents[1]
DATE = "2026-06-01"


def design(plant: str = "zpk = { poles = [0.0, -1.0], gain = 1.0 }", k: float = 1.0,
           extra: str = "", controller: str = "") -> str:
    return textwrap.dedent(f"""\
        [design]
        name = "limits"
        [plant]
        {plant}
        [[controller]]
        type = "gain"
        k = {k}
        """) + controller + extra


def error_of(text: str) -> DesignError:
    with pytest.raises(DesignError) as info:
        parse_design(text, "d.toml")
    return info.value


# --------------------------------------------------------------------------- numbers
@pytest.mark.parametrize(("text", "where", "fragment"), [
    # magnitudes and denormals
    (design(k=1e200), "controller[1].k", "at most 1e+150"),
    (design(k=1e-200), "controller[1].k", "at least 1e-150"),
    (design(k=5e-324), "controller[1].k", "at least 1e-150"),
    (design(plant="zpk = { poles = [0.0, -1.0], gain = 1e300 }"), "plant.zpk.gain",
     "at most"),
    (design(plant="zpk = { poles = [0.0, -1.0], gain = 100000000000000000000000000000000"
                  "0000000000000000000000000000000000000000000000000000000000000000000000"
                  "0000000000000000000000000000000000000000000000000000000000000000000000"
                  "0000000000000000000000000000000000000000000000000000000000000000000000"
                  "00000000000000000000000000000000000000000000000000000000000000000000000"
                  "0000000000000000000000000000000 }"), "plant.zpk.gain", "finite"),
    # roots and frequencies
    (design(plant="zpk = { poles = [0.0, -1e9], gain = 1.0 }"), "plant.zpk.poles[2]",
     "outside 1e-08 .. 1e+08 rad/s"),
    (design(plant="zpk = { poles = [0.0, -1e-9], gain = 1.0 }"), "plant.zpk.poles[2]",
     "outside"),
    (design(plant="zpk = { poles = [0.0, [-1.0, 1e20]], gain = 1.0 }"),
     "plant.zpk.poles[2]", "outside"),
    (design(plant="tf = { num = [1.0], den = [1e-140, 1.0, 1e-140] }"), "plant.tf.den",
     "outside"),
    (design(controller='[[controller]]\ntype = "lead"\nzero = 1.0\npole = 1e300\n'),
     "controller[2].pole", "at most"),
    (design(controller='[[controller]]\ntype = "lead"\nzero = 1.0\npole = 1e12\n'),
     "controller[2].pole", "frequency within"),
    (design(controller='[[controller]]\ntype = "pi"\nkp = 1.0\nti = 1e-100\n'),
     "controller[2].ti", "time within 1e-08 .. 1e+08 s"),
    (design(controller='[[controller]]\ntype = "pid"\nkp = 1.0\nti = 1.0\ntd = 1e100\n'),
     "controller[2].td", "time within"),
    (design(controller='[[controller]]\ntype = "pid"\nkp = 1.0\nti = 1.0\ntd = 1.0\n'
                       'n = 1e12\n'), "controller[2]", "(from kp, ti, td, n)"),
    (design(controller='[[controller]]\ntype = "notch"\nfreq = 5.0\ndepth_db = 500\n'),
     "controller[2].depth_db", "≤ 200"),
    # spread of the roots in one loop [derived: 1e-6 .. 1e7 spans 1e13 > 1e12]
    (design(plant="zpk = { poles = [-1e-6, -1e7], gain = 1.0 }"), "plant.zpk", "a range above"),
    # the loop's order
    (design(plant="zpk = { poles = [" + ", ".join(["-1.0"] * (MAX_LOOP_ORDER + 1))
                  + "], gain = 1.0 }"), "plant", f"at most {MAX_LOOP_ORDER}"),
])
def test_numbers_out_of_range_are_design_errors(text, where, fragment):
    err = error_of(text)
    assert err.exit_code == 2 and err.file == "d.toml"
    assert err.where is not None and err.where.startswith(where), err.where
    assert fragment in str(err), str(err)


def test_root_range_bound_is_the_stated_one():
    # 1e-5 .. 1e7 spans exactly 1e12: accepted; a factor 1.1 more is refused [derived].
    parse_design(design(plant="zpk = { poles = [-1e-5, -1e7], gain = 1e7 }"), "d.toml")
    assert MAX_ROOT_RANGE == 1e12
    err = error_of(design(plant="zpk = { poles = [-1e-5, -1.1e7], gain = 1e7 }"))
    assert "a range above 1e+12" in str(err)


def test_delay_against_the_fastest_frequency():
    # G = 1/(s(s+1)), K = 1: the fastest root is 1 rad/s and |L| ≥ 1 below ωc = 0.786, so
    # delay·ω_max ≤ MAX_DELAY_PHASE_RAD is a delay up to 3000 s [derived].
    ok = parse_design(design(extra="") .replace("gain = 1.0 }", "gain = 1.0 }\ndelay = 2999.0"),
                      "d.toml")
    assert ok.variants[0].delay_s == 2999.0
    err = error_of(design().replace("gain = 1.0 }", "gain = 1.0 }\ndelay = 86400.0"))
    assert err.where == "plant.delay" and f"at most {MAX_DELAY_PHASE_RAD:g} rad" in str(err)
    err = error_of(design().replace("gain = 1.0 }", "gain = 1.0 }\ndelay = 1e-150"))
    assert err.where == "plant.delay" and "at least 1e-06 rad" in str(err)
    # A biproper loop whose delayed high-frequency gain is ≥ 1 is a neutral loop.
    err = error_of(design(plant="zpk = { zeros = [-2.0], poles = [-1.0], gain = 3.0 }\n"
                                "delay = 0.1"))
    assert err.where == "plant" and "neutral" in str(err)


def test_sampling_limits():
    base = design(plant="tf = { num = [1.0], den = [1.0, 1.0] }\ndelay = 0.05")
    ok = parse_design("[sampling]\nperiod = 0.01\ncompute_delay = 1\n" + base, "d.toml")
    assert ok.sampling is not None
    for sampling, where, fragment in [
        ("period = 1e300", "sampling.period", "at most"),
        ("period = 1e-200", "sampling.period", "at least"),
        ("period = 1e-9", "sampling.period", "within 1e-08"),
        ("period = 0.01\ncompute_delay = 1000000000", "sampling.compute_delay",
         f"at most {MAX_COMPUTE_DELAY}"),
        ("period = 0.0001", "plant.delay", "sample periods"),     # 500 periods of delay
    ]:
        err = error_of(f"[sampling]\n{sampling}\n" + base)
        assert err.where == where and fragment in str(err), str(err)


def test_every_sample_design_is_within_the_limits():
    for path in sorted((ROOT / "sample_designs").glob("*.toml")):
        load_design(path)


# --------------------------------------------------------------------------- files
def test_fifo_and_directory_are_refused_unopened(tmp_path, capsys):
    fifo = tmp_path / "pipe.toml"
    os.mkfifo(fifo)
    # Opening a FIFO for reading without a writer would block this test forever.
    assert main(["review", str(fifo), "-q", "--json", str(tmp_path / "r.json")]) == 2
    err = capsys.readouterr().err
    assert str(fifo) in err and "named pipe" in err
    good = tmp_path / "good.toml"
    good.write_text(design(), encoding="utf-8")
    assert main(["review", str(good), "-q", "--rules", str(fifo)]) == 2
    assert "named pipe" in capsys.readouterr().err
    assert main(["review", str(good), "-q", "--baseline", str(fifo)]) == 2
    assert "named pipe" in capsys.readouterr().err
    with pytest.raises(RuleSetError, match="is a directory"):
        load_ruleset(str(tmp_path) + "/")
    assert not (tmp_path / "r.json").exists()


def test_measurement_file_fifo_and_nul(tmp_path):
    os.mkfifo(tmp_path / "sweep.csv")
    frd = ('frd = { file = "sweep.csv", magnitude_unit = "db", phase_unit = "deg" }')
    path = tmp_path / "d.toml"
    path.write_text(design(plant=frd), encoding="utf-8")
    with pytest.raises(DesignError, match="named pipe"):
        load_design(path)
    path.write_text(design(plant=frd.replace("sweep.csv", "sw\\u0000eep.csv")),
                    encoding="utf-8")
    with pytest.raises(DesignError) as info:
        load_design(path)
    assert info.value.where == "plant.frd.file" and "NUL" in str(info.value)


@pytest.mark.parametrize(("row", "column"), [
    ("1e300,-3,-10", "frequency"), ("10,1e300,-10", "magnitude"), ("10,-3,1e300", "phase")])
def test_measurement_values_out_of_range(row, column):
    from loopwarden.design.frd import parse_frd_csv

    rows = [f"{f},-3,-10" for f in (1, 2, 3, 4, 5, 6, 7, 8, 9)]
    text = "frequency,magnitude,phase\n" + "\n".join(rows) + "\n" + row + "\n"
    with pytest.raises(DesignError) as info:
        parse_frd_csv(text, "s.csv", frequency_unit="hz", magnitude_unit="db",
                      phase_unit="deg")
    assert info.value.where is not None and f"({column})" in info.value.where


def test_nul_byte_in_a_path_is_bad_input(capsys):
    assert main(["review", "de\0sign.toml", "-q"]) == 2
    assert "NUL" in capsys.readouterr().err


@pytest.mark.parametrize("depth", [MAX_NESTING + 1, 5000])
def test_deep_nesting_is_bad_input(tmp_path, depth):
    text = design(plant="zpk = { poles = " + "[" * depth + "1.0" + "]" * depth
                  + ", gain = 1.0 }")
    with pytest.raises(DesignError) as info:
        parse_design(text, "d.toml")
    assert info.value.where is not None and info.value.where.startswith("line 4")
    rules = tmp_path / "r.toml"
    rules.write_text('[ruleset]\nid = "x"\nversion = "1"\ntitle = "t"\n[[rule]]\nid = "a"\n'
                     "x = " + "{a = " * depth + "1" + "}" * depth + "\n", encoding="utf-8")
    with pytest.raises(RuleSetError, match="nested more than"):
        load_ruleset(str(rules))


def test_nesting_inside_strings_and_headers_is_not_counted():
    deep = "[" * 40
    text = design(extra=f'[requirements]\n# {deep}\n') .replace(
        'name = "limits"', f'name = "{deep}"\ndescription = """{deep}\n{deep}"""')
    assert parse_design(text, "d.toml").name == deep


# --------------------------------------------------------------------------- analysis parts
def test_undecided_stability_is_an_error_finding(tmp_path):
    d = load_design(ROOT / "sample_designs" / "tank_level.toml")
    with mock.patch("loopwarden.analysis.stability.closed_loop_stability",
                    side_effect=AnalysisError("the Nyquist contour could not be resolved")):
        review = run_review(d, today=DATE)
    assert review.verdict == "fail"
    nominal = {f.check: f for f in review.findings if f.variant == "nominal"}
    assert nominal["closed_loop_stability"].status is Status.ERROR
    assert "could not be resolved" in nominal["closed_loop_stability"].message
    assert nominal["step_settling"].status is Status.ERROR
    assert nominal["phase_margin"].status is Status.NA
    assert "could not be decided" in nominal["phase_margin"].message
    doc = json.loads(renderer("json").render(review))
    v = doc["variants"][0]
    assert v["closed_loop_stable"] is False and "closed_loop_stability" in v["undecided"]


@pytest.mark.parametrize(("target", "checks"), [
    ("loopwarden.analysis.loop_figures.loop_margins", ("gain_margin", "phase_margin")),
    ("loopwarden.analysis.loop_figures.loop_sensitivity", ("peak_sensitivity",)),
    ("loopwarden.analysis.tracking.compute_tracking", ("system_type",)),
    ("loopwarden.analysis.frequency_grid.loop_grid", ("gain_margin", "disk_margin")),
])
def test_failing_parts_are_error_findings(target, checks):
    d = parse_design(design(), "d.toml")
    with mock.patch(target, side_effect=FloatingPointError("overflow")):
        review = run_review(d, today=DATE)
    found = {f.check: f for f in review.findings}
    for check in checks:
        assert found[check].status is Status.ERROR, found[check]
        assert "overflow" in found[check].message
    assert review.verdict == "fail"
    renderer("json").render(review)            # placeholders hold no NaN


def test_sampled_loop_that_cannot_be_formed_leaves_everything_undecided():
    d = load_design(ROOT / "sample_designs" / "pump_pressure.toml")
    with mock.patch("loopwarden.design.sampling.sample_plant",
                    side_effect=ValueError("array must not contain infs or NaNs")):
        review = run_review(d, today=DATE)
    stab = [f for f in review.findings if f.check == "closed_loop_stability"]
    assert stab and all(f.status is Status.ERROR for f in stab)
    assert review.verdict == "fail"


# --------------------------------------------------------------------------- batch
def test_batch_timeout_and_skipped_entries_get_rows(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    (src / "a.toml").write_text(design(), encoding="utf-8")
    os.mkfifo(src / "b.toml")
    (src / "c.toml").mkdir()
    out = tmp_path / "out"
    result = run_batch(collect_inputs([src]), out, jobs=1, date=DATE)
    verdicts = {Path(o.path).name: o.verdict for o in result.outcomes}
    assert verdicts == {"a.toml": "pass", "b.toml": "error", "c.toml": "error"}
    rows = pd.read_csv(out / "summary.csv")
    assert set(rows["file"].map(lambda p: Path(p).name)) == {"a.toml", "b.toml", "c.toml"}
    errors = rows.set_index(rows["file"].map(lambda p: Path(p).name))["error"]
    assert "named pipe" in errors["b.toml"] and "directory" in errors["c.toml"]
    assert result.exit_code == 2

    # A timeout far below any review's duration stops every design; each gets its row.
    out2 = tmp_path / "out2"
    result = run_batch(collect_inputs([src / "a.toml"]), out2, jobs=1, date=DATE,
                       timeout_s=1e-4)
    assert [o.verdict for o in result.outcomes] == ["timeout"]
    md = (out2 / "summary.md").read_text(encoding="utf-8")
    assert "TIMEOUT" in md and "--timeout" in md
    assert not (out2 / "a.json").exists()
    assert result.exit_code == 2


def test_batch_timeout_option(tmp_path, capsys):
    (tmp_path / "a.toml").write_text(design(), encoding="utf-8")
    assert main(["batch", str(tmp_path / "a.toml"), "--out", str(tmp_path / "o"), "-q",
                 "--date", DATE, "--timeout", "60"]) == 0
    assert main(["batch", str(tmp_path / "a.toml"), "--out", str(tmp_path / "o"),
                 "--timeout", "nan"]) == 2
    assert main(["batch", str(tmp_path / "a.toml"), "--out", str(tmp_path / "o"),
                 "--timeout", "-1"]) == 2


def test_a_part_that_returns_nan_is_undecided():
    # NaN never appears in a result (analysis/results.py): a part that produced one failed
    # without saying so and is reported like one that raised.
    import dataclasses as dc

    from loopwarden.analysis import loop_figures

    real = loop_figures.loop_margins

    def nan_margins(resp, x):
        return dc.replace(real(resp, x), phase_margin_deg=float("nan"))

    d = parse_design(design(), "d.toml")
    with mock.patch.object(loop_figures, "loop_margins", nan_margins):
        review = run_review(d, today=DATE)
    found = {f.check: f for f in review.findings}
    assert found["phase_margin"].status is Status.ERROR
    assert "NaN" in found["phase_margin"].message
    doc = json.loads(renderer("json").render(review))
    assert doc["variants"][0]["margins"]["phase_margin_deg"] is None


def test_monic_ratio_of_a_high_order_model_stays_finite():
    # Π(x0 − z)/Π(x0 − p) for 400 poles at −1 and x0 = 3 + 0j is 4^−400 = 1.5e−241
    # [derived]; the plain product of the denominator, 4^400 = 6.7e240, is finite but a
    # pole set twice as long overflows it.
    import numpy as np

    from loopwarden.lti import monic_ratio

    poles = -np.ones(800, dtype=complex)
    zeros = -np.ones(400, dtype=complex)
    assert monic_ratio(3.0 + 0j, zeros, poles) == pytest.approx(4.0 ** -400, rel=1e-9)


def test_pdf_of_a_loop_with_an_infinite_sensitivity_peak(tmp_path):
    # G = −1/((s − 1)(s + 1)) under a unity gain: L(0) = −1 [derived], so 1 + L vanishes at
    # ω = 0 and Ms = Mt = ∞; the review (and its plots) must still be written.
    path = tmp_path / "d.toml"
    path.write_text(design(plant="zpk = { poles = [1.0, -1.0], gain = 1.0 }"),
                    encoding="utf-8")
    code = main(["review", str(path), "-q", "--date", DATE, "--out", str(tmp_path / "r.pdf"),
                 "--json", str(tmp_path / "r.json")])
    assert code == 1
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    assert doc["variants"][0]["margins"]["peak_sensitivity"] == "inf"
    assert (tmp_path / "r.pdf").stat().st_size > 0


def test_measurement_fifo_message_names_the_design_file_key_and_csv(tmp_path):
    # The key that names the CSV lives in the design: the message names both files.
    os.mkfifo(tmp_path / "sweep.csv")
    frd = ('frd = { file = "sweep.csv", magnitude_unit = "db", phase_unit = "deg" }')
    path = tmp_path / "d.toml"
    path.write_text(design(plant=frd), encoding="utf-8")
    with pytest.raises(DesignError) as info:
        load_design(path)
    assert info.value.file == str(path) and info.value.where == "plant.frd.file"
    assert "sweep.csv" in info.value.what and "named pipe" in info.value.what


def test_failed_tracking_part_carries_no_placeholder_numbers(tmp_path):
    # A tracking part that fails numerically leaves every error constant None (null in the
    # JSON, named in `unknown`), never a 0.0 that would read as "zero steady-state error";
    # the step response still exists, so the PDF's ramp panel must cope with it.
    d = parse_design(design(), "d.toml")
    with mock.patch("loopwarden.analysis.tracking.compute_tracking",
                    side_effect=FloatingPointError("overflow")):
        review = run_review(d, today=DATE)
    tr = review.analyses[0].tracking
    assert (tr.kp, tr.kv, tr.ka, tr.step_error, tr.ramp_error, tr.parabola_error) == \
        (None,) * 6
    assert set(tr.unknown) >= {"kv", "ramp_error"}
    doc = json.loads(renderer("json").render(review))
    assert doc["variants"][0]["tracking"]["ramp_error"] is None
    for fmt in ("markdown", "junit"):
        renderer(fmt).render(review)
    from loopwarden.report.pdf import render_pdf

    assert render_pdf(review, embedded={}).startswith(b"%PDF")
