"""Rule-set files: the meta-test over every shipped set, and strict loading of bad ones."""

from __future__ import annotations

import hashlib
import re
import textwrap
from pathlib import Path

import pytest

from loopwarden.errors import RuleSetError
from loopwarden.ruleset.checks import CHECKS
from loopwarden.ruleset.loader import load_ruleset, parse_ruleset, shipped_rulesets

RULES_DIR = Path(__file__).resolve().parents[1] / "rules"
SHIPPED_FILES = sorted(RULES_DIR.glob("*.toml"))
# Provenance tags every source string must use when it cites a level (REFERENCE_VALUES.md).
TAGS = ("[memory", "[derived]", "[practice]")

#: The check names of DESIGN.md §4 (part of the JSON contract: never renamed).
CONTRACT_CHECKS = {
    "closed_loop_stability", "internal_stability", "gain_margin", "phase_margin",
    "delay_margin", "peak_sensitivity", "peak_complementary", "disk_margin", "system_type",
    "error_constant", "crossover_band", "step_overshoot", "step_settling", "step_rise",
    "slow_pair_tail", "boost_band", "lag_phase_budget", "integral_alternative", "regression",
    "sample_rate",                   # sampled designs (issue: sampled-data controllers)
    "disturbance_rejection", "noise_sensitivity", "control_effort",   # issue 13
    "saturated_response",            # actuator saturation and anti-windup
}


def write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


HEAD = """\
[ruleset]
id = "t"
version = "1.0"
title = "test set"
"""

PM_RULE = """
[[rule]]
id = "margin.phase"
check = "phase_margin"
min = 45.0
rationale = "moderate overshoot"
source = "common practice [practice]"
"""

STAB_RULE = """
[[rule]]
id = "stability.closed_loop"
check = "closed_loop_stability"
rationale = "nothing else means anything without it"
source = "definition of closed-loop stability"
"""


# --------------------------------------------------------------------------- meta-test
def test_catalog_keeps_every_contract_check() -> None:
    # Contract names are never renamed or removed; a check added later (declared once, in
    # its catalog entry) is not listed here, but it must be run by a shipped rule set.
    assert set(CHECKS) >= CONTRACT_CHECKS
    shipped = {r.check for p in SHIPPED_FILES
               for r in parse_ruleset(p.read_text(encoding="utf-8"), file=str(p)).rules}
    assert set(CHECKS) - CONTRACT_CHECKS <= shipped


def test_three_sets_are_shipped() -> None:
    assert [p.stem for p in SHIPPED_FILES] == ["general", "motion-servo", "process-control"]
    assert set(shipped_rulesets()) == {p.stem for p in SHIPPED_FILES}


@pytest.mark.parametrize("path", SHIPPED_FILES, ids=lambda p: p.stem)
def test_shipped_file_is_valid_on_its_own(path: Path) -> None:
    text = path.read_text(encoding="utf-8")
    parsed = parse_ruleset(text, file=str(path))            # strict: raises on any defect
    assert parsed.id == path.stem, "a shipped set's id must match its file name"
    ids = [r.id for r in parsed.rules]
    assert len(ids) == len(set(ids))
    for rule in parsed.rules:
        assert rule.check in CHECKS
        assert rule.rationale.strip() and rule.source.strip()
        if rule.limits:
            # A number in a shipped rule must say where it comes from.
            assert any(tag in rule.source for tag in TAGS), rule.id


@pytest.mark.parametrize("name", ["general", "motion-servo", "process-control"])
def test_shipped_set_loads_with_parents(name: str) -> None:
    rs = load_ruleset(name)
    assert rs.id == name
    assert rs.sha256 == hashlib.sha256((RULES_DIR / f"{name}.toml").read_bytes()).hexdigest()
    assert [f.id for f in rs.files] == [name, *rs.extends]
    assert len({r.id for r in rs.rules}) == len(rs.rules)


