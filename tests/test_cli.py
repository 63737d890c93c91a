"""The review and rules commands through ``main([...])``: exit codes, outputs, safety.

Loops (REFERENCE_VALUES.md): e^(−0.5s)/s passes general (PM 61.35°, GM π = 9.94 dB,
Ms 1.59 [derived; Skogestad 2003 memory]); Ogata's lag loop fails it (PM 41.61° < 45°
[memory, matched]); the Ogata plant with gain 5 and no lag is closed-loop unstable.
"""

from __future__ import annotations

import json
import textwrap
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from helpers import ogata_lag_design
from loopwarden.cli import main

PASSING = """
[design]
name = "Tank level"
[plant]
zpk = { zeros = [], poles = [0.0], gain = 1.0 }
delay = 0.5
[[controller]]
type = "gain"
k = 1.0
[requirements]
settling_time = 5.0
"""
FAILING = ogata_lag_design("Conveyor axis")
UNSTABLE = FAILING.replace("k = 0.5", "k = 50.0")


def put(tmp_path: Path, text: str, name: str = "design.toml") -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def outputs(tmp_path: Path) -> list[str]:
    return ["--json", str(tmp_path / "r.json"), "--junit", str(tmp_path / "r.xml"),
            "--markdown", str(tmp_path / "r.md")]


