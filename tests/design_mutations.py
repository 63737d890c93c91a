"""Malformed and edge-case design files and rule sets, generated from the shipped ones.

Shared by the property-based test (``tests/test_fuzz_inputs.py``, driven by hypothesis
through a seeded :class:`random.Random`) and the longer run ``bench/fuzz_designs.py``.
Every generator takes a ``random.Random`` and returns TOML text; nothing here reads the
clock or the environment, so a seed reproduces a case.

Mutations of a parsed file: a number replaced by an extreme value (huge, tiny, denormal,
zero, negative, a huge integer) or scaled by a plausible factor, a key deleted or renamed,
a value of the wrong type, a value wrapped in deeply nested arrays or tables, a whole
table dropped; and random TOML-like text.
"""

from __future__ import annotations

import datetime as dt
import math
import random
import tomllib
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = sorted((ROOT / "sample_designs").glob("*.toml"))
RULESETS = sorted((ROOT / "rules").glob("*.toml"))

#: Numbers that have broken numerical code before: overflow, underflow, denormals,
#: extreme dynamic range, whole numbers beyond float precision, long delays.
EXTREME_NUMBERS: tuple[Any, ...] = (
    0, 0.0, -0.0, 1, -1, 5e-324, 2.2e-308, 1e-320, 1e-300, 1e-200, 1e-150, 1e-30, 1e-12,
    1e-9, 1e-6, 1e-3, 0.5, 3.0, 1e3, 1e6, 1e9, 1e12, 1e30, 1e150, 1e200, 1e300, 1.7e308,
    -1e-200, -1e300, -1.7e308, 86_400.0, 1e5, 20_000, 10**9, 2**63 - 1, -(2**63),
    math.pi * 1e7, 123456.789,
)
WRONG_TYPES: tuple[Any, ...] = (
    "text", "", "1.0", True, False, [], [1.0, 2.0], [[1.0]], {}, {"x": 1.0},
    dt.date(2027, 1, 1), dt.datetime(2027, 1, 1, 12, 0), dt.time(12, 0),
)
KEY_NAMES = ("k", "gain", "zero", "pole", "delay", "period", "compute_delay", "ti", "td",
             "n", "freq", "poles", "zeros", "num", "den", "tf", "zpk", "ss", "type", "name",
             "min", "max", "check", "rule", "variants", "frd", "file", "a", "b", "c", "d",
             "settling_time", "reference_band", "extends", "id", "unknown", "")


# --------------------------------------------------------------------------- TOML writer
def _key(k: str) -> str:
    if k and all(c.isalnum() or c in "_-" for c in k):
        return k
    return _string(k)