def test_general_levels_are_the_cited_ones() -> None:
    rules = {r.id: r for r in load_ruleset("general").rules}
    # REFERENCE_VALUES.md "Requirement levels": GM 6 dB / PM 45° (MIL-F-9490D, [memory]),
    # Ms < 2 and Mt < 1.25 (Skogestad & Postlethwaite §2.4, [memory]).
    assert dict(rules["margin.gain"].limits) == {"min": 6.0, "warn_min": 8.0,
                                                 "max_lower": -6.0, "warn_max_lower": -8.0}
    assert dict(rules["margin.phase"].limits) == {"min": 45.0, "warn_min": 50.0}
    assert rules["robustness.sensitivity_peak"].limits["max"] == 2.0
    assert rules["robustness.complementary_peak"].limits["warn_max"] == 1.25
    # Lag rule of thumb [practice]: ~6° warn, ~18° fail.
    assert dict(rules["boost.lag_phase"].limits) == {"max": 18.0, "warn_max": 6.0}
    assert rules["boost.integral_alternative"].severity == "info"
    assert "[practice]" in rules["boost.lag_phase"].source


def test_children_replace_parent_rules_in_place() -> None:
    general = load_ruleset("general")
    servo = load_ruleset("motion-servo")
    # Replaced rules keep their place; rules new in the child (noise, effort) follow.
    assert [r.id for r in servo.rules] == [r.id for r in general.rules] + [
        "noise.actuator", "effort.actuator_peak", "actuator.saturated_step"]
    by_id = {r.id: r for r in servo.rules}
    assert by_id["margin.phase"].limits["min"] == 50.0
    assert by_id["margin.phase"].origin == "motion-servo 1.0"
    assert by_id["margin.gain"].origin == "general 1.0"
    assert by_id["tracking.type"].limits["min"] == 1.0
    process = {r.id: r for r in load_ruleset("process-control").rules}
    assert process["margin.delay"].options["relative"] is True
    assert process["robustness.sensitivity_peak"].limits["max"] == 1.7


# --------------------------------------------------------------------------- bad files
@pytest.mark.parametrize(("body", "pattern"), [
    pytest.param(PM_RULE.replace('"phase_margin"', '"phase_margn"'),
                 r"unknown check 'phase_margn'.*did you mean 'phase_margin'", id="unknown-check"),
    pytest.param(PM_RULE + PM_RULE, r"duplicate rule id 'margin.phase'", id="duplicate-id"),
    pytest.param(PM_RULE.replace('rationale = "moderate overshoot"\n', ""),
                 r"missing required key 'rationale'", id="missing-rationale"),
    pytest.param(PM_RULE.replace('source = "common practice [practice]"\n', ""),
                 r"missing required key 'source'", id="missing-source"),
    pytest.param(PM_RULE.replace('"moderate overshoot"', '"  "'),
                 r"'rationale' must be a non-empty string", id="blank-rationale"),
    pytest.param(PM_RULE.replace("min = 45.0", "warn_mn = 45.0"),
                 r"unknown key 'warn_mn'.*did you mean 'warn_min'", id="typo-limit"),
    pytest.param(PM_RULE.replace("min = 45.0", "max = 45.0"),
                 r"unknown key 'max' for check 'phase_margin'", id="unsupported-limit"),
    pytest.param(PM_RULE.replace("min = 45.0", "min = 45.0\nwarn_min = 40.0"),
                 r"warn_min = 40 is below min = 45", id="warn-below-fail"),
    pytest.param(PM_RULE.replace("min = 45.0", 'min = "45"'),
                 r"expected a number", id="string-limit"),
    pytest.param(PM_RULE.replace("min = 45.0", "min = nan"),
                 r"expected a finite number", id="nan-limit"),
    pytest.param(PM_RULE + 'severity = "fatal"\n',
                 r"unknown severity 'fatal'", id="bad-severity"),
    pytest.param(PM_RULE + 'variants = "al"\n', r"unknown value 'al'", id="bad-variants"),
    pytest.param(PM_RULE.replace("phase_margin", "closed_loop_stability").replace(
        "min = 45.0\n", "") + 'severity = "warn"\n', r"severity must be 'fail'",
        id="stability-not-fail"),
    pytest.param(PM_RULE.replace("phase_margin", "error_constant"),
                 r"needs the option 'which'", id="error-constant-which"),
    pytest.param(PM_RULE.replace('check = "phase_margin"\nmin = 45.0',
                                 'check = "error_constant"\nwhich = "ramp_error"\nmin = 0.1'),
                 r"'min' does not fit which = 'ramp_error'", id="error-direction"),
    pytest.param(PM_RULE.replace('check = "phase_margin"\nmin = 45.0',
                                 'check = "step_settling"\nband = 0.7'),
                 r"between 0 and 0.5", id="band-range"),
    pytest.param(PM_RULE.replace('id = "margin.phase"', 'id = "margin phase"'),
                 r"must be letters, digits", id="bad-rule-id"),
    pytest.param("\n[[rules]]\nid = 'x'\n", r"unknown table 'rules'.*did you mean 'rule'",
                 id="unknown-table"),
])
def test_bad_rule_files_are_rejected(tmp_path: Path, body: str, pattern: str) -> None:
    path = write(tmp_path, "bad.toml", HEAD + body)
    with pytest.raises(RuleSetError, match=pattern) as info:
        load_ruleset(str(path))
    assert info.value.file == str(path)
    assert info.value.exit_code == 2


