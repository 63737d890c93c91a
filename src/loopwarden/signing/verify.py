"""Verification of a signed PDF review.

A review verifies only when every check passes:

1. the file is a readable PDF with **exactly one** signature, in PAdES form;
2. the signature is **intact** (the signed bytes hash to the signed digest and the
   signature value checks out against the signing certificate);
3. the signer is **trusted**: the signing certificate chains to the ``--trust``
   certificate.  Without ``--trust`` this check fails ("no trust anchor given"): a
   signature anyone could have made with a fresh key proves nothing;
4. the signature **covers the entire file**: the signed revision is the last one and no
   byte follows the signed range (appended bytes or another incremental update fail);
5. the embedded evidence, read **from the signed revision**, is a ``loopwarden-review/1``
   JSON document, and the embedded design, rule-set and measured-plant files (the
   frequency-response CSVs, ``plant-<variant>.csv``) hash to what it records;
6. when given, the design, baseline and rule-set files on disk hash to what the evidence
   records, and so do the measured-plant CSV files the design names (read relative to the
   design file, inside its folder tree, as the review read them);
7. the bytes outside the signed range are exactly the signature: the ``/Contents`` hex
   string holds the DER-encoded CMS signature followed by zeros only (nothing can be
   hidden in its padding);
8. the review date and the signing time agree: the evidence records the signing time
   (``signed_at``) the signature carries, and the review date lies neither after it nor
   more than :data:`~loopwarden.signing.review_age.MAX_REVIEW_AGE_DAYS` days before it.

Any exception inside a check makes that check fail; nothing passes by default.
Unreadable input (a missing file, not a PDF at all, a trust file that holds no
certificate) raises :class:`~loopwarden.errors.UsageError` instead (exit status 2).
"""

from __future__ import annotations

import io
from pathlib import Path
from typing import Any

from ..errors import UsageError
from .verify_common import (  # noqa: F401  (re-exported: the old import path stays valid)
    _PADES,
    SCHEMA,
    Check,
    VerifyReport,
    _der_length,
    _obj,
    _padding,
    _quiet,
    _read,
    _sha,
    _short,
    _trust_root,
    embedded_files,
    plant_attachment_names,
)
from .verify_evidence import (  # noqa: F401  (re-exported: the old import path stays valid)
    _consistency,
    _dates,
    _evidence,
    _measured_on_disk,
    _measured_plants,
    _named_csv_files,
    _table,
)

__all__ = ["Check", "VerifyReport", "verify_pdf", "SCHEMA", "plant_attachment_names"]


def verify_pdf(path: Path | str, *, trust: Path | str | None = None,
               design: Path | str | None = None,
               rules: Path | str | None = None,
               baseline: Path | str | None = None) -> VerifyReport:
    """Check a signed review; see the module docstring for what must hold.

    Parameters
    ----------
    path : Path or str
        The signed PDF.
    trust : Path or str, optional
        Certificate (PEM or DER) the signing certificate must chain to.
    design, rules, baseline : Path or str, optional
        Input files that must hash to ``design.sha256`` / ``ruleset.sha256`` /
        ``baseline.design.sha256`` of the embedded evidence.

    Raises
    ------
    UsageError
        An input cannot be read at all (exit status 2).
    """
    data = _read(path, "PDF")
    if not data.lstrip()[:5] == b"%PDF-":
        raise UsageError("not a PDF file", file=str(path))
    roots = _trust_root(trust) if trust is not None else None
    design_bytes = _read(design, "design file") if design is not None else None
    rules_bytes = _read(rules, "rule-set file") if rules is not None else None
    baseline_bytes = _read(baseline, "baseline file") if baseline is not None else None
    with _quiet():
        return _verify(data, roots, trust, design_bytes, rules_bytes,
                       Path(design) if design is not None else None, baseline_bytes)