def _string(s: str) -> str:
    out = ['"']
    for ch in s:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def value_text(v: Any) -> str:
    """One TOML value, inline (tables as inline tables)."""
    if isinstance(v, Deep):
        return v.text()
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, (dt.datetime, dt.date, dt.time)):
        return v.isoformat()
    if isinstance(v, list):
        return "[" + ", ".join(value_text(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {value_text(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def dumps(doc: dict[str, Any]) -> str:
    """A document as top-level ``key = value`` lines (every table inline): valid TOML."""
    return "".join(f"{_key(k)} = {value_text(v)}\n" for k, v in doc.items())


# --------------------------------------------------------------------------- mutations
Path_ = tuple[Any, ...]


def _leaves(node: Any, path: Path_ = ()) -> list[Path_]:
    out: list[Path_] = []
    if isinstance(node, dict):
        for k, v in node.items():
            out.append((*path, k))
            out.extend(_leaves(v, (*path, k)))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            out.append((*path, i))
            out.extend(_leaves(v, (*path, i)))
    return out


def _get(doc: Any, path: Path_) -> Any:
    for p in path:
        doc = doc[p]
    return doc


def _numbers(doc: Any) -> list[Path_]:
    return [p for p in _leaves(doc)
            if isinstance(_get(doc, p), (int, float)) and not isinstance(_get(doc, p), bool)]


class Deep:
    """A value wrapped in ``depth`` arrays or inline tables, written out flat (no recursion
    here: the point is to find recursion in the reader)."""

    def __init__(self, value: Any, depth: int, array: bool) -> None:
        self.value, self.depth, self.array = value, depth, array

    def text(self) -> str:
        opener, closer = ("[", "]") if self.array else ("{x = ", "}")
        return opener * self.depth + value_text(self.value) + closer * self.depth


def mutate(doc: dict[str, Any], rng: random.Random) -> dict[str, Any]:
    """One mutation of a parsed document (a deep copy is changed and returned)."""
    import copy

    doc = copy.deepcopy(doc)
    nums = _numbers(doc)
    kind = rng.choice(("number", "number", "number", "scale", "scale", "scale", "delete",
                       "rename", "type", "nest", "drop_table", "duplicate"))
    if kind == "scale" and nums:
        # A plausible retune or a wrong unit: the design stays readable more often, so the
        # analysis itself meets unusual loops (unstable, marginal, slow, fast, long delays).
        path = rng.choice(nums)
        parent = _get(doc, path[:-1])
        factor = rng.choice((-1.0, 1e-6, 1e-3, 0.1, 0.5, 0.9, 1.1, 2.0, 10.0, 1e3, 1e6))
        parent[path[-1]] = parent[path[-1]] * factor
        return doc
    if kind in ("number", "scale") and nums:
        path = rng.choice(nums)
        value = rng.choice(EXTREME_NUMBERS)
        if isinstance(value, float) and rng.random() < 0.3:
            value = -value
        _get(doc, path[:-1])[path[-1]] = value
        return doc
    leaves = _leaves(doc)
    if not leaves:
        return {"x": rng.choice(EXTREME_NUMBERS)}
    path = rng.choice(leaves)
    parent = _get(doc, path[:-1])
    if kind == "delete":
        del parent[path[-1]]
    elif kind == "rename" and isinstance(parent, dict):
        value = parent.pop(path[-1])
        parent[rng.choice(KEY_NAMES) or "z"] = value
    elif kind == "type":
        parent[path[-1]] = rng.choice(WRONG_TYPES)
    elif kind == "nest":
        depth = rng.choice((3, 30, 200, 600, 1200, 5000))
        parent[path[-1]] = Deep(parent[path[-1]], depth, rng.random() < 0.5)
    elif kind == "drop_table" and isinstance(doc, dict) and doc:
        del doc[rng.choice(list(doc))]
    elif kind == "duplicate" and isinstance(parent, list) and parent:
        parent.extend(parent[:1] * rng.choice((1, 5, 50)))
    else:
        parent[path[-1]] = rng.choice(EXTREME_NUMBERS)
    return doc


_TOKENS = ("[", "]", "[[", "]]", "{", "}", "=", ",", ".", "\n", '"', "'", "#", "x", "1",
           "1e400", "nan", "inf", "-", "+", "true", "1979-05-27", "\x00", "é", " ",
           "design", "plant", "controller", "zpk", "poles")


def random_toml(rng: random.Random) -> str:
    """Random text built from TOML tokens (mostly invalid, sometimes valid)."""
    if rng.random() < 0.2:
        depth = rng.choice((50, 500, 2000, 20000))
        opener, closer = rng.choice((("[", "]"), ("{a=", "}")))
        return "x = " + opener * depth + "1" + closer * depth + "\n"
    return "".join(rng.choice(_TOKENS) for _ in range(rng.randint(0, 60)))


def design_case(rng: random.Random, *, max_mutations: int = 3) -> tuple[str, str]:
    """(sample stem, TOML text): a sample design mutated 1..max_mutations times, or noise."""
    if rng.random() < 0.05:
        return "random", random_toml(rng)
    sample = rng.choice(SAMPLES)
    doc = tomllib.loads(sample.read_text(encoding="utf-8"))
    for _ in range(rng.randint(1, max_mutations)):
        doc = mutate(doc, rng)
    return sample.stem, dumps(doc)


def ruleset_case(rng: random.Random) -> str:
    """A shipped rule set (made standalone) mutated once or twice, or noise."""
    if rng.random() < 0.1:
        return random_toml(rng)
    doc = tomllib.loads(rng.choice(RULESETS).read_text(encoding="utf-8"))
    doc.get("ruleset", {}).pop("extends", None)   # the copy lives in a temporary folder
    for _ in range(rng.randint(1, 2)):
        doc = mutate(doc, rng)
    return dumps(doc)
