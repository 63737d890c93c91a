"""Evaluation: findings from real analyses, limits and their sources, severities, waivers.

Loops and their reference values (REFERENCE_VALUES.md):
* Ogata's lag design, G = 1/(s(s+1)(0.5s+1)), Gc = 5(10s+1)/(100s+1): PM 41.61° at
  0.4544 rad/s, GM 14.30 dB, Ms 1.761, overshoot 34.8 %, 2 % settling 22.0 s, slow pole
  tail 21.7 s — Ogata, Modern Control Engineering [memory, matched].
* 1/(s(s+1)²): GM 2 (6.02 dB) at 1 rad/s, PM 21.386° [derived].
* e^(−0.5s)/s: PM 61.352°, delay margin π/2 − 0.5 = 1.0708 s [derived].
* the Ogata plant with gain 5 and no lag: closed-loop unstable [memory, matched].
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import textwrap
from pathlib import Path

import pytest

from helpers import ogata_lag_design
from loopwarden.analysis import analyze
from loopwarden.design.loader import parse_design
from loopwarden.design.model import Design
from loopwarden.errors import DesignError
from loopwarden.review_run import run_review
from loopwarden.ruleset.checks import CHECKS
from loopwarden.ruleset.evaluate import evaluate, evaluate_rule, resolve_limits
from loopwarden.ruleset.loader import load_ruleset
from loopwarden.ruleset.model import Finding, Status

TODAY = dt.date(2025, 6, 1)

OGATA = ogata_lag_design("Ogata lag")
TRIPLE = """
[design]
name = "triple lag"
[plant]
zpk = { zeros = [], poles = [0.0, -1.0, -1.0], gain = 1.0 }
[[controller]]
type = "gain"
k = 1.0
"""
DELAY = """
[design]
name = "integrator with dead time"
[plant]
zpk = { zeros = [], poles = [0.0], gain = 1.0 }
delay = 0.5
[[controller]]
type = "gain"
k = 1.0
"""
UNSTABLE = """
[design]
name = "too much gain"
[plant]
zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }
[[controller]]
type = "gain"
k = 5.0
"""


def design(text: str, extra: str = "") -> Design:
    return parse_design(textwrap.dedent(text) + textwrap.dedent(extra), "d.toml")


def review(text: str, extra: str = "", ruleset: str = "general", today: dt.date = TODAY):
    return run_review(design(text, extra), ruleset, today=today, tool_version="test")


def by_rule(findings: tuple[Finding, ...] | list[Finding], variant: str | None = "nominal"
            ) -> dict[str, Finding]:
    return {f.rule: f for f in findings if f.variant == variant}


@pytest.fixture(scope="module")
def ogata():
    return review(OGATA)


# --------------------------------------------------------------------------- reference loops
def test_ogata_lag_against_general(ogata) -> None:
    f = by_rule(ogata.findings)
    # PM 41.61° < 45° → fail [Ogata, memory matched]
    pm = f["margin.phase"]
    assert pm.status is Status.FAIL
    assert pm.measured == pytest.approx(41.61, abs=0.01)
    assert pm.limit == 45.0 and pm.unit == "deg"
    assert pm.limit_source == "rule set general 1.0"
    assert "below the minimum 45°" in pm.message and "0.4544 rad/s" in pm.message
    # GM 14.30 dB ≥ 8 dB → pass
    assert f["margin.gain"].status is Status.PASS
    assert f["margin.gain"].measured == pytest.approx(14.30, abs=0.01)
    # Ms 1.761: above the 1.7 warning level, below the 2.0 fail level → warn
    assert f["robustness.sensitivity_peak"].status is Status.WARN
    assert f["robustness.sensitivity_peak"].measured == pytest.approx(1.761, abs=1e-3)
    assert f["robustness.sensitivity_peak"].limit == 1.7
    # no settling requirement: measured and reported, n/a with the reason
    settle = f["response.settling"]
    assert settle.status is Status.NA
    assert settle.measured == pytest.approx(22.0, abs=0.05)
    assert "[requirements].settling_time" in settle.message
    assert f["stability.closed_loop"].status is Status.PASS
    assert f["regression.baseline"].status is Status.NA
    assert f["regression.baseline"].message == "no baseline given"
    assert ogata.verdict == "fail"


def test_one_finding_per_rule_and_variant(ogata) -> None:
    rules = [r.id for r in ogata.ruleset.rules]
    assert [f.rule for f in ogata.findings] == rules
    assert all(f.rationale and f.source for f in ogata.findings)


def test_settling_requirement_supplies_the_limit() -> None:
    r = review(OGATA, "[requirements]\nsettling_time = 15.0\n")
    f = by_rule(r.findings)
    assert f["response.settling"].status is Status.FAIL
    assert f["response.settling"].limit == 15.0
    assert f["response.settling"].limit_source == "design [requirements].settling_time"
    # slow pole −0.12281, residue 0.2857: ln(0.2857/0.02)/0.12281 = 21.7 s [Ogata, derived]
    tail = f["boost.slow_tail"]
    assert tail.status is Status.FAIL
    assert tail.measured == pytest.approx(math.log(0.2857 / 0.02) / 0.12281, abs=0.05)
    assert tail.limit_source == "design [requirements].settling_time"


def test_gain_margin_of_exactly_two_passes_the_fail_level_and_warns() -> None:
    f = by_rule(review(TRIPLE).findings)
    gm = f["margin.gain"]
    # 1/(s(s+1)²): GM = 2 = 6.02 dB [derived], between 6 (fail) and 8 (warn)
    assert gm.measured == pytest.approx(20 * math.log10(2.0), abs=1e-4)
    assert gm.status is Status.WARN and gm.limit == 8.0
    assert "below the warning level 8 dB" in gm.message
    assert f["margin.phase"].measured == pytest.approx(21.386, abs=1e-3)
    assert f["margin.phase"].status is Status.FAIL
    # no boost stage: boost checks do not apply, with the reason
    for rule in ("boost.band", "boost.lag_phase", "boost.integral_alternative"):
        assert f[rule].status is Status.NA
        assert "no low-frequency boost" in f[rule].message


def test_relative_delay_margin_in_process_control() -> None:
    f = by_rule(review(DELAY, ruleset="process-control").findings)
    dm = f["margin.delay"]
    # e^(−0.5s)/s: delay margin π/2 − 0.5 [derived] over the 0.5 s dead time
    assert dm.measured == pytest.approx((math.pi / 2 - 0.5) / 0.5, abs=1e-3)
    assert dm.unit == "x" and dm.status is Status.PASS
    # the slow-pair analysis covers delay loops: e^(−0.5s)/s has no zero, so no pair
    assert f["boost.slow_tail"].status is Status.PASS
    # (process-control's rule limits the settling ratio with / without the tail: 1.0)
    assert f["boost.slow_tail"].measured == 1.0
    assert "no slow closed-loop pole-zero pair" in f["boost.slow_tail"].message
    no_delay = by_rule(review(TRIPLE, ruleset="process-control").findings)
    assert no_delay["margin.delay"].status is Status.NA
    assert "no transport delay" in no_delay["margin.delay"].message


def test_unstable_loop_fails_stability_and_margins_do_not_apply() -> None:
    r = review(UNSTABLE)
    f = by_rule(r.findings)
    assert f["stability.closed_loop"].status is Status.FAIL
    assert f["stability.closed_loop"].measured == "unstable"
    assert "right-half-plane" in f["stability.closed_loop"].message
    for rule in ("margin.phase", "margin.gain", "robustness.sensitivity_peak"):
        assert f[rule].status is Status.NA and "unstable" in f[rule].message
    assert f["response.settling"].status is Status.NA
    assert r.verdict == "fail"


def test_variant_failure_fails_the_review() -> None:
    r = review(OGATA, """
        [[plant.variants]]
        name = "hot motor"
        zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 20.0 }
        """)
    assert [a.variant for a in r.analyses] == ["nominal", "hot motor"]
    hot = by_rule(r.findings, "hot motor")
    assert hot["stability.closed_loop"].status is Status.FAIL
    assert by_rule(r.findings)["stability.closed_loop"].status is Status.PASS
    assert r.verdict == "fail"
    # findings are sorted by variant order, then rule order
    variants = [f.variant for f in r.findings]
    assert variants == sorted(variants, key=["nominal", "hot motor"].index)


# --------------------------------------------------------------------------- limits
def test_design_may_tighten_a_rule() -> None:
    f = by_rule(review(TRIPLE, '[limits."margin.gain"]\nmin = 7.0\n').findings)
    assert f["margin.gain"].status is Status.FAIL     # 6.02 dB < 7 dB
    assert f["margin.gain"].limit == 7.0
    assert f["margin.gain"].limit_source == "design [limits.margin.gain]"
    assert f["margin.gain"].details["limit_source.warn_min"] == "rule set general 1.0"


def test_design_may_not_loosen_a_rule() -> None:
    with pytest.raises(DesignError, match="may only tighten") as info:
        review(TRIPLE, '[limits."margin.phase"]\nmin = 20.0\n')
    assert "waiver" in (info.value.hint or "")
    assert info.value.where == "limits.margin.phase.min"


def test_limits_for_an_unknown_rule(ogata) -> None:
    with pytest.raises(DesignError, match="no rule 'margin.phse'.*did you mean 'margin.phase'"):
        resolve_limits(design(OGATA, '[limits."margin.phse"]\nmin = 50.0\n'), ogata.ruleset)
    with pytest.raises(DesignError, match="has no limit 'max'"):
        resolve_limits(design(OGATA, '[limits."margin.phase"]\nmax = 50.0\n'), ogata.ruleset)


def test_looser_requirement_leaves_the_rule_binding() -> None:
    f = by_rule(review(OGATA, "[requirements]\nphase_margin = 40.0\n").findings)
    assert f["margin.phase"].limit == 45.0
    assert f["margin.phase"].limit_source == "rule set general 1.0"
    g = by_rule(review(OGATA, "[requirements]\nphase_margin = 50.0\n").findings)
    assert g["margin.phase"].limit == 50.0
    assert g["margin.phase"].limit_source == "design [requirements].phase_margin"


def test_requirements_map_onto_checks() -> None:
    f = by_rule(review(OGATA, """
        [requirements]
        overshoot = 30.0
        ramp_error = 0.1
        crossover_min = 0.5
        reference_band = 0.05
        """).findings)
    # overshoot 34.8 % [Ogata] > 30 %
    assert f["response.overshoot"].status is Status.FAIL
    assert f["response.overshoot"].measured == pytest.approx(34.8, abs=0.1)
    # ramp error 1/Kv = 0.2 [Ogata: Kv = 5] > 0.1
    assert f["tracking.ramp_error"].status is Status.FAIL
    assert f["tracking.ramp_error"].measured == pytest.approx(0.2, rel=1e-9)
    # crossover 0.4544 rad/s < 0.5
    assert f["response.crossover"].status is Status.FAIL
    # the boost helps ≥ 3 dB below ~0.085 rad/s and ≥ 2× below ~0.054: both above 0.05
    assert f["boost.band"].status is Status.PASS
    assert f["boost.band"].limit_source == "design [requirements].reference_band"


def test_boost_band_below_the_reference_band_fails() -> None:
    f = by_rule(review(OGATA, "[requirements]\nreference_band = 0.2\n").findings)
    band = f["boost.band"]
    assert band.status is Status.FAIL
    assert band.details["limit_key"] == "min"          # the 3 dB band is compared
    assert band.measured < 0.2


def test_requirement_no_rule_checks_is_reported(tmp_path: Path) -> None:
    path = tmp_path / "pm.toml"
    path.write_text(textwrap.dedent("""
        [ruleset]
        id = "pm-only"
        version = "1"
        title = "phase margin only"
        [[rule]]
        id = "stability.closed_loop"
        check = "closed_loop_stability"
        rationale = "every rule set gates on stability"
        source = "definition"
        [[rule]]
        id = "margin.phase"
        check = "phase_margin"
        min = 30.0
        rationale = "r"
        source = "s"
        """), encoding="utf-8")
    r = review(OGATA, "[requirements]\novershoot = 30.0\n", ruleset=str(path))
    extra = [f for f in r.findings if f.variant is None]
    assert len(extra) == 1 and extra[0].status is Status.WARN
    assert extra[0].rule == "requirements.overshoot"
    assert "not checked" in extra[0].message
    assert r.verdict == "pass"        # PM 41.6 ≥ 30; the warning does not fail


# --------------------------------------------------------------------------- severity
@pytest.mark.parametrize(("severity", "limits", "expected"), [
    ("fail", "min = 45.0", Status.FAIL),
    ("warn", "min = 45.0", Status.WARN),
    ("info", "min = 45.0", Status.WARN),
    ("warn", "min = 40.0\nwarn_min = 45.0", Status.WARN),
    ("info", "min = 40.0\nwarn_min = 45.0", Status.PASS),     # warn levels are notes only
    ("fail", "min = 40.0\nwarn_min = 45.0", Status.WARN),
    ("fail", "min = 40.0", Status.PASS),
])
def test_severity_decides_what_a_breach_becomes(tmp_path: Path, severity: str, limits: str,
                                                expected: Status) -> None:
    path = tmp_path / "s.toml"
    path.write_text(f"""
