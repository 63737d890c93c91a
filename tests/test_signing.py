"""Keys, PAdES signing and verification: a signed review verifies; every tampering fails."""

from __future__ import annotations

import datetime as dt
import functools
import io
import os
import stat
from pathlib import Path

import pytest

import loopwarden
from loopwarden.errors import SigningError, UsageError
from loopwarden.report import renderer
from loopwarden.report.pdf import render_pdf
from loopwarden.signing.keys import (
    PASSPHRASE_ENV,
    make_key,
    read_passphrase,
    signer_name,
)
from loopwarden.signing.sign import sign_pdf
from loopwarden.signing.verify import verify_pdf

ROOT = Path(__file__).resolve().parents[1]
DESIGN = ROOT / "sample_designs" / "hoist_lag_tail.toml"
PASS = b"correct horse"
#: One signing time for the session: the review date of a signed review may lie at most
#: 3 days before it (issue 12), so the signed fixtures are dated on its day.
SIGNED_AT = dt.datetime.now(dt.UTC).replace(microsecond=0)
TODAY = SIGNED_AT.date().isoformat()


@pytest.fixture(scope="session")
def keys(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("keys")
    out = {}
    for who, name in (("alice", "Alice Reviewer"), ("mallory", "Mallory Other")):
        make_key(folder / f"{who}.p12", name, PASS)
        out[who] = folder / f"{who}.p12"
    return out


@functools.lru_cache(maxsize=1)
def _unsigned() -> tuple[bytes, str, str]:
    import dataclasses

    review = loopwarden.review(loopwarden.load_design(str(DESIGN)), today=TODAY)
    review = dataclasses.replace(review, run=dataclasses.replace(
        review.run, signer="Alice Reviewer", signed_at=SIGNED_AT.strftime("%Y-%m-%dT%H:%M:%SZ")))
    files = {"review.json": renderer("json").render(review),
             "design.toml": review.design.text.encode("utf-8"),
             "rules.toml": review.ruleset.text.encode("utf-8")}
    return render_pdf(review, embedded=files), review.ruleset.path, review.verdict


@pytest.fixture(scope="session")
def signed(keys: dict[str, Path], tmp_path_factory: pytest.TempPathFactory) -> Path:
    pdf, _, _ = _unsigned()
    path = tmp_path_factory.mktemp("signed") / "review.pdf"
    path.write_bytes(sign_pdf(pdf, keys["alice"], PASS, signing_time=SIGNED_AT))
    return path


def _write(tmp_path: Path, data: bytes, name: str = "tampered.pdf") -> Path:
    p = tmp_path / name
    p.write_bytes(data)
    return p


def _failed(report) -> set[str]:  # type: ignore[no-untyped-def]
    return {c.name for c in report.checks if not c.passed}


# --------------------------------------------------------------------------- keys
def test_make_key_writes_a_p256_signing_key_and_refuses_to_overwrite(tmp_path: Path) -> None:
    from cryptography import x509
    from cryptography.hazmat.primitives.asymmetric import ec

    cert_path = make_key(tmp_path / "k.p12", "Test Signer", None)
    assert cert_path == tmp_path / "k.pem"
    for p in (tmp_path / "k.p12", cert_path):
        assert stat.S_IMODE(os.stat(p).st_mode) == 0o600
    cert = x509.load_pem_x509_certificate(cert_path.read_bytes())
    assert isinstance(cert.public_key().curve, ec.SECP256R1)
    usage = cert.extensions.get_extension_for_class(x509.KeyUsage).value
    assert usage.digital_signature and usage.content_commitment and not usage.key_cert_sign
    assert cert.issuer == cert.subject                       # self-signed
    before = (tmp_path / "k.p12").read_bytes()
    with pytest.raises(UsageError, match="exists already"):
        make_key(tmp_path / "k.p12", "Someone Else", None)
    assert (tmp_path / "k.p12").read_bytes() == before
    assert signer_name(tmp_path / "k.p12", None) == "Test Signer"


def test_make_key_refuses_when_only_the_certificate_exists(tmp_path: Path) -> None:
    (tmp_path / "k.pem").write_text("keep me")
    with pytest.raises(UsageError):
        make_key(tmp_path / "k.p12", "X", None)
    assert not (tmp_path / "k.p12").exists()
    assert (tmp_path / "k.pem").read_text() == "keep me"


def test_read_passphrase_sources_in_order(tmp_path: Path) -> None:
    f = tmp_path / "pw"
    f.write_bytes(b"from file\r\nsecond line\n")
    env = {PASSPHRASE_ENV: "from env"}
    assert read_passphrase(f, environ=env, interactive=False) == b"from file"
    assert read_passphrase(None, environ=env, interactive=False) == b"from env"
    assert read_passphrase(None, environ={}, interactive=False) is None
    assert read_passphrase(None, environ={PASSPHRASE_ENV: ""}, interactive=False) is None
    with pytest.raises(UsageError):
        read_passphrase(tmp_path / "missing", environ={}, interactive=False)


def test_wrong_passphrase_is_a_signing_error(keys: dict[str, Path]) -> None:
    pdf, _, _ = _unsigned()
    with pytest.raises(SigningError, match="passphrase"):
        sign_pdf(pdf, keys["alice"], b"wrong")
    with pytest.raises(SigningError):
        sign_pdf(pdf, keys["alice"], None)


# --------------------------------------------------------------------------- verify
def test_signed_review_verifies(signed: Path, keys: dict[str, Path]) -> None:
    _, rules_path, verdict = _unsigned()
    report = verify_pdf(signed, trust=keys["alice"].with_suffix(".pem"), design=DESIGN,
                        rules=rules_path)
    assert report.ok, report.checks
    assert report.signer == "Alice Reviewer" and report.verdict == verdict
    names = {c.name for c in report.checks}
    assert {"exactly one signature", "signature intact", "trusted signer",
            "covers entire file", "embedded evidence", "embedded inputs match evidence",
            "design file matches", "rule-set file matches"} <= names


def test_flipped_byte_fails(signed: Path, keys: dict[str, Path], tmp_path: Path) -> None:
    data = bytearray(signed.read_bytes())
    i = data.index(b'"schema"')            # inside the embedded evidence, uncompressed
    data[i + 1] ^= 0x01
    report = verify_pdf(_write(tmp_path, bytes(data)), trust=keys["alice"].with_suffix(".pem"))
    assert not report.ok and "signature intact" in _failed(report)


def test_swapped_evidence_in_place_fails(signed: Path, keys: dict[str, Path],
                                          tmp_path: Path) -> None:
    # The hoist review fails; an edit of the same length turns the evidence into a pass.
    data = signed.read_bytes()
    assert data.count(b'"verdict": "fail"') == 1
    forged = data.replace(b'"verdict": "fail"', b'"verdict": "pass"')
    report = verify_pdf(_write(tmp_path, forged), trust=keys["alice"].with_suffix(".pem"))
    assert not report.ok and "signature intact" in _failed(report)


def test_appended_bytes_fail(signed: Path, keys: dict[str, Path], tmp_path: Path) -> None:
    path = _write(tmp_path, signed.read_bytes() + b"\n% appended after signing\n")
    report = verify_pdf(path, trust=keys["alice"].with_suffix(".pem"))
    assert _failed(report) == {"covers entire file"}
    assert not report.ok


def test_extra_incremental_update_fails(signed: Path, keys: dict[str, Path],
                                         tmp_path: Path) -> None:
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter

    writer = IncrementalPdfFileWriter(io.BytesIO(signed.read_bytes()))
    writer.add_object(generic.DictionaryObject({generic.NameObject("/Note"):
                                                generic.TextStringObject("added later")}))
    buf = io.BytesIO()
    writer.write(buf)
    report = verify_pdf(_write(tmp_path, buf.getvalue()), trust=keys["alice"].with_suffix(".pem"))
    assert "covers entire file" in _failed(report) and not report.ok


def test_evidence_swapped_by_incremental_update_fails(signed: Path, keys: dict[str, Path],
                                                      tmp_path: Path) -> None:
    # An attacker appends a new revision whose review.json says "pass".  Coverage fails,
    # and the evidence is still read from the signed revision (it still says "fail").
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter

    writer = IncrementalPdfFileWriter(io.BytesIO(signed.read_bytes()))
    names = writer.root["/Names"]["/EmbeddedFiles"]["/Names"]
    keys_ = [str(names[i]) for i in range(0, len(names), 2)]
    spec = names[keys_.index("review.json") * 2 + 1]
    forged = generic.StreamObject(stream_data=b'{"schema": "loopwarden-review/1", '
                                              b'"verdict": "pass"}')
    spec["/EF"] = generic.DictionaryObject({generic.NameObject("/F"):
                                            writer.add_object(forged)})
    writer.update_container(spec)
    buf = io.BytesIO()
    writer.write(buf)
    report = verify_pdf(_write(tmp_path, buf.getvalue()), trust=keys["alice"].with_suffix(".pem"))
    assert "covers entire file" in _failed(report) and not report.ok
    assert report.verdict == "fail"


def test_wrong_trust_certificate_fails(signed: Path, keys: dict[str, Path]) -> None:
    report = verify_pdf(signed, trust=keys["mallory"].with_suffix(".pem"))
    assert _failed(report) == {"trusted signer"} and not report.ok


def test_no_trust_anchor_fails_with_a_clear_reason(signed: Path) -> None:
    report = verify_pdf(signed)
    failed = [c for c in report.checks if not c.passed]
    assert [c.name for c in failed] == ["trusted signer"] and not report.ok
    assert "no trust anchor given" in failed[0].detail


def test_mismatching_design_file_fails(signed: Path, keys: dict[str, Path],
                                       tmp_path: Path) -> None:
    other = tmp_path / "design.toml"
    other.write_bytes(DESIGN.read_bytes() + b"\n# edited after the review\n")
    report = verify_pdf(signed, trust=keys["alice"].with_suffix(".pem"), design=other)
    assert _failed(report) == {"design file matches"} and not report.ok


def test_unsigned_and_twice_signed_fail(keys: dict[str, Path], tmp_path: Path) -> None:
    pdf, _, _ = _unsigned()
    trust = keys["alice"].with_suffix(".pem")
    report = verify_pdf(_write(tmp_path, pdf, "unsigned.pdf"), trust=trust)
    assert not report.ok and "exactly one signature" in _failed(report)
    once = sign_pdf(pdf, keys["alice"], PASS)
    with pytest.raises(SigningError, match="filled already"):
        sign_pdf(once, keys["alice"], PASS)           # loopwarden refuses to sign twice
    # A second signature in another field, made with pyHanko directly, must not pass.
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.sign import signers

    signer = signers.SimpleSigner.load_pkcs12_data(keys["alice"].read_bytes(), (), PASS)
    out = signers.sign_pdf(IncrementalPdfFileWriter(io.BytesIO(once)),
                           signers.PdfSignatureMetadata(field_name="second"), signer=signer)
    report = verify_pdf(_write(tmp_path, out.getvalue(), "twice.pdf"), trust=trust)
    assert not report.ok and "exactly one signature" in _failed(report)


def test_unreadable_input_is_a_usage_error(signed: Path, tmp_path: Path) -> None:
    with pytest.raises(UsageError):
        verify_pdf(tmp_path / "missing.pdf")
    with pytest.raises(UsageError, match="not a PDF"):
        verify_pdf(_write(tmp_path, b"hello", "x.pdf"))
    with pytest.raises(UsageError, match="certificate"):
        verify_pdf(signed, trust=_write(tmp_path, b"not a cert", "t.pem"))


def test_damaged_pdf_is_a_failed_check_not_a_pass(tmp_path: Path) -> None:
    report = verify_pdf(_write(tmp_path, b"%PDF-1.4\n garbage without structure\n"))
    assert not report.ok and report.checks and not report.checks[0].passed


@pytest.mark.parametrize("evidence", [b'{"schema": "loopwarden-review/1", "design": "x"}',
                                      b'{"schema": "other/2"}', b"not json", None])
def test_bad_evidence_in_a_validly_signed_file_fails(evidence: bytes | None,
                                                     keys: dict[str, Path],
                                                     tmp_path: Path) -> None:
    # The signature is fine; what it covers is not a loopwarden review.
    import loopwarden as lw

    review = lw.review(lw.load_design(str(DESIGN)), today="2026-01-15")
    files = {"design.toml": review.design.text.encode("utf-8")}
    if evidence is not None:
        files["review.json"] = evidence
    pdf = sign_pdf(render_pdf(review, embedded=files), keys["alice"], PASS)
    report = verify_pdf(_write(tmp_path, pdf), trust=keys["alice"].with_suffix(".pem"))
    assert not report.ok
    assert _failed(report) & {"embedded evidence", "evidence content",
                              "embedded inputs match evidence"}


def _ca_issued_key(folder: Path) -> tuple[Path, Path]:
    """An organisation-style key: an end-entity certificate issued by a CA (the CA's
    certificate is the trust anchor; the PKCS#12 file carries the chain)."""
    import datetime as dt

    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.hazmat.primitives.serialization import pkcs12
    from cryptography.x509.oid import NameOID

    now = dt.datetime.now(dt.UTC)
    ca_key = ec.generate_private_key(ec.SECP256R1())
    ca_name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "Example Works Signing CA")])
    ca = (x509.CertificateBuilder().subject_name(ca_name).issuer_name(ca_name)
          .public_key(ca_key.public_key()).serial_number(x509.random_serial_number())
          .not_valid_before(now - dt.timedelta(days=1))
          .not_valid_after(now + dt.timedelta(days=30))
          .add_extension(x509.BasicConstraints(ca=True, path_length=0), critical=True)
          .add_extension(x509.KeyUsage(digital_signature=False, content_commitment=False,
                                       key_encipherment=False, data_encipherment=False,
                                       key_agreement=False, key_cert_sign=True, crl_sign=True,
                                       encipher_only=False, decipher_only=False), critical=True)
          .sign(ca_key, hashes.SHA256()))
    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "Release Engineer")])
    cert = (x509.CertificateBuilder().subject_name(name).issuer_name(ca_name)
            .public_key(key.public_key()).serial_number(x509.random_serial_number())
            .not_valid_before(now - dt.timedelta(days=1))
            .not_valid_after(now + dt.timedelta(days=30))
            .add_extension(x509.KeyUsage(digital_signature=True, content_commitment=True,
                                         key_encipherment=False, data_encipherment=False,
                                         key_agreement=False, key_cert_sign=False,
                                         crl_sign=False, encipher_only=False,
                                         decipher_only=False), critical=True)
            .sign(ca_key, hashes.SHA256()))
    p12 = folder / "release.p12"
    p12.write_bytes(pkcs12.serialize_key_and_certificates(
        b"release", key, cert, [ca], serialization.NoEncryption()))
    ca_pem = folder / "ca.pem"
    ca_pem.write_bytes(ca.public_bytes(serialization.Encoding.PEM))
    return p12, ca_pem


