"""Gating a controller change in CI: baseline regression, waivers, JUnit, Markdown, batch.

Loops (invented for these tests, designs written to tmp_path):
* L = K/(s(s+1)): gain crossover ωc with ωc·√(1 + ωc²) = K, phase margin
  PM = 90° − atan(ωc) [derived]; so PM 80° at K = tan 10°·√(1 + tan² 10°) = 0.17903 and
  PM 35° at K = tan 55°·√(1 + tan² 55°) = 2.48990.  Every PM is also checked with
  control.stability_margins [python-control].
* L = 5/(s(s+1)(0.5s+1)): closed-loop unstable (Ogata's plant with gain 5 and no lag
  [memory, matched]); checked with the closed-loop poles of control.feedback
  [python-control].
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import math
import textwrap
import tomllib
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import control as ct
import numpy as np
import pandas as pd
import pytest

from loopwarden.analysis import analyze
from loopwarden.analysis.regression import FIGURE_NAMES, FIGURES, compare
from loopwarden.cli import main
from loopwarden.design.loader import parse_design
from loopwarden.review_run import run_review
from loopwarden.ruleset.evaluate import evaluate
from loopwarden.ruleset.loader import load_ruleset
from loopwarden.ruleset.model import Status

DATE = "2025-09-01"


def gain_for_pm(pm_deg: float) -> float:
    """K of K/(s(s+1)) with phase margin ``pm_deg`` [derived, closed form above]."""
    wc = math.tan(math.radians(90.0 - pm_deg))
    return wc * math.sqrt(1.0 + wc * wc)


K_BASE = round(gain_for_pm(80.0), 6)       # 0.179047
K_CAND = round(gain_for_pm(35.0), 6)       # 2.4899


def loop_design(k: float, name: str, extra: str = "") -> str:
    return textwrap.dedent(f"""
        [design]
        name = "{name}"
        [plant]
        zpk = {{ zeros = [], poles = [0.0, -1.0], gain = 1.0 }}
        [[controller]]
        type = "gain"
        k = {k!r}
        """) + textwrap.dedent(extra)


def control_pm(k: float, poles: tuple[float, ...] = (0.0, -1.0)) -> float:
    """Phase margin of k/∏(s − p) from python-control [python-control]."""
    den = np.poly(poles)
    _gm, pm, _sm, _wpc, _wgc, _wms = ct.stability_margins(ct.tf([k], den))
    return float(pm)


#: A set of our own for the gate: the design requirement (PM ≥ 30°) still applies, the
#: regression rules block what got worse.  Exit 1 below then comes from regression alone.
GATE_SET = """\
[ruleset]
id = "gate"
version = "1.0"
title = "change gate (test)"

[[rule]]
id = "stability.closed_loop"
check = "closed_loop_stability"
rationale = "nothing else means anything without it"
source = "definition"

[[rule]]
id = "margin.phase"
check = "phase_margin"
min = 30.0
rationale = "design requirement"
source = "test level [practice]"

[[rule]]
id = "regression.baseline"
check = "regression"
severity = "warn"
max = 10.0
rationale = "flag every figure that got worse"
source = "test level [practice]"

[[rule]]
id = "regression.phase_margin"
check = "regression"
figure = "phase_margin_deg"
max = 20.0
rationale = "the phase margin may not lose more than a fifth"
source = "test level [practice]"