[ruleset]
id = "s"
version = "1"
title = "severity"
[[rule]]
id = "stability.closed_loop"
check = "closed_loop_stability"
rationale = "every rule set gates on stability"
source = "definition"
[[rule]]
id = "pm"
check = "phase_margin"
severity = "{severity}"
{limits}
rationale = "r"
source = "s"
""", encoding="utf-8")
    f = by_rule(review(OGATA, ruleset=str(path)).findings)["pm"]   # PM 41.61°
    assert f.status is expected
    assert f.details["severity"] == severity


# --------------------------------------------------------------------------- robustness
def test_a_crashing_check_is_isolated(monkeypatch: pytest.MonkeyPatch, ogata) -> None:
    def boom(*args, **kwargs):
        raise ZeroDivisionError("synthetic")

    monkeypatch.setitem(CHECKS, "phase_margin",
                        dataclasses.replace(CHECKS["phase_margin"], function=boom))
    findings = evaluate(ogata.design, ogata.ruleset, ogata.analyses, today=TODAY)
    f = by_rule(findings)
    assert f["margin.phase"].status is Status.ERROR
    assert "crashed (ZeroDivisionError: synthetic)" in f["margin.phase"].message
    assert f["margin.gain"].status is Status.PASS               # the run went on
    assert len(findings) == len(ogata.findings)


def test_could_not_compute_is_an_error_with_the_reason(ogata) -> None:
    broken = dataclasses.replace(ogata.analyses[0], step=None,
                                 errors={"step": "RuntimeError: simulation diverged"})
    rules = {r.id: r for r in ogata.ruleset.rules}
    limits = resolve_limits(ogata.design, ogata.ruleset)
    f = evaluate_rule(rules["response.overshoot"], limits["response.overshoot"], broken,
                      ogata.design)
    assert f.status is Status.ERROR
    assert f.message == "could not compute: RuntimeError: simulation diverged"
    assert f.status.blocks


# --------------------------------------------------------------------------- waivers
WAIVER = """
[[waivers]]
rule = "margin.phase"
reason = "accepted for the prototype run; retune scheduled"
approved_by = "R. Okafor"
expires = 2025-12-31
"""


def test_unexpired_waiver_turns_fail_into_waived() -> None:
    r = review(OGATA, WAIVER)
    f = by_rule(r.findings)["margin.phase"]
    assert f.status is Status.WAIVED
    assert "below the minimum 45°" in f.message            # the original finding is kept
    assert "Waived by R. Okafor until 2025-12-31" in f.message
    assert f.waiver is not None and "R. Okafor" in f.waiver
    assert r.verdict == "pass"
    # valid through its expiry date
    assert by_rule(review(OGATA, WAIVER, today=dt.date(2025, 12, 31)).findings)[
        "margin.phase"].status is Status.WAIVED


def test_expired_waiver_does_not_count() -> None:
    r = review(OGATA, WAIVER, today=dt.date(2026, 1, 1))
    f = by_rule(r.findings)["margin.phase"]
    assert f.status is Status.FAIL
    assert "expired on 2025-12-31" in f.message
    assert r.verdict == "fail"


def test_waiver_for_a_rule_the_set_does_not_have_is_a_design_error() -> None:
    # A misspelt waiver was once only a warning; now it stops the review (exit 2).
    with pytest.raises(DesignError, match="waiver for rule 'margin.phse'") as info:
        review(OGATA, WAIVER.replace('"margin.phase"', '"margin.phse"'))
    assert info.value.where == "waivers[1].rule"
    assert "did you mean 'margin.phase'" in str(info.value)
    assert info.value.exit_code == 2


def test_waiver_matching_no_finding_is_a_warning(tmp_path: Path) -> None:
    # The rule exists but only runs on the nominal plant: a waiver for another variant
    # matches nothing and is reported.
    path = tmp_path / "n.toml"
    path.write_text(textwrap.dedent("""
        [ruleset]
        id = "n"
        version = "1"
        title = "nominal only"
        [[rule]]
        id = "stability.closed_loop"
        check = "closed_loop_stability"
        rationale = "r"
        source = "s"
        [[rule]]
        id = "margin.phase"
        check = "phase_margin"
        min = 45.0
        variants = "nominal"
        rationale = "r"
        source = "s"
        """), encoding="utf-8")
    variant = """