def test_key_issued_by_a_ca_verifies_against_the_ca(keys: dict[str, Path],
                                                    tmp_path: Path) -> None:
    # The release path: the organisation's CA certificate is the trust anchor.
    p12, ca_pem = _ca_issued_key(tmp_path)
    pdf, _, _ = _unsigned()
    path = _write(tmp_path, sign_pdf(pdf, p12, None, signing_time=SIGNED_AT), "release.pdf")
    report = verify_pdf(path, trust=ca_pem)
    # The evidence names the trial signer (Alice); everything else must pass.
    assert _failed(report) == {"signer named in evidence"}
    assert report.signer == "Release Engineer"
    assert _failed(verify_pdf(path, trust=keys["alice"].with_suffix(".pem"))) >= {
        "trusted signer"}


# --------------------------------------------------------------------------- measured plants
SPINDLE = ROOT / "sample_designs" / "spindle_sweep.toml"


@pytest.fixture(scope="session")
def spindle_signed(keys: dict[str, Path], tmp_path_factory: pytest.TempPathFactory
                   ) -> dict[str, Path]:
    """A signed spindle review made by the review command, and a copy of its inputs."""
    import shutil

    from loopwarden.cli import main

    folder = tmp_path_factory.mktemp("spindle")
    inputs = folder / "inputs"
    inputs.mkdir()
    for name in ("spindle_sweep.toml", "spindle_sweep.csv"):
        shutil.copy(SPINDLE.parent / name, inputs / name)
    pw = folder / "pw.txt"
    pw.write_bytes(PASS + b"\n")
    pdf = folder / "review.pdf"
    code = main(["review", str(inputs / "spindle_sweep.toml"), "--out", str(pdf), "--sign",
                 str(keys["alice"]), "--passphrase-file", str(pw), "--quiet"])
    assert code == 0
    return {"pdf": pdf, "design": inputs / "spindle_sweep.toml",
            "csv": inputs / "spindle_sweep.csv", "trust": keys["alice"].with_suffix(".pem")}