def test_header_problems(tmp_path: Path) -> None:
    path = write(tmp_path, "v.toml", HEAD.replace('"1.0"', "1.0") + PM_RULE)
    with pytest.raises(RuleSetError, match="'version' must be a non-empty string"):
        load_ruleset(str(path))
    path = write(tmp_path, "k.toml", HEAD + 'titel = "x"\n' + PM_RULE)
    with pytest.raises(RuleSetError, match="did you mean 'title'"):
        load_ruleset(str(path))
    path = write(tmp_path, "n.toml", PM_RULE)
    with pytest.raises(RuleSetError, match=r"missing the \[ruleset\] table"):
        load_ruleset(str(path))
    path = write(tmp_path, "s.toml", HEAD + "[[rule]\n")
    with pytest.raises(RuleSetError, match="not valid TOML"):
        load_ruleset(str(path))


def test_unknown_set_name_suggests_a_shipped_one() -> None:
    with pytest.raises(RuleSetError, match=r"unknown rule set 'generl'.*did you mean 'general'"):
        load_ruleset("generl")
    with pytest.raises(RuleSetError, match="does not exist"):
        load_ruleset("no/such/file.toml")


def test_extends_relative_path_and_replacement(tmp_path: Path) -> None:
    write(tmp_path, "base.toml", HEAD.replace('"t"', '"base"') + STAB_RULE + PM_RULE + """
[[rule]]
id = "robustness.ms"
check = "peak_sensitivity"
max = 2.0
rationale = "r"
source = "s [practice]"
""")
    sub = tmp_path / "sub"
    sub.mkdir()
    child = write(sub, "child.toml", HEAD.replace('"t"', '"child"').replace(
        'title = "test set"', 'title = "child"\nextends = "../base.toml"') +
        PM_RULE.replace("45.0", "60.0") + """
[[rule]]
id = "tracking.type"
check = "system_type"
min = 1
rationale = "r"
source = "s [derived]"
""")
    rs = load_ruleset(str(child))
    assert [r.id for r in rs.rules] == ["stability.closed_loop", "margin.phase",
                                        "robustness.ms", "tracking.type"]
    assert rs.rules[1].limits["min"] == 60.0 and rs.rules[1].origin == "child 1.0"
    assert rs.rules[2].origin == "base 1.0"
    assert rs.extends == ("base",)


def test_extending_a_shipped_set_by_name(tmp_path: Path) -> None:
    child = write(tmp_path, "mine.toml", HEAD.replace(
        'title = "test set"', 'title = "mine"\nextends = "motion-servo"') + PM_RULE)
    rs = load_ruleset(str(child))
    assert rs.extends == ("motion-servo", "general")
    assert {r.id: r for r in rs.rules}["margin.phase"].limits["min"] == 45.0


def test_extends_cycle_is_an_error(tmp_path: Path) -> None:
    write(tmp_path, "a.toml", HEAD.replace('"t"', '"a"').replace(
        'title = "test set"', 'title = "a"\nextends = "b.toml"') + PM_RULE)
    write(tmp_path, "b.toml", HEAD.replace('"t"', '"b"').replace(
        'title = "test set"', 'title = "b"\nextends = "a.toml"') + PM_RULE)
    with pytest.raises(RuleSetError, match=r"cycle: a.toml -> b.toml -> a.toml"):
        load_ruleset(str(tmp_path / "a.toml"))


