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

import contextlib
import hashlib
import io
import json
import logging
import re
import tomllib
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

from ..errors import UsageError

__all__ = ["Check", "VerifyReport", "verify_pdf", "SCHEMA", "plant_attachment_names"]

SCHEMA = "loopwarden-review/1"
_PADES = "/ETSI.CAdES.detached"


class Check(NamedTuple):
    """One verification step: its name, whether it passed, and why."""

    name: str
    passed: bool
    detail: str


@dataclass(frozen=True, slots=True, kw_only=True)
class VerifyReport:
    """The outcome of :func:`verify_pdf`; ``ok`` only when every check ran and passed."""

    ok: bool
    checks: tuple[Check, ...]
    signer: str | None = None           # subject of the signing certificate, when read
    verdict: str | None = None          # the review's verdict per the signed evidence
    review_date: str | None = None      # the evidence's date (YYYY-MM-DD), when read
    signed_at: str | None = None        # the signature's signing time (UTC), when read


def plant_attachment_names(variants: Sequence[str]) -> dict[str, str]:
    """Embedded-file name of each measured plant variant's CSV: ``plant-<variant>.csv``.

    The variant name is kept where it is a safe file name (letters, digits, ``.``, ``_``,
    ``-``; anything else becomes ``-``); names that would coincide get ``-2``, ``-3``… in
    the given order.  The review command and ``verify`` both use this, in the order of
    ``design.measured_plants`` in the evidence, so the names need not be recorded.
    """
    out: dict[str, str] = {}
    taken: set[str] = set()
    for variant in variants:
        stem = re.sub(r"[^A-Za-z0-9._-]+", "-", variant).strip("-.") or "variant"
        name, k = f"plant-{stem}.csv", 2
        while name in taken:
            name, k = f"plant-{stem}-{k}.csv", k + 1
        taken.add(name)
        out[variant] = name
    return out


def _read(path: Path | str, what: str) -> bytes:
    try:
        return Path(path).read_bytes()
    except OSError as exc:
        raise UsageError(f"cannot read the {what}: {exc.strerror or exc}",
                         file=str(path)) from exc


def _trust_root(path: Path | str) -> Any:
    from pyhanko.keys import load_certs_from_pemder_data

    data = _read(path, "trust certificate")
    try:
        certs = list(load_certs_from_pemder_data(data))
    except Exception as exc:  # noqa: BLE001 - any parse failure means "not a certificate"
        raise UsageError("the trust file holds no readable certificate", file=str(path),
                         hint="give the signer's (or its CA's) certificate, PEM or DER"
                         ) from exc
    if not certs:
        raise UsageError("the trust file holds no certificate", file=str(path))
    return certs


@contextlib.contextmanager
def _quiet() -> Iterator[None]:
    """pyHanko logs every validation problem at ERROR; the report says it instead."""
    loggers = [logging.getLogger(n) for n in ("pyhanko", "pyhanko_certvalidator")]
    levels = [lg.level for lg in loggers]
    for lg in loggers:
        lg.setLevel(logging.CRITICAL + 1)
    try:
        yield
    finally:
        for lg, level in zip(loggers, levels, strict=True):
            lg.setLevel(level)


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _short(digest: str) -> str:
    return f"{digest[:16]}…" if len(digest) > 16 else digest


def _obj(x: Any) -> Any:
    """Follow an indirect reference (pyHanko's ``get`` does not)."""
    return x.get_object() if hasattr(x, "get_object") else x


def embedded_files(resolver: Any) -> dict[str, bytes]:
    """Every file in the EmbeddedFiles name tree of a document (or historical revision)."""
    root = _obj(resolver.root)
    if "/Names" not in root:
        return {}
    names = _obj(root["/Names"])
    if "/EmbeddedFiles" not in names:
        return {}
    out: dict[str, bytes] = {}
    stack = [_obj(names["/EmbeddedFiles"])]
    seen = 0
    while stack:
        node = stack.pop()
        seen += 1
        if seen > 10_000:       # a name tree that loops back on itself
            raise ValueError("the EmbeddedFiles name tree does not end")
        if "/Kids" in node:
            stack.extend(_obj(kid) for kid in _obj(node["/Kids"]))
        pairs = list(_obj(node["/Names"])) if "/Names" in node else []
        if len(pairs) % 2:
            raise ValueError("an EmbeddedFiles name array has an odd length")
        for key, spec in zip(pairs[::2], pairs[1::2], strict=True):
            name = str(_obj(key))
            if name in out:
                raise ValueError(f"two embedded files are named {name!r}")
            stream = _obj(_obj(_obj(spec)["/EF"])["/F"])
            out[name] = bytes(stream.data)
    return out


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
    except Exception as exc:  # noqa: BLE001 - malformed evidence is a failure, not a crash
        checks.append(Check("evidence content", False,
                            f"the evidence is malformed: {type(exc).__name__}: {exc}"))
        return done()
    return done(complete=True)