def test_measured_review_verifies_with_its_csv(spindle_signed: dict[str, Path]) -> None:
    s = spindle_signed
    report = verify_pdf(s["pdf"], trust=s["trust"], design=s["design"])
    assert report.ok, report.checks
    checks = {c.name: c for c in report.checks}
    assert "plant-nominal.csv" in checks["embedded inputs match evidence"].detail
    assert checks["measured-plant files match"].passed
    assert "spindle_sweep.csv" in checks["measured-plant files match"].detail


def test_changed_csv_on_disk_fails(spindle_signed: dict[str, Path], tmp_path: Path) -> None:
    import shutil

    s = spindle_signed
    design = tmp_path / "spindle_sweep.toml"
    shutil.copy(s["design"], design)
    data = s["csv"].read_bytes()
    # One measured magnitude changed in its last digit: same design file, other sweep.
    lines = data.decode().splitlines(keepends=True)
    row = next(i for i, line in enumerate(lines) if line[:1].isdigit())
    cells = lines[row].rstrip("\n").split(",")
    cells[1] = cells[1][:-1] + ("1" if cells[1][-1] != "1" else "2")
    lines[row] = ",".join(cells) + "\n"
    (tmp_path / "spindle_sweep.csv").write_text("".join(lines), encoding="utf-8")
    report = verify_pdf(s["pdf"], trust=s["trust"], design=design)
    assert _failed(report) == {"measured-plant files match"} and not report.ok
    (tmp_path / "spindle_sweep.csv").unlink()
    report = verify_pdf(s["pdf"], trust=s["trust"], design=design)
    assert _failed(report) == {"measured-plant files match"}
    assert "cannot read spindle_sweep.csv" in next(
        c.detail for c in report.checks if not c.passed)


