"""Markdown summary (for merge requests and wikis): verdict, findings table, the
integral-action alternative, cautions.

With a baseline, a "Changes against the baseline" table per variant follows the findings:
every figure of :data:`loopwarden.analysis.regression.FIGURES` with its baseline and
candidate values, the change, the worsening each ``regression`` rule allows and the status
those rules gave it (read from the findings' per-figure details, never re-judged here).
"""

from __future__ import annotations

from ..analysis.regression import FigureChange
from ..ruleset.checks import worsening_pct
from ..ruleset.model import Finding, Status
from . import CAUTIONS
from .atomic import MARKER
from .escape import for_markdown
from .numbers import fmt
from .review import Review

__all__ = ["SUFFIX", "limit_text", "render"]

SUFFIX = ".md"


def _cell(text: str) -> str:
    return for_markdown(text)


def _line(text: str) -> str:
    return for_markdown(text, cell=False)


def limit_text(f: Finding) -> str:
    """The limit with its direction, e.g. ``≥ 45°``; empty when there is none."""
    if f.limit is None:
        return ""
    if isinstance(f.limit, str):
        return f.limit
    sign = f"{f.limit_key.bound.sign} " if f.limit_key is not None else ""
    return sign + fmt(f.limit, f.unit)


def _counts(review: Review) -> str:
    parts = [f"{review.count(s)} {s.value}" for s in Status if review.count(s)]
    return ", ".join(parts) or "no findings"


