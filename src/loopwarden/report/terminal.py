"""The compact findings table printed by ``loopwarden review`` (plain text).

Findings with a verdict are listed one per line; the n/a ones (a check that does not apply,
or a figure measured without a limit) are summed up in one line naming their rules, so the
real findings stay visible.  The JSON, JUnit and PDF keep every finding in full.  Names
and messages come from input files: control characters and escape sequences in them are
shown as visible escapes (:func:`~loopwarden.report.escape.for_terminal`), never sent to the
terminal raw.
"""

from __future__ import annotations

from ..ruleset.model import Status
from .escape import for_terminal
from .markdown import limit_text
from .numbers import fmt
from .review import Review

__all__ = ["SUFFIX", "render"]

SUFFIX = ".txt"
_MEASURED_WIDTH = 14


def _clip(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"


def render(review: Review) -> bytes:
    """One line per finding with a verdict, one line for the n/a rules, then the verdict."""
    shown = [f for f in review.findings if f.status is not Status.NA]
    rows = [(for_terminal(f.rule), for_terminal(f.variant or "-"), f.status.value.upper(),
             _clip(fmt(f.measured, f.unit) if f.measured is not None else "", _MEASURED_WIDTH),
             limit_text(f))
            for f in shown]
    head = ("RULE", "VARIANT", "STATUS", "MEASURED", "LIMIT")
    widths = [max(len(r[i]) for r in [head, *rows]) for i in range(len(head))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip()
             for row in [head, *rows]]
    na_rules = list(dict.fromkeys(f.rule for f in review.findings if f.status is Status.NA))
    if na_rules:
        lines.append(f"{len(na_rules)} rule{'s' if len(na_rules) != 1 else ''} n/a: "
                     + ", ".join(na_rules))
    counts = ", ".join(f"{review.count(s)} {s.value}" for s in Status if review.count(s))
    rs = review.ruleset
    lines.append("")
    lines.append(f"verdict: {review.verdict.upper()} ({counts or 'no findings'}) - "
                 f"{review.design.name}, rule set {rs.id} {rs.version}")
    for f in review.findings:
        if f.status.blocks:
            lines.append(f"  {f.status.value.upper()} {f.rule} [{f.variant or '-'}]: "
                         f"{f.message}")
    return for_terminal("\n".join(lines) + "\n").encode("utf-8")