def test_csv_named_outside_the_design_folder_is_refused(spindle_signed: dict[str, Path],
                                                         tmp_path: Path) -> None:
    # A design that names ../spindle_sweep.csv: verify must not read outside its folder
    # (the review refuses such a path too), so the check fails even though the file exists.
    s = spindle_signed
    inner = tmp_path / "inner"
    inner.mkdir()
    (tmp_path / "spindle_sweep.csv").write_bytes(s["csv"].read_bytes())
    text = s["design"].read_text(encoding="utf-8").replace('file = "spindle_sweep.csv"',
                                                           'file = "../spindle_sweep.csv"')
    (inner / "d.toml").write_text(text, encoding="utf-8")
    report = verify_pdf(s["pdf"], trust=s["trust"], design=inner / "d.toml")
    assert {"design file matches", "measured-plant files match"} <= _failed(report)
    assert "outside the design file's folder" in next(
        c.detail for c in report.checks if c.name == "measured-plant files match")


def test_embedded_csv_that_does_not_match_the_evidence_fails(keys: dict[str, Path],
                                                             tmp_path: Path) -> None:
    # Signed by the rightful key, but the embedded sweep is not the one the evidence hashes.
    review = loopwarden.review(loopwarden.load_design(str(SPINDLE)), today="2026-01-15")
    files = {"review.json": renderer("json").render(review),
             "design.toml": review.design.text.encode("utf-8"),
             "rules.toml": review.ruleset.text.encode("utf-8"),
             "plant-nominal.csv": b"frequency,magnitude,phase\n1,0,0\n"}
    path = _write(tmp_path, sign_pdf(render_pdf(review, embedded=files), keys["alice"], PASS))
    report = verify_pdf(path, trust=keys["alice"].with_suffix(".pem"))
    assert "embedded inputs match evidence" in _failed(report)
    assert "plant-nominal.csv hashes to" in next(
        c.detail for c in report.checks if c.name == "embedded inputs match evidence")
    del files["plant-nominal.csv"]
    path = _write(tmp_path, sign_pdf(render_pdf(review, embedded=files), keys["alice"], PASS),
                  "missing.pdf")
    report = verify_pdf(path, trust=keys["alice"].with_suffix(".pem"))
    assert "plant-nominal.csv is not embedded" in next(
        c.detail for c in report.checks if c.name == "embedded inputs match evidence")


