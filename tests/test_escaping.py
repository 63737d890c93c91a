"""Names from the inputs are escaped for every output: JUnit always parses, the terminal
never receives a control sequence, Markdown never passes raw HTML through.

The loop is 1/(s(s+1)^2) with unit gain (PM 21.39°, fails general [derived]); the design
and variant names carry the hostile text.
"""

from __future__ import annotations

import json
import re
import textwrap
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from loopwarden.cli import main
from loopwarden.design.loader import parse_design
from loopwarden.report import junit, markdown, terminal
from loopwarden.report.escape import for_markdown, for_terminal, for_xml
from loopwarden.review_run import run_review

HOSTILE = [
    "\x01start of heading",
    "\x1b[31mred\x1b[0m",
    "\x1b]0;title\x07",
    "bell\x07 and\x08backspace",
    "c1 \x9b2J csi",
    "bidi \u202egnp.exe",
    "<script>alert(1)</script>",
    "pipe | star * under_score_ [link](http://x) `code` & ~strike~",
    "line\nbreak\rreturn\ttab",
]


def _design(name: str, variant: str) -> str:
    # TOML basic strings take \u escapes for any character, controls included.
    def esc(s: str) -> str:
        return "".join(f"\\u{ord(c):04x}" if ord(c) < 0x20 or 0x7f <= ord(c) <= 0x9f
                       or c in '"\\' else c for c in s)

    return textwrap.dedent(f"""
        [design]
        name = "{esc(name)}"
        [plant]
        zpk = {{ zeros = [], poles = [0.0, -1.0, -1.0], gain = 1.0 }}
        [[plant.variants]]
        name = "{esc(variant)}"
        zpk = {{ zeros = [], poles = [0.0, -1.0, -1.0], gain = 0.5 }}
        [[controller]]
        type = "gain"
        k = 1.0
        """)


@pytest.fixture(scope="module", params=range(len(HOSTILE)))
def hostile(request: pytest.FixtureRequest):
    name = HOSTILE[request.param]
    design = parse_design(_design(name, "v " + name), "hostile.toml")
    assert design.name == name                       # read as written
    return name, run_review(design, "general", today="2025-02-02", tool_version="t")


_CONTROL = [chr(c) for c in [*range(0x00, 0x09), *range(0x0b, 0x20), *range(0x7f, 0xa0)]]


def test_junit_always_parses_and_keeps_the_visible_text(hostile) -> None:
    name, review = hostile
    data = junit.render(review)
    root = ET.fromstring(data)                          # raises on an invalid character
    suite = root.find("testsuite")
    assert suite is not None
    shown = suite.get("name", "")
    assert not any(c in shown for c in _CONTROL if c not in "\t\n\r")
    # printable text survives; controls are shown as \xNN
    runs = re.findall(r"[^\x00-\x1f\x7f-\x9f\u202e]+", name)
    assert all(run in shown for run in runs), (runs, shown)
    if "\x1b" in name:
        assert "\\x1b" in shown


def test_terminal_output_carries_no_control_character(hostile) -> None:
    name, review = hostile
    text = terminal.render(review).decode("utf-8")
    assert not any(c in text for c in _CONTROL), repr(text)
    assert "\u202e" not in text
    if "\x1b" in name:
        assert "\\x1b" in text


def test_markdown_passes_no_raw_html_or_markup(hostile) -> None:
    name, review = hostile
    text = markdown.render(review).decode("utf-8")
    assert "<script>" not in text and "\x1b" not in text
    title = text.splitlines()[0]
    if "<script>" in name:
        assert "&lt;script&gt;" in title
    if "[link]" in name:
        assert "\\[link\\]" in title and "\\`code\\`" in title and "\\*" in title
        assert "&amp;" in title and "\\~strike\\~" in title
    # every findings row keeps the header's cell count (no unescaped | from a name)
    lines = text.splitlines()
    header = next(line for line in lines if line.startswith("| Rule"))
    rows = [line for line in lines if line.startswith("| ") and line is not header
            and not line.startswith("|---")]
    assert all(r.replace("\\|", "").count(" | ") == header.count(" | ") for r in rows)


