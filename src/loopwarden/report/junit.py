"""JUnit XML for CI: one testcase per rule × variant, passes included.

``fail`` → ``<failure>``, ``error`` → ``<error>`` (the check broke, not the design),
``n/a`` → ``<skipped>``; ``warn`` and ``waived`` pass with their message in
``<system-out>``.  Each testcase carries properties: status, check, measured, limit, unit,
limit_source.  No timestamps: the same review gives byte-identical XML.  Every text from
the inputs (names, ids, messages) passes :func:`~loopwarden.report.escape.for_xml`, so a
control character in a design name cannot make the document unreadable.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

from ..ruleset.model import Finding, Status
from .atomic import MARKER
from .escape import for_xml
from .numbers import fmt
from .review import Review

__all__ = ["SUFFIX", "render"]

SUFFIX = ".xml"


def _value(x: float | str | None) -> str:
    return "" if x is None else fmt(x)


def _case(suite: ET.Element, f: Finding, classname: str) -> None:
    case = ET.SubElement(suite, "testcase", name=for_xml(f.rule), classname=classname,
                         time="0")
    props = ET.SubElement(case, "properties")
    for name, value in (("status", f.status.value), ("check", f.check),
                        ("measured", _value(f.measured)), ("limit", _value(f.limit)),
                        ("unit", f.unit), ("limit_source", f.limit_source)):
        ET.SubElement(props, "property", name=name, value=for_xml(value))
    message = for_xml(f.message)
    if f.status is Status.FAIL:
        ET.SubElement(case, "failure", message=message, type="fail").text = for_xml(
            f"{f.message}\nrationale: {f.rationale}\nsource: {f.source}")
    elif f.status is Status.ERROR:
        ET.SubElement(case, "error", message=message, type="error").text = message
    elif f.status is Status.NA:
        ET.SubElement(case, "skipped", message=message)
    else:
        ET.SubElement(case, "system-out").text = f"{f.status.value}: {message}"


def render(review: Review) -> bytes:
    """The JUnit document: one testsuite per variant, design-wide findings in their own."""
    groups: dict[str, list[Finding]] = {}
    for a in review.analyses:
        groups[a.variant] = []
    for f in review.findings:
        groups.setdefault(f.variant if f.variant is not None else "(design)", []).append(f)
    root = ET.Element("testsuites", name=for_xml(f"loopwarden {review.design.name}"))
    totals = dict.fromkeys(("tests", "failures", "errors", "skipped"), 0)
    for variant, findings in groups.items():
        counts = {"tests": len(findings),
                  "failures": sum(f.status is Status.FAIL for f in findings),
                  "errors": sum(f.status is Status.ERROR for f in findings),
                  "skipped": sum(f.status is Status.NA for f in findings)}
        suite = ET.SubElement(root, "testsuite",
                              name=for_xml(f"{review.design.name} [{variant}]"),
                              **{k: str(v) for k, v in counts.items()}, time="0")
        classname = for_xml(f"loopwarden.{review.ruleset.id}.{variant}")
        for f in findings:
            _case(suite, f, classname)
        for k, v in counts.items():
            totals[k] += v
    for k, v in totals.items():
        root.set(k, str(v))
    ET.indent(root)
    # The marker comment lets a later run recognise the file as ours and replace it.
    return (b"<?xml version='1.0' encoding='utf-8'?>\n" + f"<!-- {MARKER} -->\n".encode()
            + ET.tostring(root, encoding="utf-8") + b"\n")