[[plant.variants]]
name = "light"
zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }
"""
    r = review(OGATA, variant + WAIVER + 'variant = "light"\n', ruleset=str(path))
    extra = [f for f in r.findings if f.check == "waiver"]
    assert len(extra) == 1 and extra[0].status is Status.WARN
    assert "matches no finding" in extra[0].message and "margin.phase" in extra[0].message


def test_waiver_for_a_variant_only() -> None:
    text = OGATA + """
[[plant.variants]]
name = "light"
zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }
"""
    r = review(text, WAIVER + 'variant = "light"\n')
    assert by_rule(r.findings)["margin.phase"].status is Status.FAIL
    assert by_rule(r.findings, "light")["margin.phase"].status is Status.WAIVED


def test_stability_cannot_be_waived() -> None:
    r = review(UNSTABLE, WAIVER.replace("margin.phase", "stability.closed_loop"))
    f = by_rule(r.findings)["stability.closed_loop"]
    assert f.status is Status.FAIL
    assert "refused" in f.message and f.waiver is not None and f.waiver.startswith("refused")
    assert r.verdict == "fail"


# --------------------------------------------------------------------------- baseline
def test_regression_against_a_baseline() -> None:
    old = design(OGATA)
    new = design(OGATA.replace("k = 0.5", "k = 0.8"))
    r = run_review(new, "general", baseline=old, today=TODAY, tool_version="test")
    f = by_rule(r.findings)["regression.baseline"]
    base_pm = analyze(old)[0].margins.phase_margin_deg
    new_pm = analyze(new)[0].margins.phase_margin_deg
    assert new_pm < base_pm
    # the measured worsening is at least the phase-margin loss, % of the baseline [derived]
    assert f.measured >= 100 * (base_pm - new_pm) / base_pm - 1e-9
    assert f.status is Status.WARN          # severity "warn" in general.toml
    assert r.baseline is not None and r.baseline.design is old


def test_ruleset_object_is_accepted(ogata) -> None:
    rs = load_ruleset("general")
    r = run_review(ogata.design, rs, today="2025-06-01", tool_version="test")
    assert r.run.date == "2025-06-01" and r.ruleset is rs


def test_nominal_only_rules_skip_other_variants(tmp_path: Path) -> None:
    path = tmp_path / "n.toml"
    path.write_text(textwrap.dedent("""
        [ruleset]
        id = "n"
        version = "1"
        title = "nominal only"
        [[rule]]
        id = "pm"
        check = "phase_margin"
        min = 30.0
        variants = "nominal"
        rationale = "r"
        source = "s"
        [[rule]]
        id = "stab"
        check = "closed_loop_stability"
        rationale = "r"
        source = "s"
        """), encoding="utf-8")
    r = review(OGATA, """
        [[plant.variants]]
        name = "other"
        zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }
        """, ruleset=str(path))
    assert [(f.rule, f.variant) for f in r.findings] == [
        ("pm", "nominal"), ("stab", "nominal"), ("stab", "other")]