def test_json_keeps_names_exactly(hostile) -> None:
    # JSON escapes controls itself; the evidence records the name as written.
    from loopwarden.report import json_out

    name, review = hostile
    assert json.loads(json_out.render(review))["design"]["name"] == name


def test_escape_functions() -> None:
    assert for_terminal("a\x1b[2Jb\x9bc\u202ed\ne\tf") == "a\\x1b[2Jb\\x9bc\\u202ed\ne\tf"
    assert for_xml("a\x01b\x1bc\td\ne\uffff") == "a\\x01b\\x1bc\td\ne\\uffff"
    assert for_markdown("<b>x|y</b> a_b _c_ *d*") == ("&lt;b&gt;x\\|y&lt;/b&gt; a_b \\_c\\_ "
                                                      "\\*d\\*")
    assert for_markdown("x|y", cell=False) == "x|y"
    assert for_markdown("two\nlines") == "two lines"


def test_error_messages_on_stderr_are_neutralised(tmp_path: Path, capsys) -> None:
    # A waiver naming an unknown variant: the message quotes the hostile name.
    path = tmp_path / "d.toml"
    path.write_text(_design("ok", "v") + textwrap.dedent("""
        [[waivers]]
        rule = "margin.phase"
        variant = "\\u001b[2Jgone"
        reason = "r"
        approved_by = "a"
        expires = 2030-01-01
        """), encoding="utf-8")
    assert main(["review", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "\x1b" not in err and "\\x1b[2Jgone" in err


def test_rules_show_neutralises_a_user_sets_texts(tmp_path: Path, capsys) -> None:
    rules = tmp_path / "r.toml"
    rules.write_text(textwrap.dedent("""
        [ruleset]
        id = "r"
        version = "1"
        title = "evil \\u001b]0;pwned\\u0007 title"
        [[rule]]
        id = "stability.closed_loop"
        check = "closed_loop_stability"
        rationale = "\\u001b[31mred"
        source = "s"
        """), encoding="utf-8")
    assert main(["rules", "--show", str(rules)]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and "\x07" not in out and "\\x1b]0;pwned\\x07" in out


def test_batch_summary_escapes_design_names(tmp_path: Path) -> None:
    designs = tmp_path / "in"
    designs.mkdir()
    (designs / "a.toml").write_text(_design("<img src=x onerror=alert(1)> | *x*", "v"),
                                    encoding="utf-8")
    assert main(["batch", str(designs), "--out", str(tmp_path / "out"), "--quiet",
                 "--date", "2025-02-02"]) == 1
    text = (tmp_path / "out" / "summary.md").read_text(encoding="utf-8")
    assert "<img" not in text and "&lt;img src=x onerror=alert(1)&gt; \\| \\*x\\*" in text
    row = next(line for line in text.splitlines() if "&lt;img" in line)
    assert row.replace("\\|", "").count(" | ") == 6          # seven cells
    assert "`a.json`" in row


def test_markdown_alternative_section_escapes_the_sizing_variant() -> None:
    # The conveyor axis has a lag stage, so the review carries an integral-action
    # alternative whose gain one plant variant sets; both variants carry hostile names.
    text = (Path(__file__).resolve().parents[1] / "sample_designs" / "conveyor_axis.toml"
            ).read_text(encoding="utf-8")
    bad = "\\u001b]0;t\\u0007 <b>x</b> `c`"
    text = text.replace('name = "heavy load"', f'name = "heavy {bad}"', 1)
    text = text.replace('name = "light load"', f'name = "light {bad}"', 1)
    review = run_review(parse_design(text, "conveyor.toml"), "general", today="2025-02-02",
                        tool_version="t")
    sizing = {alt.sizing_variant for a in review.analyses for alt in a.integral_alternatives}
    assert any(v and "\x1b" in v for v in sizing)        # the hostile name sets the gain
    out = markdown.render(review).decode("utf-8")
    assert "## Integral-action alternative" in out
    assert not any(c in out for c in _CONTROL)
    assert "<b>" not in out
