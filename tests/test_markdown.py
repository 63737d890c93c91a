"""Markdown summary and the terminal table: verdict, one row per finding, cautions."""

from __future__ import annotations

import textwrap

import pytest

from loopwarden.design.loader import parse_design
from loopwarden.report import CAUTIONS, markdown, terminal
from loopwarden.review_run import run_review

# 1/(s(s+1)^2): PM 21.386° fails, GM 6.02 dB warns [derived]
DESIGN = """
[design]
name = "Gimbal | pitch"
revision = "A"
[plant]
zpk = { zeros = [], poles = [0.0, -1.0, -1.0], gain = 1.0 }
[[controller]]
type = "gain"
k = 1.0
"""


@pytest.fixture(scope="module")
def review():
    return run_review(parse_design(textwrap.dedent(DESIGN), "gimbal.toml"), "general",
                      today="2025-02-02", tool_version="t")


def test_markdown_has_verdict_table_and_cautions(review) -> None:
    text = markdown.render(review).decode("utf-8")
    lines = text.splitlines()
    assert lines[0] == "# loopwarden review: Gimbal | pitch (revision A)"
    assert any(line.startswith("**Verdict: FAIL**") for line in lines)
    rows = [line for line in lines if line.startswith("| ") and not line.startswith("| Rule")]
    assert len(rows) == len(review.findings)
    pm = next(r for r in rows if r.startswith("| margin.phase |"))
    assert "| FAIL |" in pm and "≥ 45°" in pm and "21.39°" in pm
    gm = next(r for r in rows if r.startswith("| margin.gain |"))
    assert "| warn |" in gm and "≥ 8 dB" in gm
    # every row has the same number of (unescaped) cells as the header
    header = next(line for line in lines if line.startswith("| Rule"))
    count = header.count(" | ")
    assert all(r.replace("\\|", "").count(" | ") == count for r in rows)
    assert f"> **Caution.** {CAUTIONS}" in lines
    assert review.ruleset.sha256 in text and review.design.sha256 in text


def test_terminal_table_is_aligned(review) -> None:
    text = terminal.render(review).decode("utf-8")
    lines = text.splitlines()
    # n/a findings are summed up in one line after the table (see report/terminal.py)
    shown = [f for f in review.findings if f.status.value != "n/a"]
    header, body = lines[0], lines[1:1 + len(shown)]
    assert header.split() == ["RULE", "VARIANT", "STATUS", "MEASURED", "LIMIT"]
    col = header.index("STATUS")
    assert all(line[col:col + 6].strip() in ("PASS", "WARN", "FAIL", "N/A", "WAIVED", "ERROR")
               for line in body)
    verdict = next(line for line in lines if line.startswith("verdict:"))
    assert verdict.startswith("verdict: FAIL (")
    assert any("FAIL margin.phase [nominal]" in line for line in lines)