def test_plant_attachment_names_are_safe_and_distinct() -> None:
    from loopwarden.signing.verify import plant_attachment_names

    names = plant_attachment_names(["nominal", "heavy load", "heavy/load", "../x", "ü"])
    assert names["nominal"] == "plant-nominal.csv"
    assert names["heavy load"] == "plant-heavy-load.csv"
    assert names["heavy/load"] == "plant-heavy-load-2.csv"
    assert names["../x"] == "plant-x.csv" and names["ü"] == "plant-variant.csv"
    assert len(set(names.values())) == len(names)


# --------------------------------------------------------------------------- evidence (issue 12)
def _render_dated(date: dt.date, signed_at: dt.datetime) -> bytes:
    """The hoist review dated ``date``, its evidence recording ``signed_at``."""
    import dataclasses

    from loopwarden.signing.review_age import signing_time_text

    review = loopwarden.review(loopwarden.load_design(str(DESIGN)), today=date.isoformat())
    review = dataclasses.replace(review, run=dataclasses.replace(
        review.run, signer="Alice Reviewer", signed_at=signing_time_text(signed_at)))
    files = {"review.json": renderer("json").render(review),
             "design.toml": review.design.text.encode("utf-8"),
             "rules.toml": review.ruleset.text.encode("utf-8")}
    return render_pdf(review, embedded=files)