[[rule]]
id = "regression.delay_margin"
check = "regression"
figure = "delay_margin_s"
max = 25.0
rationale = "the delay margin may not lose more than a quarter"
source = "test level [practice]"
"""


@pytest.fixture(scope="module")
def gate(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    tmp = tmp_path_factory.mktemp("gate")
    paths: dict[str, Any] = {"rules": tmp / "gate.toml", "base": tmp / "production.toml",
             "cand": tmp / "candidate.toml", "json": tmp / "r.json", "xml": tmp / "r.xml",
             "md": tmp / "r.md"}
    paths["rules"].write_text(GATE_SET, encoding="utf-8")
    paths["base"].write_text(loop_design(K_BASE, "Spindle speed loop"), encoding="utf-8")
    paths["cand"].write_text(loop_design(K_CAND, "Spindle speed loop"), encoding="utf-8")
    code = main(["review", str(paths["cand"]), "--baseline", str(paths["base"]), "--rules",
                 str(paths["rules"]), "--date", DATE, "--quiet", "--json", str(paths["json"]),
                 "--junit", str(paths["xml"]), "--markdown", str(paths["md"])])
    paths["code"] = code
    return paths


def findings(path: Path) -> dict[str, dict]:
    doc = json.loads(path.read_text(encoding="utf-8"))
    return {f["rule"]: f for f in doc["findings"] if f["variant"] == "nominal"}


# --------------------------------------------------------------------------- the loops
def test_the_two_loops_have_the_stated_margins() -> None:
    # closed form [derived] against python-control [python-control]
    assert control_pm(K_BASE) == pytest.approx(80.0, abs=1e-3)
    assert control_pm(K_CAND) == pytest.approx(35.0, abs=1e-3)


# --------------------------------------------------------------------------- baseline
def test_raised_gain_is_flagged_by_regression_and_exits_1(gate) -> None:
    assert gate["code"] == 1
    f = findings(gate["json"])
    pm_base, pm_cand = control_pm(K_BASE), control_pm(K_CAND)      # [python-control]
    # the design requirement still applies, and here it is met: 35° ≥ 30°
    assert f["margin.phase"]["status"] == "pass"
    assert f["margin.phase"]["measured"] == pytest.approx(pm_cand, abs=1e-3)
    reg = f["regression.phase_margin"]
    assert reg["status"] == "fail" and reg["check"] == "regression"
    d = reg["details"]
    assert d["phase_margin_deg.baseline"] == pytest.approx(pm_base, abs=1e-3)
    assert d["phase_margin_deg.candidate"] == pytest.approx(pm_cand, abs=1e-3)
    assert d["phase_margin_deg.change"] == pytest.approx(pm_cand - pm_base, abs=2e-3)
    # worsening in % of the baseline: 45/80 = 56.25 % [derived], limit 20 %
    assert reg["measured"] == pytest.approx(100 * (pm_base - pm_cand) / pm_base, abs=1e-2)
    assert reg["limit"] == 20.0 and reg["unit"] == "%"
    assert "80°" in reg["message"] and "35°" in reg["message"] and "−45°" in reg["message"]
    # delay margin = PM [rad]/ωc [derived]: 7.92 s → 0.428 s, far more than 25 % worse
    dm = f["regression.delay_margin"]
    wb, wc = math.tan(math.radians(10.0)), math.tan(math.radians(55.0))
    assert dm["details"]["delay_margin_s.baseline"] == pytest.approx(
        math.radians(80.0) / wb, rel=1e-4)
    assert dm["details"]["delay_margin_s.candidate"] == pytest.approx(
        math.radians(35.0) / wc, rel=1e-4)
    assert dm["status"] == "fail"
    # the catch-all warns and says which figure is worst
    assert f["regression.baseline"]["status"] == "warn"
    # only the regression rules fail
    failed = {k for k, v in f.items() if v["status"] == "fail"}
    assert failed == {"regression.phase_margin", "regression.delay_margin"}


def test_shipped_general_blocks_the_same_change(tmp_path: Path) -> None:
    base = parse_design(loop_design(K_BASE, "spindle"), "production.toml")
    cand = parse_design(loop_design(K_CAND, "spindle"), "candidate.toml")
    r = run_review(cand, "general", baseline=base, today=DATE, tool_version="t")
    by = {f.rule: f for f in r.findings if f.variant == "nominal"}
    assert by["regression.phase_margin"].status is Status.FAIL
    assert by["margin.phase"].status is Status.FAIL      # 35° < 45°: requirement applies
    assert r.verdict == "fail"
    # without a baseline the regression rules do not apply
    alone = run_review(cand, "general", today=DATE, tool_version="t")
    assert {f.status for f in alone.findings if f.check == "regression"} == {Status.NA}


def test_junit_failures_equal_failed_findings(gate) -> None:
    doc = json.loads(gate["json"].read_text(encoding="utf-8"))
    n_failed = sum(f["status"] == "fail" for f in doc["findings"])
    root = ET.parse(gate["xml"]).getroot()
    cases = root.findall("./testsuite/testcase")
    assert n_failed == 2
    assert len([c for c in cases if c.find("failure") is not None]) == n_failed
    assert int(root.get("failures")) == n_failed
    # one testcase per rule and variant, passes included
    assert len(cases) == len(doc["findings"]) == 5
    reg = next(c for c in cases if c.get("name") == "regression.phase_margin")
    props = {p.get("name"): p.get("value") for p in reg.iter("property")}
    assert props["status"] == "fail" and props["limit"] == "20"
    assert float(props["measured"]) == pytest.approx(56.25, abs=0.01)


def test_markdown_shows_the_changes_against_the_baseline(gate) -> None:
    text = gate["md"].read_text(encoding="utf-8")
    lines = text.splitlines()
    assert any(line.startswith("**Verdict: FAIL**") for line in lines)
    start = lines.index("## Changes against the baseline")
    assert lines.index("### nominal") > start
    header = next(line for line in lines[start:] if line.startswith("| Figure"))
    assert header == ("| Figure | Baseline | Candidate | Change | Allowed worsening | "
                      "Status |")
    rows = {line.split(" | ")[0].strip("| `"): line for line in lines[start:]
            if line.startswith("| `")}
    assert list(rows) == list(FIGURE_NAMES)            # every figure, in report order
    pm = rows["phase_margin_deg"]
    # values as python-control gives them (80°, 35°), change −45°, 56.25 % worse
    assert "| 80° | 35° | −45° (56.25% worse) |" in pm
    assert "≤ 20% (regression.phase_margin)" in pm and pm.endswith("| FAIL |")
    # Kv = K for K/(s(s+1)) [derived]: more gain is better tracking
    assert rows["kv"].endswith("| pass |") and "(better)" in rows["kv"]
    assert "warn above 10% (regression.baseline)" in rows["peak_sensitivity"]
    assert rows["peak_sensitivity"].endswith("| warn |")
    assert lines[-1].startswith("> **Caution.**") or lines[-2].startswith("> **Caution.**")


# --------------------------------------------------------------------------- waivers
def waivers(rules: list[str], expires: str, approver: str = "M. Ilunga") -> str:
    return "".join(f"""
