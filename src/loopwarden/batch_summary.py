"""The batch summaries: summary.csv (one row per design and variant) and summary.md (one
row per design), written beside the reviews (split from :mod:`.batch`)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from .batch import BatchResult
from .batch_inputs import COLUMNS, MD_TITLE, SUMMARY_CSV, SUMMARY_MD, _ours


# --------------------------------------------------------------------------- summaries
def summary_csv(result: BatchResult) -> bytes:
    """summary.csv (pandas): one row per design and variant, :data:`COLUMNS` in order."""
    import pandas as pd

    frame = pd.DataFrame([r for o in result.outcomes for r in o.rows], columns=list(COLUMNS))
    # Whole numbers stay whole when a row of an unread design leaves them empty.
    frame = frame.astype({"system_type": "Int64", "n_fail": "Int64", "n_warn": "Int64"})
    return frame.to_csv(index=False, lineterminator="\n").encode("utf-8")


def _md_code(text: str) -> str:
    """A file name as a code span: literal there (no HTML, no markup); controls shown."""
    from .report.escape import for_terminal

    # (a | still splits a table cell inside a code span: escape it)
    return "`" + for_terminal(text).replace("`", "'").replace("\n", " ").replace(
        "|", "\\|") + "`"


def summary_md(result: BatchResult, ruleset: Any, date: str, tool_version: str) -> bytes:
    """summary.md: totals, then one table row per design (verdict, worst findings)."""
    from .report import CAUTIONS
    from .report.escape import for_markdown

    n = len(result.outcomes)
    not_read = result.count("error") + result.count("internal") + result.count("timeout")
    lines = [
        MD_TITLE, "",
        f"**{n} design{'s' if n != 1 else ''}: {result.count('pass')} pass, "
        f"{result.count('fail')} fail, {not_read} could not be reviewed**", "",
        f"- Rule set: {for_markdown(f'{ruleset.id} {ruleset.version} ({ruleset.title})')}, "
        "SHA-256 "
        f"`{ruleset.sha256}`",
        f"- Date: {date}; loopwarden {tool_version}",
        "",
        "| Design | File | Review | Verdict | Fail | Warn | Worst findings |",
        "|---|---|---|---|---|---|---|",
    ]
    for o in result.outcomes:
        review = "" if o.error is not None else _md_code(Path(o.output).name)
        verdict = {"pass": "pass", "fail": "FAIL", "error": "ERROR", "timeout": "TIMEOUT",
                   "internal": "INTERNAL ERROR"}[o.verdict]
        worst = o.error if o.error is not None else "; ".join(o.worst) or "none"
        # names and messages come from the design files: escaped (no raw HTML or markup)
        cells = (for_markdown(o.design or ""), _md_code(o.path), review, verdict,
                 "" if o.error else str(o.n_fail), "" if o.error else str(o.n_warn),
                 for_markdown(worst))
        lines.append("| " + " | ".join(cells) + " |")
    lines += ["", f"> **Caution.** {CAUTIONS}", ""]
    return "\n".join(lines).encode("utf-8")


def _write_summaries(result: BatchResult, ruleset: Any, date: str,
                     tool_version: str | None) -> None:
    from . import __version__
    from .report.atomic import write_outputs

    # check_out_dir recognised any existing summary as a batch's own (_ours) before the run
    write_outputs({result.out_dir / SUMMARY_CSV: summary_csv(result),
                   result.out_dir / SUMMARY_MD: summary_md(result, ruleset, date,
                                                           tool_version or __version__)},
                  ours=_ours)
