"""The compact findings table printed by ``loopwarden review`` (plain text)."""

from __future__ import annotations

from ..ruleset.checks import fmt
from ..ruleset.model import Status
from .markdown import limit_text
from .review import Review

__all__ = ["SUFFIX", "render"]

SUFFIX = ".txt"
_MEASURED_WIDTH = 14


def _clip(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"


def render(review: Review) -> bytes:
    """One line per finding (rule, variant, status, measured, limit), then the verdict."""
    rows = [(f.rule, f.variant or "-", f.status.value.upper(),
             _clip(fmt(f.measured, f.unit) if f.measured is not None else "", _MEASURED_WIDTH),
             limit_text(f))
            for f in review.findings]
    head = ("RULE", "VARIANT", "STATUS", "MEASURED", "LIMIT")
    widths = [max(len(r[i]) for r in [head, *rows]) for i in range(len(head))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip()
             for row in [head, *rows]]
    counts = ", ".join(f"{review.count(s)} {s.value}" for s in Status if review.count(s))
    rs = review.ruleset
    lines.append("")
    lines.append(f"verdict: {review.verdict.upper()} ({counts or 'no findings'}) - "
                 f"{review.design.name}, rule set {rs.id} {rs.version}")
    for f in review.findings:
        if f.status.blocks:
            lines.append(f"  {f.status.value.upper()} {f.rule} [{f.variant or '-'}]: "
                         f"{f.message}")
    return ("\n".join(lines) + "\n").encode("utf-8")