[[waivers]]
rule = "{rule}"
variant = "nominal"
reason = "bandwidth doubled on purpose for the new spindle; margins checked on the rig"
approved_by = "{approver}"
expires = {expires}
""" for rule in rules)


def test_waiving_every_failing_rule_passes_until_expiry(gate, tmp_path: Path) -> None:
    failing = sorted(k for k, v in findings(gate["json"]).items() if v["status"] == "fail")
    assert failing == ["regression.delay_margin", "regression.phase_margin"]
    expires = (dt.date.fromisoformat(DATE) + dt.timedelta(days=30)).isoformat()
    cand = tmp_path / "candidate.toml"
    cand.write_text(loop_design(K_CAND, "Spindle speed loop", waivers(failing, expires)),
                    encoding="utf-8")
    args = ["review", str(cand), "--baseline", str(gate["base"]), "--rules",
            str(gate["rules"]), "--quiet"]

    out = tmp_path / "waived.json"
    assert main([*args, "--date", DATE, "--json", str(out)]) == 0
    f = findings(out)
    for rule in failing:
        assert f[rule]["status"] == "waived"
        assert "M. Ilunga" in f[rule]["waiver"] and expires in f[rule]["waiver"]
    # the per-figure status of the waived figure follows the finding
    assert f["regression.phase_margin"]["details"]["phase_margin_deg.status"] == "waived"
    assert json.loads(out.read_text())["verdict"] == "pass"

    late = (dt.date.fromisoformat(expires) + dt.timedelta(days=1)).isoformat()
    out = tmp_path / "expired.json"
    xml = tmp_path / "expired.xml"
    assert main([*args, "--date", late, "--json", str(out), "--junit", str(xml)]) == 1
    f = findings(out)
    for rule in failing:
        assert f[rule]["status"] == "fail"
        assert f"expired on {expires}" in f[rule]["message"]
    root = ET.parse(xml).getroot()
    assert int(root.get("failures")) == len(failing)


def test_waiver_on_closed_loop_stability_is_refused(tmp_path: Path) -> None:
    poles = (0.0, -1.0, -2.0)                   # 5/(s(s+1)(0.5s+1)) = 10/(s(s+1)(s+2))
    closed = ct.feedback(ct.tf([10.0], np.poly(poles)), 1)
    assert max(p.real for p in closed.poles()) > 0       # unstable [python-control]
    text = textwrap.dedent("""
        [design]
        name = "Hoist, gain too high"
        [plant]
        zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }
        [[controller]]
        type = "gain"
        k = 5.0
        """) + waivers(["stability.closed_loop"], "2030-01-01")
    path = tmp_path / "hoist.toml"
    path.write_text(text, encoding="utf-8")
    out = tmp_path / "r.json"
    assert main(["review", str(path), "--rules", "general", "--date", DATE, "--quiet",
                 "--json", str(out)]) == 1
    f = findings(out)["stability.closed_loop"]
    assert f["status"] == "fail"
    assert f["waiver"].startswith("refused") and "cannot be waived" in f["message"]


# --------------------------------------------------------------------------- directions
#: Which way is better for each figure, from what the figure means [derived/definitions].
BETTER = {
    "gain_margin_db": "higher",        # more gain increase tolerated before instability
    "phase_margin_deg": "higher",      # more phase lag tolerated
    "delay_margin_s": "higher",        # more extra dead time tolerated
    "peak_sensitivity": "lower",       # Ms = 1/(closest distance of L to −1)
    "peak_complementary": "lower",     # Mt: resonance peak of the closed loop
    "disk_margin": "higher",           # larger simultaneous gain/phase variation
    "gain_crossover_rad_s": "higher",  # faster loop
    "kp": "higher",                    # step error 1/(1 + Kp)
    "kv": "higher",                    # ramp error 1/Kv
    "ka": "higher",                    # parabola error 1/Ka
    "overshoot_pct": "lower",
    "settling_time_s": "lower",
    "rise_time_s": "lower",
    "tail_time_s": "lower",            # slow pole-zero pair's tail
}

# Ogata's lag loop (REFERENCE_VALUES.md [memory, matched]): every figure is finite and it
# has a slow pair, so each figure can be moved alone.
OGATA = """
[design]
name = "lag loop"
[plant]
zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }
[[controller]]
type = "gain"
k = 0.5
[[controller]]
type = "lag"
zero = 0.1
pole = 0.01
"""

_WHERE = {"gain_margin_db": "margins", "phase_margin_deg": "margins",
          "delay_margin_s": "margins", "gain_crossover_rad_s": "margins",
          "peak_sensitivity": "sensitivity", "peak_complementary": "sensitivity",
          "disk_margin": "sensitivity", "kp": "tracking", "kv": "tracking", "ka": "tracking",
          "overshoot_pct": "step", "settling_time_s": "step", "rise_time_s": "step"}


def with_figure(a, figure: str, value: float):
    """``a`` with one figure set to ``value`` (nothing else changed)."""
    if figure == "tail_time_s":
        pairs = tuple(dataclasses.replace(p, tail_time_s=value) for p in a.slow_tail.pairs)
        return dataclasses.replace(a, slow_tail=dataclasses.replace(a.slow_tail, pairs=pairs))
    part = _WHERE[figure]
    return dataclasses.replace(a, **{part: dataclasses.replace(getattr(a, part),
                                                               **{figure: value})})


@pytest.fixture(scope="module")
def lag_loop():
    (a,) = analyze(parse_design(textwrap.dedent(OGATA), "lag.toml"))
    assert a.slow_tail is not None and a.slow_tail.pairs and a.step is not None
    return a


def test_every_figure_has_a_stated_direction() -> None:
    assert set(BETTER) == set(FIGURE_NAMES)
    for fig in FIGURES:
        assert fig.higher_is_better == (BETTER[fig.name] == "higher"), fig.name


@pytest.mark.parametrize("figure", FIGURE_NAMES)
def test_regression_direction_per_figure(lag_loop, figure: str) -> None:
    base = with_figure(lag_loop, figure, 2.0)
    up, down = with_figure(lag_loop, figure, 2.5), with_figure(lag_loop, figure, 1.6)
    better, worse = (up, down) if BETTER[figure] == "higher" else (down, up)
    ch_better = next(c for c in compare(base, better) if c.figure == figure)
    ch_worse = next(c for c in compare(base, worse) if c.figure == figure)
    assert ch_better.worsening == 0.0
    assert ch_worse.worsening == pytest.approx(0.5 if worse is up else 0.4)
    assert ch_worse.change == pytest.approx(0.5 if worse is up else -0.4)
    # the other figures did not move
    assert all(c.worsening == 0.0 for c in compare(base, worse) if c.figure != figure)

    # and through a per-figure rule: worse by 25 % (or 20 %) of 2.0 fails "max = 10"
    rs = load_ruleset("general")
    rule = dataclasses.replace(next(r for r in rs.rules if r.id == "regression.phase_margin"),
                               options={"figure": figure}, limits={"max": 10.0})
    rs = dataclasses.replace(rs, rules=(rule,))
    design = parse_design(textwrap.dedent(OGATA), "lag.toml")
    (f_worse,) = evaluate(design, rs, (worse,), today=dt.date(2025, 1, 1), baseline=(base,))
    (f_better,) = evaluate(design, rs, (better,), today=dt.date(2025, 1, 1), baseline=(base,))
    assert f_worse.status is Status.FAIL
    assert f_worse.measured == pytest.approx(25.0 if worse is up else 20.0)
    assert f_better.status is Status.PASS and f_better.measured == 0.0


# --------------------------------------------------------------------------- batch
def test_batch_with_one_broken_design(tmp_path: Path) -> None:
    src = tmp_path / "designs"
    src.mkdir()
    ks = {"spindle_a": K_BASE, "spindle_b": K_CAND, "spindle_c": 1.0}
    for stem, k in ks.items():
        (src / f"{stem}.toml").write_text(loop_design(k, stem), encoding="utf-8")
    (src / "pump_b.toml").write_text(loop_design(1.0, "pump") + textwrap.dedent("""
        [[plant.variants]]
        name = "worn impeller"
        zpk = { zeros = [], poles = [0.0, -0.8], gain = 1.0 }
        """), encoding="utf-8")
    (src / "broken.toml").write_text("[design\nname = 'x'\n", encoding="utf-8")
    (src / "notes.txt").write_text("not a design", encoding="utf-8")
    out = tmp_path / "out"
    assert main(["batch", str(src), "--out", str(out), "--jobs", "1", "--quiet",
                 "--date", DATE]) == 2
    good = sorted([*ks, "pump_b"])
    assert sorted(p.stem for p in out.glob("*.json")) == good
    frame = pd.read_csv(out / "summary.csv")
    # one row per design and variant, variants counted from the files [tomllib]
    variants = {s: 1 + len(tomllib.loads((src / f"{s}.toml").read_text())["plant"].get(
        "variants", [])) for s in good}
    assert len(frame) == sum(variants.values()) + 1 == 6
    broken = frame[frame["verdict"] == "error"]
    assert len(broken) == 1 and broken["file"].iloc[0].endswith("broken.toml")
    assert "TOML" in broken["error"].iloc[0]
    ok = frame[frame["verdict"] != "error"]
    assert ok["error"].isna().all()
    # PM column against python-control [python-control]
    for stem, k in ks.items():
        row = ok[ok["design"] == stem]
        assert row["phase_margin_deg"].iloc[0] == pytest.approx(control_pm(k), abs=1e-3)
    assert list(ok[ok["design"] == "pump"]["variant"]) == ["nominal", "worn impeller"]
    md = (out / "summary.md").read_text(encoding="utf-8")
    assert sum(line.startswith("| ") and "`" in line for line in md.splitlines()) == 5


# --------------------------------------------------------------------------- figures not computed
SAMPLES = Path(__file__).resolve().parents[1] / "sample_designs"


def test_unknown_tracking_constants_compare_as_missing() -> None:
    # spindle_sweep: the measured nominal plant leaves Kv (type 1: the constant of its own
    # type) unknown; it is stored as None, not as a number.  Against the model variant
    # (Kv = 1333) a placeholder compared as a number would be a worsening of 1333 1/s.
    design = parse_design((SAMPLES / "spindle_sweep.toml").read_text(encoding="utf-8"),
                          str(SAMPLES / "spindle_sweep.toml"))
    measured, model = analyze(design)
    assert "kv" in measured.tracking.unknown and measured.tracking.kv is None
    assert model.tracking.kv == pytest.approx(1333.33, rel=1e-4)   # kp/ti·(plant DC gain 40)
    changes = {c.figure: c for c in compare(model, measured)}
    assert changes["kv"].candidate is None and changes["kv"].change is None
    assert changes["kv"].worsening is None
    assert changes["kv"].baseline == pytest.approx(model.tracking.kv)
    # Kp = inf on both sides (type 1) still compares as a number; so do the margins.
    assert changes["kp"].change == 0.0
    assert changes["phase_margin_deg"].change == pytest.approx(
        measured.margins.phase_margin_deg - model.margins.phase_margin_deg)
    # the other direction too
    back = {c.figure: c for c in compare(measured, model)}
    assert back["kv"].baseline is None and back["kv"].change is None


def test_margins_a_sweep_leaves_undecided_compare_as_missing(tmp_path: Path) -> None:
    from test_plots import write_short_sweep

    design = parse_design(write_short_sweep(tmp_path).read_text(encoding="utf-8"),
                          str(tmp_path / "short.toml"))
    (short,) = analyze(design)
    assert short.coverage is not None and "phase_margin" in short.coverage.uncovered
    (base,) = analyze(parse_design(loop_design(K_BASE, "base"), "base.toml"))
    changes = {c.figure: c for c in compare(base, short)}
    for figure in ("gain_margin_db", "phase_margin_deg", "delay_margin_s", "peak_sensitivity",
                   "peak_complementary", "disk_margin", "gain_crossover_rad_s", "kv"):
        assert changes[figure].candidate is None and changes[figure].change is None, figure
    # and a regression rule on such a figure says so instead of judging a number
    rs = load_ruleset("general")
    rule = next(r for r in rs.rules if r.id == "regression.phase_margin")
    (finding,) = evaluate(design, dataclasses.replace(rs, rules=(rule,)), (short,),
                          today=dt.date(2025, 1, 1), baseline=(base,))
    assert finding.status is Status.NA and "not available for the candidate" in finding.message


# --------------------------------------------------------------------------- terminal
def test_terminal_lists_verdicts_and_sums_up_na_rules() -> None:
    from loopwarden import load_design, review
    from loopwarden.report import renderer

    r = review(load_design(str(SAMPLES / "spindle_sweep.toml")), today=DATE)
    out = renderer("terminal").render(r).decode("utf-8")
    lines = out.splitlines()
    judged = [f for f in r.findings if f.status is not Status.NA]
    na_rules = list(dict.fromkeys(f.rule for f in r.findings if f.status is Status.NA))
    # the header, one line per finding with a verdict (in order), then the one n/a line
    table = lines[1:1 + len(judged)]
    for f, line in zip(judged, table, strict=True):
        assert line.startswith(f.rule + " ") and f" {f.variant} " in line, line
        assert f" {f.status.value.upper()} " in line, line
    assert lines[1 + len(judged)].endswith(na_rules[-1])
    assert not any(" N/A " in ln for ln in lines)
    summary = next(ln for ln in lines if " n/a: " in ln)
    assert summary == f"{len(na_rules)} rules n/a: " + ", ".join(na_rules)
    # the JSON keeps every n/a finding
    doc = json.loads(renderer("json").render(r))
    assert sum(f["status"] == "n/a" for f in doc["findings"]) == r.count(Status.NA) > 0