def render(review: Review) -> bytes:
    d, rs = review.design, review.ruleset
    # Every name below comes from an input file: escaped (no raw HTML, no Markdown syntax).
    title = d.name + (f" (revision {d.revision})" if d.revision else "")
    lines = [
        f"# loopwarden review: {_line(title)}",
        "",
        f"**Verdict: {review.verdict.upper()}** ({_counts(review)})",
        "",
        f"- Design: {_line(d.path.rsplit('/', 1)[-1])}, SHA-256 `{d.sha256}`",
        f"- Rule set: {_line(f'{rs.id} {rs.version} ({rs.title})')}, SHA-256 `{rs.sha256}`"
        + (f", extends {_line(', '.join(rs.extends))}" if rs.extends else ""),
        f"- Variants: {_line(', '.join(a.variant for a in review.analyses))}",
        f"- Date: {_line(review.run.date)}; loopwarden {_line(review.run.tool_version)}",
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
    lines += _alternatives(review)
    lines += _changes(review)
    # The marker comment (invisible when rendered) lets a later run recognise the file.
    lines += ["", f"> **Caution.** {CAUTIONS}", f"<!-- {MARKER} -->", ""]
    return "\n".join(lines).encode("utf-8")


# --------------------------------------------------------------------------- alternative
def _alternatives(review: Review) -> list[str]:
    """One integral-action alternative per boost stage: its figures on every variant, the
    review limits it meets and fails there, and its snippet (all from the analysis)."""
    stages = sorted({alt.stage for a in review.analyses for alt in a.integral_alternatives})
    lines: list[str] = []
    for index in stages:
        rows = [(a.variant, alt) for a in review.analyses for alt in a.integral_alternatives
                if alt.stage == index]
        first = rows[0][1]
        name = next((s.name for s in review.design.controller if s.index == index),
                    f"controller[{index}]")
        lines += ["", f"## Integral-action alternative to {_line(name)}", "",
                  f"The stage's pole moved to the origin and one overall gain factor "
                  f"x{fmt(first.gain_factor)} for every plant variant"
                  + (f" (set by '{_line(first.sizing_variant)}')" if first.sizing_variant
                     else "")
                  + f"; phase-margin target {fmt(first.target_phase_margin_deg, 'deg')}"
                  + ("" if first.meets_target else " (not reachable: best margin used)")
                  + ".", "",
                  "| Variant | Phase margin | Gain margin | Type | Settling | Meets | Fails |",
                  "|---|---|---|---|---|---|---|"]
        for variant, alt in rows:
            lines.append("| " + " | ".join(_cell(c) for c in (
                variant, fmt(alt.margins.phase_margin_deg, "deg"),
                fmt(alt.margins.gain_margin_db, "dB"), str(alt.tracking.system_type),
                fmt(alt.step.settling_time_s, "s"), ", ".join(alt.meets) or "—",
                ", ".join(alt.fails) or "—")) + " |")
        if any(alt.current_disturbance_ie is not None or alt.disturbance_error is not None
               for _, alt in rows):
            lines += ["", "Load step (`[disturbance]`), ∫y dt and ∫|y| dt:", "",
                      "| Variant | Current IE | Current IAE | Alternative IE | "
                      "Alternative IAE |", "|---|---|---|---|---|"]
            for variant, alt in rows:
                lines.append("| " + " | ".join(_cell(c) for c in (
                    variant, fmt(alt.current_disturbance_ie), fmt(alt.current_disturbance_iae),
                    fmt(alt.disturbance_ie) if alt.disturbance_error is None
                    else alt.disturbance_error, fmt(alt.disturbance_iae))) + " |")
        lines += ["", "```toml", first.snippet_toml.rstrip("\n"), "```"]
    return lines


# --------------------------------------------------------------------------- baseline
#: How a figure's status ranks when several regression rules judge it (worst shown).
_RANK = {Status.ERROR: 5, Status.FAIL: 4, Status.WARN: 3, Status.WAIVED: 2, Status.PASS: 1,
         Status.NA: 0}


def _status_text(status: Status) -> str:
    return status.value.upper() if status.blocks else status.value


def _allowed(f: Finding) -> str:
    """The worsening one regression rule allows, e.g. ``≤ 20 % (regression.phase_margin)``."""
    severity = str(f.details.get("severity", "fail"))
    parts = []
    hard, warn = f.details.get("limit.max"), f.details.get("limit.warn_max")
    if isinstance(hard, float | int):
        parts.append(f"≤ {fmt(hard, '%')}" if severity == "fail"
                     else f"{'warn' if severity == 'warn' else 'noted'} above {fmt(hard, '%')}")
    if isinstance(warn, float | int) and severity != "info":
        parts.append(f"warn above {fmt(warn, '%')}")
    return f"{', '.join(parts) or 'no limit'} ({f.rule})"


def _change_cell(c: FigureChange) -> str:
    if c.change is None:
        return "n/a"
    if c.change == 0.0:
        return "unchanged"
    sign = "+" if c.change > 0 else "−"
    text = f"{sign}{fmt(abs(c.change), c.unit)}"
    pct = worsening_pct(c)
    return f"{text} ({fmt(pct, '%')} worse)" if pct > 0 else f"{text} (better)"


def _variant_changes(changes: tuple[FigureChange, ...], rules: list[Finding]) -> list[str]:
    lines = ["| Figure | Baseline | Candidate | Change | Allowed worsening | Status |",
             "|---|---|---|---|---|---|"]
    for c in changes:
        judged = [(f, f.details[f"{c.figure}.status"]) for f in rules
                  if f"{c.figure}.status" in f.details]
        statuses = [Status(str(s)) for _f, s in judged]
        status = (_status_text(max(statuses, key=_RANK.__getitem__)) if statuses
                  else "n/a" if c.change is None else "not judged")
        allowed = "; ".join(_allowed(f) for f, _s in judged) or "no rule"
        # the figure name is one of ours (regression.FIGURES): a code span, not escaped
        lines.append(f"| `{c.figure}` | " + " | ".join(_cell(x) for x in (
            fmt(c.baseline, c.unit), fmt(c.candidate, c.unit),
            _change_cell(c), allowed, status)) + " |")
    return lines


def _changes(review: Review) -> list[str]:
    """The "Changes against the baseline" section; empty without a baseline."""
    if review.baseline is None:
        return []
    b = review.baseline.design
    lines = ["", "## Changes against the baseline", "",
             f"Baseline {_line(b.path.rsplit('/', 1)[-1])}"
             + (f" (revision {_line(b.revision)})" if b.revision else "")
             + f", SHA-256 `{b.sha256}`. Change = candidate − baseline; worse is in % of "
             "the baseline value."]
    for a in review.analyses:
        lines += ["", f"### {_line(a.variant)}", ""]
        changes = review.baseline.changes.get(a.variant)
        if changes is None:
            lines.append(f"The baseline has no plant variant named '{_line(a.variant)}'; nothing "
                         "to compare.")
            continue
        rules = [f for f in review.findings if f.check == "regression" and f.variant == a.variant]
        lines += _variant_changes(changes, rules)
    return lines
