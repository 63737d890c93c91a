"""``loopwarden keygen`` and ``loopwarden verify`` through main([...])."""

from __future__ import annotations

from pathlib import Path

import pytest

from loopwarden.cli import main

ROOT = Path(__file__).resolve().parents[1]
DESIGN = ROOT / "sample_designs" / "hoist_lag_tail.toml"
RULES = ROOT / "rules" / "general.toml"


@pytest.fixture(scope="module")
def signed(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, Path]:
    folder = tmp_path_factory.mktemp("cli")
    mp = pytest.MonkeyPatch()
    mp.setenv("LOOPWARDEN_KEY_PASSPHRASE", "cli trial")
    try:
        assert main(["keygen", "--out", str(folder / "k.p12"), "--name", "CLI Signer"]) == 0
        assert main(["keygen", "--out", str(folder / "other.p12"), "--name", "Other"]) == 0
        rc = main(["review", str(DESIGN), "--out", str(folder / "r.pdf"), "--sign",
                   str(folder / "k.p12"), "--quiet"])   # dated today: it is signed
        assert rc == 1                      # the hoist design fails its settling rule
    finally:
        mp.undo()
    return folder / "r.pdf", folder / "k.pem", folder / "other.pem"


def test_keygen_says_releases_need_the_organisations_certificates(
        tmp_path: Path, capsys: pytest.CaptureFixture[str],
        monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("LOOPWARDEN_KEY_PASSPHRASE", "x")
    assert main(["keygen", "--out", str(tmp_path / "a.p12"), "--name", "A"]) == 0
    out = capsys.readouterr().out
    assert "organisation's own certificates" in out and "a.pem" in out
    # Never overwrite: the second run is bad input and leaves the files alone.
    before = (tmp_path / "a.p12").read_bytes()
    assert main(["keygen", "--out", str(tmp_path / "a.p12"), "--name", "B"]) == 2
    assert (tmp_path / "a.p12").read_bytes() == before


def test_keygen_has_no_passphrase_option(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["keygen", "--out", "k.p12", "--name", "A", "--passphrase", "x"]) == 2
    assert main(["keygen", "--help"]) == 0
    assert "passphrase-file" in capsys.readouterr().out


def test_verify_passes_with_trust_and_inputs(signed: tuple[Path, Path, Path],
                                             capsys: pytest.CaptureFixture[str]) -> None:
    pdf, cert, _ = signed
    rc = main(["verify", str(pdf), "--trust", str(cert), "--design", str(DESIGN),
               "--rules", str(RULES)])
    out = capsys.readouterr().out
    assert rc == 0, out
    assert "verified:" in out and "CLI Signer" in out and "FAIL" not in out


@pytest.mark.parametrize("case", ["no-trust", "wrong-trust", "other-design", "appended"])
def test_verify_fails_with_exit_1(case: str, signed: tuple[Path, Path, Path], tmp_path: Path,
                                  capsys: pytest.CaptureFixture[str]) -> None:
    pdf, cert, other = signed
    args = ["verify", str(pdf), "--trust", str(cert)]
    if case == "no-trust":
        args = ["verify", str(pdf)]
    elif case == "wrong-trust":
        args[-1] = str(other)
    elif case == "other-design":
        args += ["--design", str(ROOT / "sample_designs" / "tank_level.toml")]
    else:
        bad = tmp_path / "r.pdf"
        bad.write_bytes(pdf.read_bytes() + b"%%EOF\n")
        args[1] = str(bad)
    assert main(args) == 1
    out = capsys.readouterr().out
    assert "NOT verified" in out and "FAIL" in out


def test_verify_unreadable_input_exits_2(tmp_path: Path, signed: tuple[Path, Path, Path],
                                         capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["verify", str(tmp_path / "missing.pdf")]) == 2
    (tmp_path / "x.pdf").write_text("not a pdf")
    assert main(["verify", str(tmp_path / "x.pdf")]) == 2
    assert main(["verify", str(signed[0]), "--trust", str(tmp_path / "none.pem")]) == 2
    assert "error" in capsys.readouterr().err


# --------------------------------------------------------------------------- issue 12
def test_verify_prints_review_date_and_signing_time(signed: tuple[Path, Path, Path],
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    import datetime as dt

    pdf, cert, _ = signed
    assert main(["verify", str(pdf), "--trust", str(cert)]) == 0
    out = capsys.readouterr().out
    today = dt.datetime.now(dt.UTC).date()
    date_line = next(line for line in out.splitlines() if "review date:" in line)
    time_line = next(line for line in out.splitlines() if "signing time:" in line)
    # signed moments ago, dated today (UTC) by default
    assert date_line.split()[-1] in {today.isoformat(),
                                     (today - dt.timedelta(days=1)).isoformat()}
    assert time_line.split()[-1].endswith("Z")
    assert "ok   review date and signing time" in out


@pytest.mark.parametrize("days", [4, 30, -3])
def test_signed_review_with_a_date_too_far_back_or_ahead_is_refused(
        days: int, tmp_path: Path, signed: tuple[Path, Path, Path],
        capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    import datetime as dt

    monkeypatch.setenv("LOOPWARDEN_KEY_PASSPHRASE", "cli trial")
    key = signed[1].with_suffix(".p12")
    date = (dt.datetime.now(dt.UTC).date() - dt.timedelta(days=days)).isoformat()
    out = tmp_path / "r.pdf"
    assert main(["review", str(DESIGN), "--out", str(out), "--json", str(tmp_path / "r.json"),
                 "--sign", str(key), "--date", date, "--quiet"]) == 2
    assert list(tmp_path.iterdir()) == []
    err = capsys.readouterr().err
    assert f"--date {date}" in err and ("at most 3" in err or "after the signing" in err)
    # unsigned, the same date is fine (a working copy; nothing claims it as evidence)
    assert main(["review", str(DESIGN), "--json", str(tmp_path / "r.json"), "--date", date,
                 "--quiet"]) == 1


def test_verify_baseline_checks_the_embedded_baseline(tmp_path: Path,
                                                      signed: tuple[Path, Path, Path],
                                                      capsys: pytest.CaptureFixture[str],
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("LOOPWARDEN_KEY_PASSPHRASE", "cli trial")
    _, cert, _ = signed
    key = cert.with_suffix(".p12")
    base = ROOT / "sample_designs" / "tank_level.toml"
    pdf = tmp_path / "r.pdf"
    rc = main(["review", str(DESIGN), "--baseline", str(base), "--out", str(pdf), "--sign",
               str(key), "--quiet"])
    assert rc in (0, 1)
    assert main(["verify", str(pdf), "--trust", str(cert), "--baseline", str(base),
                 "--quiet"]) == 0
    other = tmp_path / "other.toml"
    other.write_bytes(base.read_bytes() + b"\n# edited after the review\n")
    capsys.readouterr()
    assert main(["verify", str(pdf), "--trust", str(cert), "--baseline", str(other)]) == 1
    out = capsys.readouterr().out
    assert "FAIL baseline file matches" in out and "ok   embedded inputs match" in out
    assert "baseline.toml" in out
    # a review made without a baseline fails --baseline
    assert main(["verify", str(signed[0]), "--trust", str(cert), "--baseline",
                 str(base)]) == 1
    assert "made without a baseline" in capsys.readouterr().out


@pytest.mark.parametrize("content", [b"pass\x00word\n", b"\xff\xfe\n"])
def test_bad_passphrase_bytes_exit_2(content: bytes, tmp_path: Path,
                                     signed: tuple[Path, Path, Path],
                                     capsys: pytest.CaptureFixture[str]) -> None:
    pw = tmp_path / "pw.txt"
    pw.write_bytes(content)
    pw.chmod(0o600)
    assert main(["keygen", "--out", str(tmp_path / "k.p12"), "--name", "A",
                 "--passphrase-file", str(pw)]) == 2
    assert not (tmp_path / "k.p12").exists() and not (tmp_path / "k.pem").exists()
    key = signed[1].with_suffix(".p12")
    assert main(["review", str(DESIGN), "--out", str(tmp_path / "r.pdf"), "--sign", str(key),
                 "--passphrase-file", str(pw), "--quiet"]) == 2
    assert not (tmp_path / "r.pdf").exists()
    err = capsys.readouterr().err
    assert "Traceback" not in err and ("NUL byte" in err or "not valid UTF-8" in err)


def test_keygen_never_writes_over_its_passphrase_file(tmp_path: Path) -> None:
    pw = tmp_path / "k.pem"
    pw.write_bytes(b"secret\n")
    pw.chmod(0o600)
    assert main(["keygen", "--out", str(tmp_path / "k.p12"), "--name", "A",
                 "--passphrase-file", str(pw)]) == 2
    assert pw.read_bytes() == b"secret\n" and not (tmp_path / "k.p12").exists()


def test_signed_pdf_records_review_date_and_signing_time(signed: tuple[Path, Path, Path]
                                                         ) -> None:
    import json

    from pypdf import PdfReader

    from loopwarden.signing.verify import embedded_files

    pdf, _, _ = signed
    reader = PdfReader(str(pdf))
    cover = reader.pages[0].extract_text()
    assert "Review date" in cover and "Signing time" in cover and "UTC" in cover
    from pyhanko.pdf_utils.reader import PdfFileReader

    with pdf.open("rb") as fh:
        doc = json.loads(embedded_files(PdfFileReader(fh, strict=False))["review.json"])
    assert doc["signer"] == "CLI Signer"
    assert doc["signed_at"].endswith("Z") and doc["signed_at"][:10] >= doc["date"]
