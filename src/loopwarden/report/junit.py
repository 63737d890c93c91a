"""JUnit XML for CI: one testcase per rule × variant, passes included.

``fail`` → ``<failure>``, ``error`` → ``<error>`` (the check broke, not the design),
``n/a`` → ``<skipped>``; ``warn`` and ``waived`` pass with their message in
``<system-out>``.  Each testcase carries properties: status, check, measured, limit, unit,
limit_source.  No timestamps: the same review gives byte-identical XML.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

from ..ruleset.checks import fmt
from ..ruleset.model import Finding, Status
from .review import Review

__all__ = ["SUFFIX", "render"]

SUFFIX = ".xml"


def _value(x: float | str | None) -> str:
    return "" if x is None else fmt(x)


def _case(suite: ET.Element, f: Finding, classname: str) -> None:
    case = ET.SubElement(suite, "testcase", name=f.rule, classname=classname, time="0")
    props = ET.SubElement(case, "properties")
    for name, value in (("status", f.status.value), ("check", f.check),
                        ("measured", _value(f.measured)), ("limit", _value(f.limit)),
                        ("unit", f.unit), ("limit_source", f.limit_source)):
        ET.SubElement(props, "property", name=name, value=value)
    if f.status is Status.FAIL:
        ET.SubElement(case, "failure", message=f.message, type="fail").text = (
            f"{f.message}\nrationale: {f.rationale}\nsource: {f.source}")
    elif f.status is Status.ERROR:
        ET.SubElement(case, "error", message=f.message, type="error").text = f.message
    elif f.status is Status.NA:
        ET.SubElement(case, "skipped", message=f.message)
    else:
        ET.SubElement(case, "system-out").text = f"{f.status.value}: {f.message}"


def render(review: Review) -> bytes:
    """The JUnit document: one testsuite per variant, design-wide findings in their own."""
    groups: dict[str, list[Finding]] = {}
    for a in review.analyses:
        groups[a.variant] = []
    for f in review.findings:
        groups.setdefault(f.variant if f.variant is not None else "(design)", []).append(f)
    root = ET.Element("testsuites", name=f"loopwarden {review.design.name}")
    totals = dict.fromkeys(("tests", "failures", "errors", "skipped"), 0)
    for variant, findings in groups.items():
        counts = {"tests": len(findings),
                  "failures": sum(f.status is Status.FAIL for f in findings),
                  "errors": sum(f.status is Status.ERROR for f in findings),
                  "skipped": sum(f.status is Status.NA for f in findings)}
        suite = ET.SubElement(root, "testsuite", name=f"{review.design.name} [{variant}]",
                              **{k: str(v) for k, v in counts.items()}, time="0")
        classname = f"loopwarden.{review.ruleset.id}.{variant}"
        for f in findings:
            _case(suite, f, classname)
        for k, v in counts.items():
            totals[k] += v
    for k, v in totals.items():
        root.set(k, str(v))
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"
