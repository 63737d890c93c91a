"""JUnit XML: parsed back with ElementTree and counted against the findings."""

from __future__ import annotations

import textwrap
import xml.etree.ElementTree as ET

import pytest

from loopwarden.design.loader import parse_design
from loopwarden.report import junit
from loopwarden.review_run import run_review
from loopwarden.ruleset.model import Status

# Ogata's lag loop (PM 41.61° < 45° fails) with a second variant that is unstable.
DESIGN = """
[design]
name = "Conveyor <index> & axis"
[plant]
zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }
[[plant.variants]]
name = "worn belt"
zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 20.0 }
[[controller]]
type = "gain"
k = 0.5
[[controller]]
type = "lag"
zero = 0.1
pole = 0.01
[[waivers]]
rule = "margin.phase"
variant = "nominal"
reason = "trial"
approved_by = "QA"
expires = 2030-01-01
"""


@pytest.fixture(scope="module")
def review():
    return run_review(parse_design(textwrap.dedent(DESIGN), "conveyor.toml"), "general",
                      today="2025-01-01", tool_version="t")


@pytest.fixture(scope="module")
def root(review) -> ET.Element:
    return ET.fromstring(junit.render(review))


def test_one_testcase_per_rule_and_variant(review, root: ET.Element) -> None:
    cases = root.findall("./testsuite/testcase")
    n_rules = len(review.ruleset.rules)
    per_variant = [c for c in cases if c.get("classname", "").endswith(".nominal")]
    assert len(per_variant) == n_rules
    assert len(cases) == len(review.findings) == 2 * n_rules
    assert int(root.get("tests")) == len(cases)


def test_statuses_map_to_junit_elements(review, root: ET.Element) -> None:
    cases = root.findall("./testsuite/testcase")
    failures = [c for c in cases if c.find("failure") is not None]
    errors = [c for c in cases if c.find("error") is not None]
    skipped = [c for c in cases if c.find("skipped") is not None]
    assert len(failures) == review.count(Status.FAIL) > 0
    assert len(errors) == review.count(Status.ERROR)
    assert len(skipped) == review.count(Status.NA) > 0
    assert int(root.get("failures")) == len(failures)
    assert int(root.get("skipped")) == len(skipped)
    # passes are listed too; a waived case passes and says so
    passes = [c for c in cases if not c.findall("failure") + c.findall("error")
              + c.findall("skipped")]
    assert len(passes) == len(cases) - len(failures) - len(errors) - len(skipped) > 0
    waived = [c for c in cases if c.get("name") == "margin.phase"
              and c.get("classname", "").endswith(".nominal")]
    assert waived[0].find("system-out").text.startswith("waived:")


def test_properties_carry_measured_limit_unit(root: ET.Element) -> None:
    case = next(c for c in root.iter("testcase") if c.get("name") == "margin.phase"
                and c.get("classname", "").endswith(".nominal"))
    props = {p.get("name"): p.get("value") for p in case.iter("property")}
    assert props["measured"] == "41.61"          # Ogata PM 41.61° [memory, matched]
    assert props["limit"] == "45" and props["unit"] == "deg"
    assert props["status"] == "waived" and props["check"] == "phase_margin"
    assert props["limit_source"] == "rule set general 1.0"


def test_failure_text_and_suites(root: ET.Element) -> None:
    suites = root.findall("testsuite")
    assert [s.get("name") for s in suites] == [
        "Conveyor <index> & axis [nominal]", "Conveyor <index> & axis [worn belt]"]
    worn = suites[1]
    stab = next(c for c in worn if c.get("name") == "stability.closed_loop")
    assert "unstable" in stab.find("failure").get("message")
    assert "rationale:" in stab.find("failure").text


def test_deterministic(review) -> None:
    assert junit.render(review) == junit.render(review)
    assert junit.render(review).startswith(b"<?xml")


def test_design_wide_findings_get_their_own_suite(tmp_path) -> None:
    # A requirement no rule of the set checks is a design-wide finding (variant None).
    rules = tmp_path / "pm.toml"
    rules.write_text(textwrap.dedent("""
        [ruleset]
        id = "pm"
        version = "1"
        title = "stability and phase margin"
        [[rule]]
        id = "stability.closed_loop"
        check = "closed_loop_stability"
        rationale = "r"
        source = "s"
        [[rule]]
        id = "margin.phase"
        check = "phase_margin"
        min = 30.0
        rationale = "r"
        source = "s"
        """), encoding="utf-8")
    design = parse_design(textwrap.dedent(DESIGN) + "[requirements]\novershoot = 20.0\n",
                          "conveyor.toml")
    r = run_review(design, str(rules), today="2025-01-01", tool_version="t")
    suites = ET.fromstring(junit.render(r)).findall("testsuite")
    assert suites[-1].get("name") == "Conveyor <index> & axis [(design)]"
    (case,) = suites[-1].findall("testcase")
    assert case.get("name") == "requirements.overshoot"
