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
