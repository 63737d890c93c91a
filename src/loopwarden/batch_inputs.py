"""A batch's inputs and output folder: the design files named (folders expanded), their
output names, and the check that the folder holds nothing a batch did not write (split
from :mod:`.batch`)."""

from __future__ import annotations

import json
import os
from collections.abc import Iterable, Sequence
from pathlib import Path

from .errors import UsageError

#: Columns of summary.csv, in order (one row per design and variant).
COLUMNS = ("design", "file", "variant", "verdict", "closed_loop_stable", "gain_margin_db",
           "phase_margin_deg", "delay_margin_s", "peak_sensitivity", "peak_complementary",
           "disk_margin", "system_type", "kv", "overshoot_pct", "settling_time_s", "n_fail",
           "n_warn", "error")
SUMMARY_CSV = "summary.csv"
SUMMARY_MD = "summary.md"
MD_TITLE = "# loopwarden batch summary"
_REVIEW_SCHEMA = "loopwarden-review/1"      # == report.json_out.SCHEMA (not imported here)


# --------------------------------------------------------------------------- inputs
def collect_inputs(specs: Sequence[str | os.PathLike[str]]) -> list[Path]:
    """Design files from files and folders (every ``*.toml`` inside, not recursive, sorted).

    A file named twice (directly or through its folder) is reviewed once, first place kept.

    Raises
    ------
    UsageError
        A path that does not exist, or no design file at all.
    """
    found: list[Path] = []
    seen: set[Path] = set()
    for spec in specs:
        path = Path(spec)
        if "\0" in str(spec):
            raise UsageError(f"{str(path)!r} contains a NUL byte", hint="nothing was reviewed")
        if path.is_dir():
            # Every entry named *.toml, also one that is no regular file (a FIFO, a
            # folder): it gets its own summary row saying why it was skipped, unopened.
            files = sorted(path.glob("*.toml"))
        elif path.exists():
            files = [path]
        else:
            raise UsageError(f"{str(path)!r} is neither a design file nor a folder",
                             hint="nothing was reviewed")
        for f in files:
            key = f.resolve()
            if key not in seen:
                seen.add(key)
                found.append(f)
    if not found:
        raise UsageError("no design files (*.toml) in " + ", ".join(map(str, specs)))
    return found


def output_names(inputs: Sequence[Path]) -> list[str]:
    """``<stem>.json`` per input; a repeated stem gets ``-2``, ``-3``… in input order.

    Names are compared case-insensitively, so the folder works the same on file systems
    that ignore case.
    """
    taken = {SUMMARY_CSV, SUMMARY_MD}
    names = []
    for p in inputs:
        name, n = f"{p.stem}.json", 1
        while name.casefold() in taken:
            n += 1
            name = f"{p.stem}-{n}.json"
        taken.add(name.casefold())
        names.append(name)
    return names


def _csv_header() -> str:
    return ",".join(COLUMNS)


def _ours(path: Path) -> bool:
    """True when ``path`` holds a file this batch (or an earlier one) wrote."""
    try:
        if path.name == SUMMARY_CSV:
            with path.open(encoding="utf-8") as fh:
                return fh.readline().rstrip("\r\n") == _csv_header()
        if path.name == SUMMARY_MD:
            with path.open(encoding="utf-8") as fh:
                return fh.readline().rstrip("\r\n") == MD_TITLE
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return False
    return isinstance(doc, dict) and doc.get("schema") == _REVIEW_SCHEMA


def check_out_dir(out_dir: Path, names: Iterable[str], inputs: Sequence[Path]) -> None:
    """Refuse (UsageError) unless every output can be written without harm (see module)."""
    if out_dir.exists() and not out_dir.is_dir():
        raise UsageError(f"--out {out_dir} is a file, not a folder")
    resolved_inputs = {p.resolve() for p in inputs}
    for name in (*names, SUMMARY_CSV, SUMMARY_MD):
        target = out_dir / name
        if target.resolve() in resolved_inputs:
            raise UsageError(f"--out {out_dir}: {name} would overwrite an input file",
                             hint="choose another output folder; nothing was written")
        if target.is_symlink() or (target.exists() and not target.is_file()):
            raise UsageError(f"--out {out_dir}: {name} exists and is not a regular file (a "
                             "link, pipe, device or folder)",
                             hint="refusing to replace it; nothing was written")
        if target.exists() and not _ours(target):
            raise UsageError(
                f"--out {out_dir}: {name} exists and was not written by loopwarden",
                hint="use a new or empty folder, or one an earlier batch wrote; refusing "
                     "to overwrite it, nothing was written")
