"""The findings pages of the PDF review: failing and warning findings first, then the rest
by rule, and the not-applicable rules with their reasons (split from :mod:`.pdf`)."""

from __future__ import annotations

from typing import Any

from reportlab.lib.units import mm
from reportlab.platypus import Paragraph, Spacer, Table

from ..ruleset.model import Finding, Status
from .pdf_style import (
    HEAD_BG,
    SANS,
    SANS_BOLD,
    STATUS_LOOK,
    fit_widths,
    grid_style,
    hexcolor,
    text,
    value_text,
)
from .plots import FrequencyUnit
from .review import Review

# --------------------------------------------------------------------------- findings


def _limit_text(review: Review, f: Finding, unit: FrequencyUnit) -> str:
    """The limit with its direction (≥ for a minimum, ≤ for a maximum) where known."""
    shown = value_text(f.limit, f.unit, unit)
    if not isinstance(f.limit, int | float) or f.limit_key is None:
        return shown
    return f"{f.limit_key.bound.sign} {shown}"


#: Order of the findings table: what needs attention first, n/a last (in its own table).
FINDING_ORDER = (Status.FAIL, Status.ERROR, Status.WARN, Status.WAIVED, Status.PASS, Status.NA)


def ordered_findings(review: Review) -> tuple[tuple[Finding, ...], tuple[Finding, ...]]:
    """The findings with a verdict (fail, error, warn, waived, then pass) and the n/a ones.

    Every finding is in exactly one of the two; within a status the review's own order
    (variant, then rule) is kept.
    """
    rank = {s: i for i, s in enumerate(FINDING_ORDER)}
    ordered = sorted(review.findings, key=lambda f: rank[f.status])    # stable
    return (tuple(f for f in ordered if f.status is not Status.NA),
            tuple(f for f in ordered if f.status is Status.NA))


def _finding_widths(review: Review, unit: FrequencyUnit) -> list[float]:
    """Column widths wide enough that no rule id or limit source word is broken."""
    fs = review.findings
    cols = [[f.rule for f in fs], [f.variant or "design" for f in fs],
            [value_text(f.measured, f.unit, unit) for f in fs],
            [_limit_text(review, f, unit) for f in fs], ["WAIVED"],
            [f.limit_source for f in fs]]
    return fit_widths(cols, (34, 22, 24, 24, 16, 54),
                      fonts=(SANS_BOLD, SANS, SANS, SANS, SANS_BOLD, SANS))


def _findings_table(review: Review, findings: tuple[Finding, ...], st: dict[str, Any],
                    unit: FrequencyUnit) -> Table:
    """Findings as rows (rule, variant, measured, limit, status, limit source), each with
    its message on a grey line below."""
    head = ["Rule", "Variant", "Measured", "Limit", "Status", "Limit source"]
    data: list[list[Any]] = [[Paragraph(h, st["cell_head"]) for h in head]]
    style = grid_style()
    for f in findings:
        fg, bg, word = STATUS_LOOK[f.status]
        row = len(data)
        data.append([
            Paragraph(f"<b>{text(f.rule)}</b><br/><font color='#5f6368' size='6.6'>"
                      f"{text(f.check)}</font>", st["cell"]),
            Paragraph(text(f.variant or "design"), st["cell"]),
            Paragraph(text(value_text(f.measured, f.unit, unit)), st["cell"]),
            Paragraph(text(_limit_text(review, f, unit)), st["cell"]),
            Paragraph(f"<font color='{hexcolor(fg)}'><b>{word}</b></font>", st["cell"]),
            Paragraph(text(f.limit_source), st["cell"]),
        ])
        style.add("BACKGROUND", (4, row), (4, row), bg)
        note = text(f.message)
        if f.waiver:
            note += f"<br/><b>Waiver:</b> {text(f.waiver)}"
        data.append([Paragraph(note, st["cell_note"]), "", "", "", "", ""])
        style.add("SPAN", (0, row + 1), (-1, row + 1))
        style.add("LINEBELOW", (0, row), (-1, row), 0, HEAD_BG)
        style.add("TOPPADDING", (0, row + 1), (-1, row + 1), 0)
    table = Table(data, colWidths=_finding_widths(review, unit), repeatRows=1)
    table.setStyle(style)
    return table