def _verify(data: bytes, roots: list[Any] | None, trust: Path | str | None,
            design_bytes: bytes | None, rules_bytes: bytes | None,
            design_path: Path | None = None,
            baseline_bytes: bytes | None = None) -> VerifyReport:
    checks: list[Check] = []
    signer: str | None = None
    verdict: str | None = None
    review_date: str | None = None
    signed_at: str | None = None

    def done(complete: bool = False) -> VerifyReport:
        ok = complete and bool(checks) and all(c.passed for c in checks)
        return VerifyReport(ok=ok, checks=tuple(checks), signer=signer, verdict=verdict,
                            review_date=review_date, signed_at=signed_at)

    # 1. structure and signature count
    try:
        from pyhanko.pdf_utils.reader import PdfFileReader

        reader = PdfFileReader(io.BytesIO(data), strict=False)
        sigs = list(reader.embedded_signatures)
        revisions = reader.xrefs.total_revisions
    except Exception as exc:  # noqa: BLE001 - a damaged file is a failed check
        checks.append(Check("readable PDF", False, f"cannot parse the file: "
                                                   f"{type(exc).__name__}: {exc}"))
        return done()
    checks.append(Check("readable PDF", True, f"{revisions} revision(s)"))
    if len(sigs) != 1:
        checks.append(Check("exactly one signature", False,
                            "the file is not signed" if not sigs else
                            f"{len(sigs)} signatures; a review carries exactly one"))
        return done()
    sig = sigs[0]
    checks.append(Check("exactly one signature", True, f"field {sig.field_name!r}"))

    # 2. and 3. integrity, form and trust
    try:
        from pyhanko.sign.validation import validate_pdf_signature
        from pyhanko_certvalidator import ValidationContext

        vc = ValidationContext(trust_roots=roots or [], allow_fetching=False)
        status = validate_pdf_signature(sig, vc)
    except Exception as exc:  # noqa: BLE001
        checks.append(Check("signature intact", False,
                            f"cannot validate the signature: {type(exc).__name__}: {exc}"))
        return done()
    signer = _signature_checks(sig, status, roots, trust, checks)
    _coverage_checks(data, sig, status, revisions, checks)
    signing_time = None
    try:
        from .review_age import signing_time_text

        signing_time = status.signer_reported_dt or sig.self_reported_timestamp
        signed_at = signing_time_text(signing_time) if signing_time is not None else None
    except Exception:  # noqa: BLE001 - judged below as "no signing time"
        signing_time = None

    # 5. evidence from the signed revision
    try:
        files = embedded_files(reader.get_historical_resolver(sig.signed_revision))
    except Exception as exc:  # noqa: BLE001
        checks.append(Check("embedded evidence", False,
                            f"cannot read the embedded files of the signed revision: "
                            f"{type(exc).__name__}: {exc}"))
        return done()
    evidence = _evidence(files, checks)
    if evidence is None:
        return done()
    try:
        verdict = str(evidence.get("verdict"))
        review_date = str(evidence.get("date"))
        _consistency(files, evidence, checks)
        _dates(evidence, signing_time, checks)
        named = evidence.get("signer")
        if named is not None:
            checks.append(Check("signer named in evidence", str(named) == signer,
                                f"evidence names {named!r}; certificate subject {signer!r}"))
        _input_checks(evidence, design_bytes, rules_bytes, design_path, baseline_bytes,
                      checks)
    except Exception as exc:  # noqa: BLE001 - malformed evidence is a failure, not a crash
        checks.append(Check("evidence content", False,
                            f"the evidence is malformed: {type(exc).__name__}: {exc}"))
        return done()
    return done(complete=True)


