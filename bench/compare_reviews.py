"""Compare two review JSON files number by number; list every difference.

Used before and after a speed change: every number of a review (margins, peaks, tracking,
step figures, poles, slow pairs, alternatives, disturbance, effort) must stay equal to a
relative tolerance, every text and every other value exactly::

    python bench/compare_reviews.py OLD.json NEW.json [--rtol 1e-9]
    python bench/compare_reviews.py OLD_DIR NEW_DIR   # every *.json present in both

Exit status 0 when nothing differs, 1 otherwise.  Keys that are per-run by nature (none
in a review dated with --date) can be skipped with --ignore KEY (repeatable, matched
against the last key of a path).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path


def _close(a: float, b: float, rtol: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    if math.isinf(a) or math.isinf(b):
        return a == b
    return abs(a - b) <= rtol * max(abs(a), abs(b)) or a == b


def differences(old: object, new: object, rtol: float, path: str = "",
                ignore: frozenset[str] = frozenset()) -> list[str]:
    """Every place where ``new`` differs from ``old`` (numbers within ``rtol`` agree)."""
    if path.rsplit(".", 1)[-1].split("[")[0] in ignore:
        return []
    num = (int, float)
    if isinstance(old, num) and isinstance(new, num) and not isinstance(old, bool) \
            and not isinstance(new, bool):
        if _close(float(old), float(new), rtol):
            return []
        rel = abs(old - new) / max(abs(old), abs(new)) if max(abs(old), abs(new)) else 0
        return [f"{path}: {old!r} -> {new!r} (rel {rel:.2e})"]
    if isinstance(old, dict) and isinstance(new, dict):
        out: list[str] = []
        for key in sorted(set(old) | set(new)):
            sub = f"{path}.{key}" if path else str(key)
            if key not in new:
                out.append(f"{sub}: missing in new")
            elif key not in old:
                out.append(f"{sub}: only in new")
            else:
                out += differences(old[key], new[key], rtol, sub, ignore)
        return out
    if isinstance(old, list) and isinstance(new, list):
        if len(old) != len(new):
            return [f"{path}: length {len(old)} -> {len(new)}"]
        out = []
        for i, (a, b) in enumerate(zip(old, new, strict=True)):
            out += differences(a, b, rtol, f"{path}[{i}]", ignore)
        return out
    if old != new:
        return [f"{path}: {old!r} -> {new!r}"]
    return []


def compare_files(old: Path, new: Path, rtol: float, ignore: frozenset[str]) -> list[str]:
    return differences(json.loads(old.read_text()), json.loads(new.read_text()), rtol,
                       ignore=ignore)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("old", type=Path)
    ap.add_argument("new", type=Path)
    ap.add_argument("--rtol", type=float, default=1e-9)
    ap.add_argument("--ignore", action="append", default=[])
    args = ap.parse_args(argv)
    ignore = frozenset(args.ignore)
    if args.old.is_dir():
        pairs = [(p, args.new / p.name) for p in sorted(args.old.glob("*.json"))]
    else:
        pairs = [(args.old, args.new)]
    bad = 0
    for old, new in pairs:
        if not new.exists():
            print(f"{old.name}: no counterpart {new}")
            bad += 1
            continue
        diffs = compare_files(old, new, args.rtol, ignore)
        print(f"{old.name}: {'same' if not diffs else f'{len(diffs)} differences'} "
              f"(rtol {args.rtol:g})")
        for line in diffs[:50]:
            print("   ", line)
        if len(diffs) > 50:
            print(f"    ... and {len(diffs) - 50} more")
        bad += bool(diffs)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