def _na_table(review: Review, findings: tuple[Finding, ...], st: dict[str, Any],
              unit: FrequencyUnit) -> Table:
    """The n/a findings, one line each: rule, variant, what was measured, and why."""
    head = ["Rule", "Variant", "Measured", "Why no verdict"]
    data: list[list[Any]] = [[Paragraph(h, st["cell_head"]) for h in head]]
    for f in findings:
        limit = "" if f.limit is None else f" (limit {text(_limit_text(review, f, unit))})"
        data.append([
            Paragraph(f"<b>{text(f.rule)}</b><br/><font color='#5f6368' size='6.6'>"
                      f"{text(f.check)}</font>", st["cell"]),
            Paragraph(text(f.variant or "design"), st["cell"]),
            Paragraph(text(value_text(f.measured, f.unit, unit)), st["cell"]),
            Paragraph(f"{text(f.message)}{limit}", st["cell_note"]),
        ])
    cols = [[f.rule for f in findings], [f.variant or "design" for f in findings],
            [value_text(f.measured, f.unit, unit) for f in findings], ["because"]]
    table = Table(data, colWidths=fit_widths(cols, (34, 22, 22, 96),
                                             fonts=(SANS_BOLD, SANS, SANS, SANS)),
                  repeatRows=1)
    table.setStyle(grid_style())
    return table


def _findings(review: Review, st: dict[str, Any], unit: FrequencyUnit) -> list[Any]:
    out: list[Any] = [Paragraph("1  Findings", st["h1"])]
    counts = ", ".join(f"{review.count(s)} {STATUS_LOOK[s][2].lower()}" for s in Status
                       if review.count(s))
    judged, not_applicable = ordered_findings(review)
    out.append(Paragraph(
        f"{len(review.findings)} findings from rule set {text(review.ruleset.id)} "
        f"{text(review.ruleset.version)} on {len(review.analyses)} plant variant"
        f"{'s' if len(review.analyses) != 1 else ''}: {counts}. Waived findings do not "
        "block; an error means a figure could not be computed and blocks like a failure. "
        "The table lists failures, errors, warnings and waivers first, then passes; the "
        f"{len(not_applicable)} findings without a verdict (not applicable to this loop, or "
        "measured without a limit) follow in a table of their own.", st["body"]))
    blocking = [f for f in review.findings if f.status.blocks]
    if blocking:
        out.append(Paragraph("What blocks the release", st["h3"]))
        for f in blocking:
            fg = STATUS_LOOK[f.status][0]
            out.append(Paragraph(
                f"<font color='{hexcolor(fg)}'><b>{STATUS_LOOK[f.status][2]}</b></font> "
                f"<b>{text(f.rule)}</b> ({text(f.variant or 'design')}): {text(f.message)}",
                st["body"]))
        out.append(Spacer(1, 2 * mm))
    out.append(Paragraph("Findings", st["h3"]))
    if judged:
        out.append(_findings_table(review, judged, st, unit))
    else:
        out.append(Paragraph("No rule gave a verdict on this design.", st["body"]))
    if not_applicable:
        out.append(Paragraph("Measured without a limit / not applicable", st["h3"]))
        out.append(Paragraph(
            "These rules gave no verdict: the check does not apply to this loop, or the rule "
            "set and the design give no limit for it. Each keeps its measured value (where "
            "there is one) and its reason; none of them blocks the release.", st["small"]))
        out.append(Spacer(1, 1.5 * mm))
        out.append(_na_table(review, not_applicable, st, unit))
    out.append(Spacer(1, 3 * mm))
    out.append(Paragraph(
        "Measured values and limits are in the units shown; frequencies are in "
        f"{text(unit.label)}. The grey line under each finding is its message.",
        st["caption"]))
    return out