def _signature_checks(sig: Any, status: Any, roots: list[Any] | None,
                      trust: Path | str | None, checks: list[Check]) -> str | None:
    """Steps 2 and 3: integrity, PAdES form and trust; returns the signer's name."""
    try:
        subject = status.signing_cert.subject
        signer = str(subject.native.get("common_name") or subject.human_friendly)
    except Exception:  # noqa: BLE001 - the name is for the report only
        signer = None
    if status.intact and status.valid:
        checks.append(Check("signature intact", True,
                            f"signed digest matches the signed bytes; "
                            f"{status.md_algorithm} signature verifies"))
    elif not status.intact:
        checks.append(Check("signature intact", False,
                            "the signed bytes do not match the signed digest: the file was "
                            "changed after signing"))
    else:
        checks.append(Check("signature intact", False,
                            "the signature value does not verify against the certificate"))
    subfilter = str(sig.sig_object.get("/SubFilter", ""))
    checks.append(Check("PAdES signature", subfilter == _PADES,
                        f"SubFilter {subfilter or 'missing'}"
                        + ("" if subfilter == _PADES else f", expected {_PADES}")))
    if roots is None:
        checks.append(Check("trusted signer", False,
                            f"not trusted: no trust anchor given (signed by {signer}); pass "
                            "--trust with the signer's or its CA's certificate"))
    elif status.trusted:
        checks.append(Check("trusted signer", True,
                            f"signed by {signer}; the certificate chains to {trust}"))
    else:
        checks.append(Check("trusted signer", False,
                            f"signed by {signer}, whose certificate does not chain to "
                            f"{trust}"))
    return signer


def _coverage_checks(data: bytes, sig: Any, status: Any, revisions: int,
                     checks: list[Check]) -> None:
    """Steps 4 and 7: the signed revision covers the whole file, and the unsigned bytes are
    the signature value and zero padding."""
    # 4. coverage: the signed revision is the last and nothing follows the signed bytes
    try:
        from pyhanko.sign.validation.status import SignatureCoverageLevel as Coverage

        byte_range = [int(x) for x in sig.sig_object["/ByteRange"]]
        signed_end = byte_range[2] + byte_range[3]
        after = revisions - 1 - sig.signed_revision
        extra = len(data) - signed_end
        whole = (status.coverage == Coverage.ENTIRE_FILE and after == 0 and extra == 0
                 and byte_range[0] == 0)
        if whole:
            detail = f"the signed range covers all {len(data)} bytes"
        else:
            detail = (f"{extra} byte(s) and {after} revision(s) follow the signed part: the "
                      "file was changed after signing")
        checks.append(Check("covers entire file", whole, detail))
    except Exception as exc:  # noqa: BLE001
        checks.append(Check("covers entire file", False,
                            f"cannot determine coverage: {type(exc).__name__}: {exc}"))

    # 7. the unsigned bytes are the signature and zeros, nothing else
    try:
        checks.append(_padding(data, byte_range))
    except Exception as exc:  # noqa: BLE001
        checks.append(Check("signature padding", False,
                            f"cannot read the signature value: {type(exc).__name__}: {exc}"))


def _input_checks(evidence: dict[str, Any], design_bytes: bytes | None,
                  rules_bytes: bytes | None, design_path: Path | None,
                  baseline_bytes: bytes | None, checks: list[Check]) -> None:
    """Step 6: the input files on disk hash to what the evidence records."""
    # 6. the inputs on disk
    rec_design = str(_table(evidence, "design").get("sha256", ""))
    rec_rules = str(_table(evidence, "ruleset").get("sha256", ""))
    if design_bytes is not None:
        got = _sha(design_bytes)
        checks.append(Check("design file matches", got == rec_design,
                            f"sha256 {_short(got)}; evidence records {_short(rec_design)}"))
        if design_path is not None:
            _measured_on_disk(design_bytes, design_path, evidence, checks)
    if rules_bytes is not None:
        got = _sha(rules_bytes)
        checks.append(Check("rule-set file matches", got == rec_rules,
                            f"sha256 {_short(got)}; evidence records {_short(rec_rules)}"))
    if baseline_bytes is not None:
        got = _sha(baseline_bytes)
        base = evidence.get("baseline")
        if not isinstance(base, dict):
            checks.append(Check("baseline file matches", False,
                                "the review was made without a baseline"))
        else:
            rec_base = str(_table(base, "design").get("sha256", ""))
            checks.append(Check("baseline file matches", got == rec_base,
                                f"sha256 {_short(got)}; evidence records "
                                f"{_short(rec_base)}"))