def _table(evidence: dict[str, Any], key: str) -> dict[str, Any]:
    value = evidence.get(key)
    if not isinstance(value, dict):
        raise ValueError(f"{key!r} is not a table")
    return value


def _evidence(files: dict[str, bytes], checks: list[Check]) -> dict[str, Any] | None:
    raw = files.get("review.json")
    if raw is None:
        checks.append(Check("embedded evidence", False,
                            "no review.json in the signed revision (embedded: "
                            f"{', '.join(sorted(files)) or 'nothing'})"))
        return None
    try:
        evidence = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        checks.append(Check("embedded evidence", False, f"review.json is not JSON: {exc}"))
        return None
    if not isinstance(evidence, dict) or evidence.get("schema") != SCHEMA:
        got = evidence.get("schema") if isinstance(evidence, dict) else type(evidence).__name__
        checks.append(Check("embedded evidence", False,
                            f"review.json has schema {got!r}, expected {SCHEMA!r}"))
        return None
    design = evidence.get("design")
    name = design.get("name") if isinstance(design, dict) else None
    checks.append(Check("embedded evidence", True,
                        f"review.json ({len(raw)} bytes, {SCHEMA}): design {name!r}, "
                        f"verdict {evidence.get('verdict')}"))
    return evidence


def _consistency(files: dict[str, bytes], evidence: dict[str, Any],
                 checks: list[Check]) -> None:
    """The embedded input files hash to what the embedded evidence records."""
    problems = []
    expected = {"design.toml": str(_table(evidence, "design").get("sha256", "")),
                "rules.toml": str(_table(evidence, "ruleset").get("sha256", ""))}
    for f in _table(evidence, "ruleset").get("files", [])[1:]:
        expected[f"rules-{f.get('id')}.toml"] = str(f.get("sha256", ""))
    if evidence.get("baseline") is not None:
        expected["baseline.toml"] = str(_table(_table(evidence, "baseline"), "design")
                                        .get("sha256", ""))
    measured = _measured_plants(evidence)
    names = plant_attachment_names([m["variant"] for m in measured])
    for m in measured:
        expected[names[m["variant"]]] = m["sha256"]
    for name, digest in expected.items():
        if name not in files:
            problems.append(f"{name} is not embedded")
        elif _sha(files[name]) != digest:
            problems.append(f"{name} hashes to {_short(_sha(files[name]))}, the evidence "
                            f"records {_short(digest)}")
    checks.append(Check("embedded inputs match evidence", not problems,
                        "; ".join(problems) if problems else
                        f"{', '.join(sorted(expected))} hash to the recorded sha256"))


def _measured_plants(evidence: dict[str, Any]) -> list[dict[str, str]]:
    """``design.measured_plants`` of the evidence: variant, file and sha256 of each CSV."""
    rows = _table(evidence, "design").get("measured_plants", [])
    if not isinstance(rows, list):
        raise ValueError("design.measured_plants is not a list")
    out = []
    for row in rows:
        if not isinstance(row, dict):
            raise ValueError("an entry of design.measured_plants is not a table")
        out.append({k: str(row.get(k, "")) for k in ("variant", "file", "sha256")})
    return out


def _named_csv_files(design_bytes: bytes) -> dict[str, str]:
    """Variant → frequency-response file, as the design file names them (``frd.file``)."""
    doc = tomllib.loads(design_bytes.decode("utf-8"))
    plant = doc.get("plant", {})
    out: dict[str, str] = {}
    if isinstance(plant, dict):
        if isinstance(plant.get("frd"), dict) and "file" in plant["frd"]:
            out["nominal"] = str(plant["frd"]["file"])
        for v in plant.get("variants", []) or []:
            if isinstance(v, dict) and isinstance(v.get("frd"), dict) and "file" in v["frd"]:
                out[str(v.get("name", ""))] = str(v["frd"]["file"])
    return out


