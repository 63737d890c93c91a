"""Markdown summary (for pull requests and wikis): verdict, findings table, cautions."""

from __future__ import annotations

from ..ruleset.checks import fmt
from ..ruleset.model import Finding, Status
from . import CAUTIONS
from .review import Review

__all__ = ["SUFFIX", "limit_text", "render"]

SUFFIX = ".md"


def _cell(text: str) -> str:
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def limit_text(f: Finding) -> str:
    """The limit with its direction, e.g. ``≥ 45°``; empty when there is none."""
    if f.limit is None:
        return ""
    if isinstance(f.limit, str):
        return f.limit
    key = str(f.details.get("limit_key", ""))
    sign = "≥ " if key.removeprefix("warn_").startswith("min") else "≤ " if key else ""
    return sign + fmt(f.limit, f.unit)


def _counts(review: Review) -> str:
    parts = [f"{review.count(s)} {s.value}" for s in Status if review.count(s)]
    return ", ".join(parts) or "no findings"


def render(review: Review) -> bytes:
    d, rs = review.design, review.ruleset
    title = d.name + (f" (revision {d.revision})" if d.revision else "")
    lines = [
        f"# loopwarden review: {title}",
        "",
        f"**Verdict: {review.verdict.upper()}** ({_counts(review)})",
        "",
        f"- Design: `{d.path.rsplit('/', 1)[-1]}`, SHA-256 `{d.sha256}`",
        f"- Rule set: {rs.id} {rs.version} ({rs.title}), SHA-256 `{rs.sha256}`"
        + (f", extends {', '.join(rs.extends)}" if rs.extends else ""),
        f"- Variants: {', '.join(a.variant for a in review.analyses)}",
        f"- Date: {review.run.date}; loopwarden {review.run.tool_version}",
        "",
        "## Findings",
        "",
        "| Rule | Variant | Status | Measured | Limit | Limit from | Message |",
        "|---|---|---|---|---|---|---|",
    ]
    for f in review.findings:
        status = f.status.value.upper() if f.status.blocks else f.status.value
        lines.append("| " + " | ".join(_cell(c) for c in (
            f.rule, f.variant or "(design)", status, fmt(f.measured, f.unit)
            if f.measured is not None else "", limit_text(f), f.limit_source, f.message))
            + " |")
    lines += ["", f"> **Caution.** {CAUTIONS}", ""]
    return "\n".join(lines).encode("utf-8")