def test_missing_parent_is_reported_at_extends(tmp_path: Path) -> None:
    path = write(tmp_path, "a.toml", HEAD.replace(
        'title = "test set"', 'title = "a"\nextends = "genral"') + PM_RULE)
    with pytest.raises(RuleSetError, match="did you mean 'general'") as info:
        load_ruleset(str(path))
    assert info.value.where == "ruleset.extends"


def test_conflicting_settling_bands(tmp_path: Path) -> None:
    path = write(tmp_path, "b.toml", HEAD + """
[[rule]]
id = "a"
check = "step_settling"
band = 0.02
rationale = "r"
source = "s"

[[rule]]
id = "b"
check = "slow_pair_tail"
band = 0.05
rationale = "r"
source = "s"
""")
    with pytest.raises(RuleSetError, match="different settling bands"):
        load_ruleset(str(path))


def test_every_catalog_check_documents_its_unit_and_limits() -> None:
    for name, check in CHECKS.items():
        assert check.summary, name
        assert check.predicate or check.limit_keys, name
        for key in check.limit_keys:
            assert re.fullmatch(r"(warn_)?(min|max)(_[a-z]+)?", key), (name, key)


# --------------------------------------------------------------------------- stability gate
@pytest.mark.parametrize("name", ["general", "motion-servo", "process-control"])
def test_shipped_sets_gate_on_both_stability_checks(name: str) -> None:
    by_id = {r.id: r for r in load_ruleset(name).rules}
    assert by_id["stability.closed_loop"].check == "closed_loop_stability"
    assert by_id["stability.internal"].check == "internal_stability"


def test_a_set_without_a_closed_loop_stability_rule_is_refused(tmp_path: Path) -> None:
    path = write(tmp_path, "pm.toml", HEAD + PM_RULE)
    with pytest.raises(RuleSetError, match="no rule checks closed_loop_stability") as info:
        load_ruleset(str(path))
    assert info.value.file == str(path) and info.value.where == "rule"
    assert load_ruleset(str(write(tmp_path, "ok.toml", HEAD + STAB_RULE + PM_RULE)))


def test_an_empty_set_is_refused(tmp_path: Path) -> None:
    path = write(tmp_path, "empty.toml", HEAD)
    with pytest.raises(RuleSetError, match="has no rules") as info:
        load_ruleset(str(path))
    assert info.value.file == str(path)


@pytest.mark.parametrize("rule_id", ["stability.closed_loop", "stability.internal"])
def test_a_child_cannot_replace_a_stability_rule_with_another_check(tmp_path: Path,
                                                                     rule_id: str) -> None:
    # extends general, then reuses the gate's id for a harmless phase-margin rule
    child = write(tmp_path, "bent.toml", HEAD.replace(
        'title = "test set"', 'title = "bent"\nextends = "general"')
        + PM_RULE.replace('id = "margin.phase"', f'id = "{rule_id}"'))
    with pytest.raises(RuleSetError, match=f"rule id '{rule_id}' is reserved") as info:
        load_ruleset(str(child))
    assert info.value.file == str(child) and info.value.where.endswith(".check")


def test_a_stability_rule_cannot_be_narrowed_to_the_nominal_plant(tmp_path: Path) -> None:
    path = write(tmp_path, "nom.toml", HEAD + STAB_RULE + 'variants = "nominal"\n')
    with pytest.raises(RuleSetError, match="applies to every plant variant") as info:
        load_ruleset(str(path))
    assert info.value.where.endswith(".variants")


def test_a_child_may_restate_the_stability_rule(tmp_path: Path) -> None:
    child = write(tmp_path, "same.toml", HEAD.replace(
        'title = "test set"', 'title = "same"\nextends = "general"') + STAB_RULE)
    rs = load_ruleset(str(child))
    assert [r.id for r in rs.rules] == [r.id for r in load_ruleset("general").rules]


def test_review_with_a_set_without_stability_exits_2(tmp_path: Path, capsys) -> None:
    from loopwarden.cli import main

    rules = write(tmp_path, "pm.toml", HEAD + PM_RULE)
    design = Path(__file__).resolve().parents[1] / "sample_designs" / "tank_level.toml"
    out = tmp_path / "r.json"
    assert main(["review", str(design), "--rules", str(rules), "--json", str(out),
                 "--quiet"]) == 2
    assert not out.exists()
    err = capsys.readouterr().err
    assert str(rules) in err and "closed_loop_stability" in err