def _check(report, name: str):  # type: ignore[no-untyped-def]
    return next(c for c in report.checks if c.name == name)


def test_verify_reports_review_date_and_signing_time(signed: Path,
                                                     keys: dict[str, Path]) -> None:
    report = verify_pdf(signed, trust=keys["alice"].with_suffix(".pem"))
    assert report.ok
    assert report.review_date == TODAY
    assert report.signed_at == SIGNED_AT.strftime("%Y-%m-%dT%H:%M:%SZ")
    assert _check(report, "signing time recorded").passed
    assert _check(report, "review date and signing time").passed
    assert _check(report, "signature padding").passed


@pytest.mark.parametrize(("days_before", "ok"), [(0, True), (3, True), (4, False),
                                                 (-2, False)])
def test_review_date_must_lie_within_3_days_before_signing(days_before: int, ok: bool,
                                                           keys: dict[str, Path],
                                                           tmp_path: Path) -> None:
    # The signing time is set 12:00 UTC on a fixed day, so the day arithmetic is exact
    # [derived: MAX_REVIEW_AGE_DAYS = 3; a date begins first at UTC+14].
    signed_at = dt.datetime(2026, 6, 10, 12, 0, 0, tzinfo=dt.UTC)
    date = signed_at.date() - dt.timedelta(days=days_before)
    pdf = sign_pdf(_render_dated(date, signed_at), keys["alice"], PASS, signing_time=signed_at)
    report = verify_pdf(_write(tmp_path, pdf), trust=keys["alice"].with_suffix(".pem"))
    check = _check(report, "review date and signing time")
    assert check.passed is ok and report.ok is ok, check.detail
    assert _check(report, "signing time recorded").passed
    if not ok:
        assert ("after the signing time" if days_before < 0 else "at most 3") in check.detail


def test_review_date_rule_at_its_edges() -> None:
    from loopwarden.signing.review_age import review_date_problem

    noon = dt.datetime(2026, 6, 10, 12, 0, 0, tzinfo=dt.UTC)
    assert review_date_problem(dt.date(2026, 6, 7), noon) is None            # 3 days
    assert "4 days" in review_date_problem(dt.date(2026, 6, 6), noon)
    # 2026-06-11 begins at UTC+14 on 2026-06-10 10:00 UTC: already begun at noon UTC
    assert review_date_problem(dt.date(2026, 6, 11), noon) is None
    early = dt.datetime(2026, 6, 10, 9, 59, 0, tzinfo=dt.UTC)
    assert "after the signing time" in review_date_problem(dt.date(2026, 6, 11), early)
    assert "after" in review_date_problem(dt.date(2026, 6, 12), noon)