def files_in(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


# --------------------------------------------------------------------------- exit 0 / 1
def test_passing_design_exits_0_and_writes_every_output(tmp_path: Path, capsys) -> None:
    design = put(tmp_path, PASSING)
    rc = main(["review", str(design), "--date", "2025-05-05", *outputs(tmp_path)])
    assert rc == 0
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    assert doc["verdict"] == "pass" and doc["date"] == "2025-05-05"
    ET.parse(tmp_path / "r.xml")
    assert "**Verdict: PASS**" in (tmp_path / "r.md").read_text(encoding="utf-8")
    out = capsys.readouterr().out
    assert "verdict: PASS" in out and "wrote" in out
    assert not [n for n in files_in(tmp_path) if n.endswith(".tmp")]


def test_failing_design_exits_1(tmp_path: Path, capsys) -> None:
    design = put(tmp_path, FAILING)
    assert main(["review", str(design), "--date", "2025-05-05", "--json",
                 str(tmp_path / "r.json")]) == 1
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    pm = next(f for f in doc["findings"] if f["rule"] == "margin.phase")
    assert pm["status"] == "fail" and pm["measured"] == pytest.approx(41.61, abs=0.01)
    assert "FAIL margin.phase [nominal]" in capsys.readouterr().out


def test_unstable_design_exits_1_with_failing_stability(tmp_path: Path) -> None:
    design = put(tmp_path, UNSTABLE)
    assert main(["review", str(design), "--date", "2025-05-05", "--quiet", "--json",
                 str(tmp_path / "r.json")]) == 1
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    stab = next(f for f in doc["findings"] if f["check"] == "closed_loop_stability")
    assert stab["status"] == "fail" and stab["measured"] == "unstable"
    assert doc["variants"][0]["closed_loop_stable"] is False


def test_rule_set_choice_changes_the_verdict(tmp_path: Path) -> None:
    # e^(−0.5s)/s, PM 61.35° passes motion-servo's 50°; its type-1 loop passes type ≥ 1;
    # overshoot 4.05 % is under the 10 % warning level.
    design = put(tmp_path, PASSING)
    assert main(["review", str(design), "--rules", "motion-servo", "--quiet",
                 "--date", "2025-05-05"]) == 0
    # Ogata's PM 41.61° fails general; a custom set with min 40° passes it
    rules = put(tmp_path, """
        [ruleset]
        id = "lenient"
        version = "1"
        title = "lenient"
        [[rule]]
        id = "stability.closed_loop"
        check = "closed_loop_stability"
        rationale = "every rule set gates on stability"
        source = "definition"
        [[rule]]
        id = "pm"
        check = "phase_margin"
        min = 40.0
        rationale = "r"
        source = "s"
        """, "lenient.toml")
    failing = put(tmp_path, FAILING, "axis.toml")
    assert main(["review", str(failing), "--rules", str(rules), "--quiet",
                 "--date", "2025-05-05"]) == 0


def test_quiet_prints_nothing(tmp_path: Path, capsys) -> None:
    assert main(["review", str(put(tmp_path, FAILING)), "--quiet", "--date",
                 "2025-05-05"]) == 1
    assert capsys.readouterr().out == ""


# --------------------------------------------------------------------------- exit 2
@pytest.mark.parametrize("case", ["malformed", "unknown-key", "missing-file", "unknown-set",
                                  "bad-date", "no-folder", "overwrite-design",
                                  "overwrite-rules", "same-output", "sign-without-out",
                                  "loosening-limit"])
def test_bad_input_exits_2_and_writes_nothing(tmp_path: Path, capsys, case: str) -> None:
    design = put(tmp_path, PASSING)
    args = ["review", str(design), "--date", "2025-05-05", *outputs(tmp_path)]
    if case == "malformed":
        put(tmp_path, "[design\nname = 'x'\n")
    elif case == "unknown-key":
        put(tmp_path, PASSING.replace("delay = 0.5", "dealy = 0.5"))
    elif case == "missing-file":
        args[1] = str(tmp_path / "nope.toml")
    elif case == "unknown-set":
        args += ["--rules", "motion-servoo"]
    elif case == "bad-date":
        args[3] = "2025-13-01"
    elif case == "no-folder":
        args += ["--junit", str(tmp_path / "missing" / "r.xml")]
    elif case == "overwrite-design":
        args += ["--markdown", str(design)]
    elif case == "overwrite-rules":
        rules = put(tmp_path, (Path(__file__).resolve().parents[1] / "rules" /
                               "general.toml").read_text(encoding="utf-8"), "mine.toml")
        args += ["--rules", str(rules), "--json", str(rules)]
    elif case == "same-output":
        args += ["--junit", str(tmp_path / "r.json")]
    elif case == "sign-without-out":
        args += ["--sign", str(tmp_path / "key.p12")]
    elif case == "loosening-limit":
        put(tmp_path, PASSING + '[limits."margin.phase"]\nmin = 30.0\n')
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    assert main(args) == 2
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    assert after == before, "nothing may be written or changed on bad input"
    err = capsys.readouterr().err
    assert err.startswith("loopwarden: error:") and "Traceback" not in err


def test_ill_posed_loop_is_bad_input(tmp_path: Path, capsys) -> None:
    # L(s) = −s/(s + 1): L(∞) = −1, so 1 + L(∞) = 0 and the loop equations have no
    # solution [derived]. That is the design's fault: exit 2, nothing written.
    path = tmp_path / "ill.toml"
    path.write_text(textwrap.dedent("""
        [design]
        name = "ill-posed"
        [plant]
        tf = { num = [-1.0, 0.0], den = [1.0, 1.0] }
        [[controller]]
        type = "gain"
        k = 1.0
        """))
    out = tmp_path / "r.json"
    assert main(["review", str(path), "--json", str(out)]) == 2
    assert not out.exists()
    err = capsys.readouterr().err
    assert "ill.toml: plant" in err and "not well posed" in err


def test_missing_file_message_names_the_file(tmp_path: Path, capsys) -> None:
    assert main(["review", str(tmp_path / "absent.toml")]) == 2
    assert "absent.toml" in capsys.readouterr().err


def test_unknown_set_message_suggests(tmp_path: Path, capsys) -> None:
    assert main(["review", str(put(tmp_path, PASSING)), "--rules", "proces-control"]) == 2
    assert "did you mean 'process-control'" in capsys.readouterr().err


def test_internal_error_exits_3(tmp_path: Path, monkeypatch, capsys) -> None:
    import loopwarden.review_run as rr

    def broken(*a, **k):
        raise RuntimeError("synthetic bug")

    monkeypatch.setattr(rr, "run_review", broken)
    assert main(["review", str(put(tmp_path, PASSING)), "--json",
                 str(tmp_path / "r.json")]) == 3
    assert "internal error" in capsys.readouterr().err
    assert not (tmp_path / "r.json").exists()


# --------------------------------------------------------------------------- determinism
def test_two_runs_are_byte_identical(tmp_path: Path, monkeypatch) -> None:
    design = put(tmp_path, FAILING)
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1735689600")     # 2025-01-01T00:00:00Z
    for name in ("a", "b"):
        assert main(["review", str(design), "--quiet", "--json", str(tmp_path / f"{name}.json"),
                     "--junit", str(tmp_path / f"{name}.xml"), "--markdown",
                     str(tmp_path / f"{name}.md")]) == 1
    for ext in ("json", "xml", "md"):
        assert (tmp_path / f"a.{ext}").read_bytes() == (tmp_path / f"b.{ext}").read_bytes()
    doc = json.loads((tmp_path / "a.json").read_text(encoding="utf-8"))
    assert doc["date"] == "2025-01-01"


def test_existing_output_is_replaced(tmp_path: Path) -> None:
    # A file loopwarden did not write is replaced only with --force (issue 12); one it
    # wrote (a review JSON) is replaced on the next run.
    design = put(tmp_path, PASSING)
    target = tmp_path / "r.json"
    target.write_text("old", encoding="utf-8")
    assert main(["review", str(design), "--quiet", "--json", str(target)]) == 2
    assert target.read_text(encoding="utf-8") == "old"
    assert main(["review", str(design), "--quiet", "--json", str(target), "--force"]) == 0
    assert json.loads(target.read_text(encoding="utf-8"))["schema"] == "loopwarden-review/1"
    assert main(["review", str(design), "--quiet", "--json", str(target)]) == 0


# --------------------------------------------------------------------------- rules command
def test_rules_lists_catalog_and_sets(capsys) -> None:
    assert main(["rules"]) == 0
    out = capsys.readouterr().out
    for name in ("closed_loop_stability", "boost_band", "regression", "general",
                 "motion-servo", "process-control"):
        assert name in out


def test_rules_show(capsys) -> None:
    assert main(["rules", "--show", "motion-servo"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("motion-servo 1.0: Position and velocity servo loops")
    line = next(x for x in out.splitlines() if x.strip().startswith("margin.phase "))
    assert "min 50°" in line and "motion-servo 1.0" in line
    assert "extends general" in out


def test_rules_show_unknown_exits_2(capsys) -> None:
    assert main(["rules", "--show", "nope"]) == 2
    assert "unknown rule set 'nope'" in capsys.readouterr().err


def test_help_exits_0(capsys) -> None:
    assert main(["review", "--help"]) == 0
    out = capsys.readouterr().out
    assert "--rules" in out and "exit status" in out


# --------------------------------------------------------------------------- PDF and baseline
def test_pdf_embeds_the_evidence_and_the_inputs(tmp_path: Path) -> None:
    import hashlib

    from pypdf import PdfReader

    design = put(tmp_path, PASSING)
    pdf = tmp_path / "review.pdf"
    assert main(["review", str(design), "--quiet", "--date", "2025-05-05", "--out", str(pdf),
                 "--json", str(tmp_path / "r.json")]) == 0
    assert pdf.read_bytes().startswith(b"%PDF")
    attached = {name: data[0] for name, data in PdfReader(str(pdf)).attachments.items()}
    assert set(attached) == {"review.json", "design.toml", "rules.toml"}
    assert attached["review.json"] == (tmp_path / "r.json").read_bytes()
    doc = json.loads(attached["review.json"])
    assert hashlib.sha256(attached["design.toml"]).hexdigest() == doc["design"]["sha256"]
    assert hashlib.sha256(attached["rules.toml"]).hexdigest() == doc["ruleset"]["sha256"]


def test_baseline_option(tmp_path: Path) -> None:
    old = put(tmp_path, FAILING, "old.toml")
    new = put(tmp_path, FAILING.replace("k = 0.5", "k = 0.8"), "new.toml")
    assert main(["review", str(new), "--baseline", str(old), "--quiet", "--date",
                 "2025-05-05", "--json", str(tmp_path / "r.json")]) == 1
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    reg = next(f for f in doc["findings"] if f["rule"] == "regression.baseline")
    assert reg["status"] == "warn" and "worse" in reg["message"]
    assert doc["baseline"]["design"]["file"] == "old.toml"


def test_signed_review_and_wrong_passphrase(tmp_path: Path) -> None:
    from pypdf import PdfReader

    from loopwarden.signing.keys import make_key

    key = tmp_path / "k.p12"
    make_key(key, "Trial Reviewer", b"s3cret")
    (tmp_path / "pw.txt").write_text("s3cret\n", encoding="utf-8")
    (tmp_path / "bad.txt").write_text("guess\n", encoding="utf-8")
    design = put(tmp_path, PASSING)
    base = ["review", str(design), "--quiet", "--sign", str(key)]   # signed: dated today
    pdf = tmp_path / "signed.pdf"
    assert main([*base, "--passphrase-file", str(tmp_path / "bad.txt"), "--out", str(pdf),
                 "--json", str(tmp_path / "r.json")]) == 2
    assert not pdf.exists() and not (tmp_path / "r.json").exists()
    assert main([*base, "--passphrase-file", str(tmp_path / "pw.txt"), "--out", str(pdf),
                 "--json", str(tmp_path / "r.json")]) == 0
    fields = PdfReader(str(pdf)).get_fields() or {}
    assert any(f.get("/FT") == "/Sig" for f in fields.values())
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    assert doc["signer"] and "Trial Reviewer" in doc["signer"]


def test_waiver_for_an_unknown_rule_exits_2(tmp_path: Path, capsys) -> None:
    design = put(tmp_path, PASSING + """
        [[waivers]]
        rule = "margin.phse"
        reason = "typo"
        approved_by = "QA"
        expires = 2030-01-01
        """)
    assert main(["review", str(design), "--quiet", "--json", str(tmp_path / "r.json")]) == 2
    assert not (tmp_path / "r.json").exists()
    err = capsys.readouterr().err
    assert "waivers[1].rule" in err and "margin.phse" in err and "margin.phase" in err