def _measured_on_disk(design_bytes: bytes, design_path: Path, evidence: dict[str, Any],
                      checks: list[Check]) -> None:
    """The CSV files the design on disk names hash to what the evidence records.

    Read as the review read them: relative to the design file and inside its folder tree
    (a name that leaves it is refused, not followed).
    """
    try:
        named = _named_csv_files(design_bytes)
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        checks.append(Check("measured-plant files match", False,
                            f"the design file cannot be read as TOML: {exc}"))
        return
    recorded = {m["variant"]: m for m in _measured_plants(evidence)}
    if not named and not recorded:
        return
    base = design_path.resolve().parent
    problems, matched = [], []
    for variant, file in named.items():
        rec = recorded.get(variant)
        if rec is None:
            problems.append(f"{file} ({variant}): the evidence records no measured plant for "
                            "this variant")
            continue
        target = Path(file)
        target = (target if target.is_absolute() else base / target).resolve()
        if not target.is_relative_to(base):
            problems.append(f"{file} ({variant}) lies outside the design file's folder")
            continue
        try:
            got = _sha(target.read_bytes())
        except OSError as exc:
            problems.append(f"cannot read {file} ({variant}): {exc.strerror or exc}")
            continue
        if got != rec["sha256"]:
            problems.append(f"{file} ({variant}) hashes to {_short(got)}, the evidence "
                            f"records {_short(rec['sha256'])}")
        else:
            matched.append(file)
    for variant in sorted(set(recorded) - set(named)):
        problems.append(f"the evidence records {recorded[variant]['file']} ({variant}), which "
                        "the design file does not name")
    checks.append(Check("measured-plant files match", not problems,
                        "; ".join(problems) if problems else
                        f"{', '.join(matched)} hash to the recorded sha256"))


def _der_length(blob: bytes) -> int:
    """Length in bytes of the DER element at the start of ``blob`` (tag, length, value)."""
    if len(blob) < 2:
        raise ValueError("the signature value is empty")
    first = blob[1]
    if first < 0x80:
        return 2 + first
    n = first & 0x7F
    if n == 0 or n > 4 or len(blob) < 2 + n:
        raise ValueError("the signature value has no definite DER length")
    return 2 + n + int.from_bytes(blob[2:2 + n], "big")


def _padding(data: bytes, byte_range: list[int]) -> Check:
    """The unsigned gap of the ByteRange: ``<hex>`` of the DER signature, then zeros only."""
    gap = data[byte_range[0] + byte_range[1]:byte_range[2]]
    if len(gap) < 2 or gap[:1] != b"<" or gap[-1:] != b">":
        return Check("signature padding", False,
                     "the bytes outside the signed range are not one hex string")
    digits = gap[1:-1]
    if not re.fullmatch(rb"[0-9A-Fa-f]*", digits) or len(digits) % 2:
        return Check("signature padding", False,
                     "the signature's hex string holds characters other than hex digits")
    blob = bytes.fromhex(digits.decode("ascii"))
    end = _der_length(blob)
    if end > len(blob):
        return Check("signature padding", False, "the signature value is cut short")
    stray = len(blob[end:]) - blob[end:].count(0)
    if stray:
        return Check("signature padding", False,
                     f"{stray} non-zero byte(s) follow the signature in its padding: the "
                     "file was changed after signing")
    return Check("signature padding", True,
                 f"{end}-byte signature followed by {len(blob) - end} zero bytes")


def _dates(evidence: dict[str, Any], signing_time: Any, checks: list[Check]) -> None:
    """The review date and the signing time: recorded in both places, and in order."""
    import datetime as dt

    from .review_age import MAX_REVIEW_AGE_DAYS, review_date_problem, signing_time_text

    if signing_time is None:
        checks.append(Check("review date and signing time", False,
                            "the signature carries no signing time"))
        return
    signed = signing_time_text(signing_time)
    recorded = evidence.get("signed_at")
    if recorded != signed:
        checks.append(Check("signing time recorded", False,
                            f"the evidence records signed_at {recorded!r}; the signature "
                            f"was made at {signed}"))
    else:
        checks.append(Check("signing time recorded", True,
                            f"evidence and signature both say {signed}"))
    try:
        date = dt.date.fromisoformat(str(evidence.get("date")))
    except ValueError:
        checks.append(Check("review date and signing time", False,
                            f"the evidence's date {evidence.get('date')!r} is not a date"))
        return
    problem = review_date_problem(date, signing_time)
    checks.append(Check("review date and signing time", problem is None,
                        problem or f"reviewed {date.isoformat()}, signed {signed} (the "
                                   f"review date may lie at most {MAX_REVIEW_AGE_DAYS} days "
                                   "before the signing time, never after it)"))