def test_evidence_signing_time_must_match_the_signature(keys: dict[str, Path],
                                                        tmp_path: Path) -> None:
    pdf, _, _ = _unsigned()        # records SIGNED_AT; signed an hour later
    later = SIGNED_AT + dt.timedelta(hours=1)
    report = verify_pdf(_write(tmp_path, sign_pdf(pdf, keys["alice"], PASS,
                                                  signing_time=later)),
                        trust=keys["alice"].with_suffix(".pem"))
    assert _failed(report) == {"signing time recorded"} and not report.ok


def test_evidence_without_signing_time_fails(keys: dict[str, Path], tmp_path: Path) -> None:
    import dataclasses

    review = loopwarden.review(loopwarden.load_design(str(DESIGN)), today=TODAY)
    review = dataclasses.replace(review, run=dataclasses.replace(review.run,
                                                                 signer="Alice Reviewer"))
    files = {"review.json": renderer("json").render(review),
             "design.toml": review.design.text.encode("utf-8"),
             "rules.toml": review.ruleset.text.encode("utf-8")}
    pdf = sign_pdf(render_pdf(review, embedded=files), keys["alice"], PASS,
                   signing_time=SIGNED_AT)
    report = verify_pdf(_write(tmp_path, pdf), trust=keys["alice"].with_suffix(".pem"))
    assert _failed(report) == {"signing time recorded"}


def _contents_gap(data: bytes) -> tuple[int, int]:
    """Start and end of the unsigned gap (the /Contents hex string) of a signed file."""
    import re

    m = re.search(rb"/ByteRange\s*\[\s*(\d+)\s+(\d+)\s+(\d+)\s+(\d+)\s*\]", data)
    assert m is not None
    a, b, c, _d = (int(x) for x in m.groups())
    return a + b, c


def test_nonzero_byte_in_the_signature_padding_fails(signed: Path, keys: dict[str, Path],
                                                     tmp_path: Path) -> None:
    data = bytearray(signed.read_bytes())
    start, end = _contents_gap(bytes(data))
    assert data[start:start + 1] == b"<" and data[end - 1:end] == b">"
    # The padding is the zeros at the end of the hex string; outside the signed range,
    # so the signature itself stays intact.
    assert data[end - 11:end - 1] == b"0" * 10
    data[end - 5] = ord("7")
    report = verify_pdf(_write(tmp_path, bytes(data)), trust=keys["alice"].with_suffix(".pem"))
    assert _failed(report) == {"signature padding"} and not report.ok
    assert "non-zero" in _check(report, "signature padding").detail
    # A non-hex character there fails too (pyHanko cannot even parse the file then).
    data[end - 5] = ord("g")
    report = verify_pdf(_write(tmp_path, bytes(data), "hex.pdf"),
                        trust=keys["alice"].with_suffix(".pem"))
    assert not report.ok and _failed(report) & {"readable PDF", "signature padding"}


def test_passphrase_with_nul_or_invalid_utf8_is_a_usage_error(tmp_path: Path) -> None:
    for i, bad in enumerate((b"pass\x00word\n", b"\xff\xfe secret\n")):
        f = tmp_path / f"pw{i}"
        f.write_bytes(bad)
        f.chmod(0o600)
        with pytest.raises(UsageError, match="NUL byte|not valid UTF-8"):
            read_passphrase(f, environ={}, interactive=False)
    # from the environment: non-UTF-8 bytes arrive as lone surrogates
    with pytest.raises(UsageError, match="not valid UTF-8"):
        read_passphrase(None, environ={PASSPHRASE_ENV: "\udcff\udcfe"}, interactive=False)
    with pytest.raises(UsageError, match="NUL"):
        make_key(tmp_path / "k.p12", "X", b"a\x00b")
    assert not (tmp_path / "k.p12").exists()


def test_passphrase_file_readable_by_others_draws_a_warning(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    f = tmp_path / "pw"
    f.write_bytes(b"secret\n")
    f.chmod(0o644)
    assert read_passphrase(f, environ={}, interactive=False) == b"secret"
    assert "readable by others" in capsys.readouterr().err
    f.chmod(0o600)
    assert read_passphrase(f, environ={}, interactive=False) == b"secret"
    assert capsys.readouterr().err == ""
