"""Verification of the embedded evidence: the review JSON against the attached design,
measured plant files and dates.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path
from typing import Any

from .verify_common import SCHEMA, Check, _sha, _short, plant_attachment_names


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
