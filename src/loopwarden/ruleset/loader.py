"""Rule-set files (TOML) → validated :class:`RuleSet` objects.

Loading is strict: unknown tables and keys, unknown checks, limits a check does not
support, limits in the wrong order (a warning level outside the fail level), duplicate rule
ids and empty rationale/source are all :class:`RuleSetError` (exit 2), with a did-you-mean
where a name is close to a known one.  A mistyped ``warn_mn`` must never give a false pass.

The stability gate cannot be emptied or bent: a set (after ``extends``) with no rules or
without a ``closed_loop_stability`` rule is refused, the ids ``stability.closed_loop`` and
``stability.internal`` always name their stability check, and stability rules apply to
every variant with severity ``fail``.

``extends`` names a shipped set or a path relative to the extending file; the parent's
rules come first and a child rule with the same id replaces the parent's rule in place.
"""

from __future__ import annotations

import hashlib
import importlib.resources
import os
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Any

from ..errors import RuleSetError, did_you_mean
from ..input_files import check_path, read_input, require_regular_file, toml_loads
from .checks import CHECKS, Check
from .model import Bound, Level, LimitKey, Rule, RuleSet, RuleSetFile, Severity

__all__ = ["DEFAULT_RULESET", "load_ruleset", "parse_ruleset", "shipped_rulesets"]

DEFAULT_RULESET = "general"
SEVERITIES = tuple(s.value for s in Severity)
RULESET_KEYS = ("id", "version", "title", "extends", "description")
RULE_KEYS = ("id", "check", "severity", "rationale", "source", "variants")
VARIANT_CHOICES = ("all", "nominal")
#: The stability gate: every rule set (after ``extends``) has a closed-loop stability rule,
#: and these ids, used by the shipped sets, always name their stability check — a child set
#: can tighten nothing here, but it must not swap the gate for another check.
STABILITY_CHECK = "closed_loop_stability"
RESERVED_IDS = {"stability.closed_loop": "closed_loop_stability",
                "stability.internal": "internal_stability"}
_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


# --------------------------------------------------------------------------- shipped sets
def _shipped_dirs() -> list[Path]:
    dirs: list[Path] = []
    try:
        res = importlib.resources.files("loopwarden.rulesets")
        for candidate in getattr(res, "_paths", [res]):   # namespace packages: several
            path = Path(str(candidate))
            if path.is_dir():
                dirs.append(path)
    except (ModuleNotFoundError, TypeError):
        pass
    source_tree = Path(__file__).resolve().parents[3] / "rules"
    if source_tree.is_dir():
        dirs.append(source_tree)
    return dirs


def shipped_rulesets() -> dict[str, Path]:
    """Shipped rule sets: file stem (the set's id) → path, sorted by name."""
    found: dict[str, Path] = {}
    for d in _shipped_dirs():
        for p in sorted(d.glob("*.toml")):
            found.setdefault(p.stem, p)
    return dict(sorted(found.items()))


def _resolve(spec: str, base: Path | None) -> Path:
    """A shipped set name, or a path (relative to ``base`` when given)."""
    shipped = shipped_rulesets()
    looks_like_path = (os.sep in spec or "/" in spec or spec.endswith(".toml"))
    if not looks_like_path and spec in shipped:
        return shipped[spec]
    check_path(spec, RuleSetError, "rule-set file")
    path = Path(spec)
    if base is not None and not path.is_absolute():
        path = base / path
    if path.exists():
        require_regular_file(path, RuleSetError, "rule-set file")
        return path
    hint = did_you_mean(spec, shipped) or (
        "shipped sets: " + ", ".join(shipped) if shipped else None)
    what = (f"rule-set file {str(path)!r} does not exist" if looks_like_path
            else f"unknown rule set {spec!r} (neither a shipped set nor a file)")
    raise RuleSetError(what, hint=hint)


# --------------------------------------------------------------------------- parsing
@dataclass(frozen=True, slots=True)
class _Parsed:
    id: str
    version: str
    title: str
    extends: str | None
    rules: tuple[Rule, ...]


def _text(table: Mapping[str, Any], key: str, *, file: str, where: str,
          required: bool = True) -> str | None:
    if key not in table:
        if required:
            raise RuleSetError(f"missing required key '{key}'", file=file, where=where)
        return None
    value = table[key]
    if not isinstance(value, str) or not value.strip():
        raise RuleSetError(f"'{key}' must be a non-empty string, got {value!r}",
                           file=file, where=f"{where}.{key}")
    return value.strip()


def _unknown_key(key: str, known: tuple[str, ...] | list[str], *, file: str, where: str,
                 what: str = "key") -> RuleSetError:
    hint = did_you_mean(key, known) or "allowed: " + ", ".join(known)
    return RuleSetError(f"unknown {what} '{key}'", file=file, where=f"{where}.{key}", hint=hint)


def _number(value: object, *, file: str, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise RuleSetError(f"expected a number, got {value!r}", file=file, where=where)
    x = float(value)
    if x != x or x in (float("inf"), float("-inf")):
        raise RuleSetError(f"expected a finite number, got {value!r}", file=file, where=where)
    return x


def _check_limit_order(limits: Mapping[str, float], specs: Mapping[str, LimitKey], *,
                       file: str, where: str) -> None:
    """A warning level must lie on the safe side of its fail level; min ≤ max."""
    for key, value in limits.items():
        spec = specs[key]
        if spec.level is not Level.WARN:
            continue
        hard = spec.fail_key
        if hard not in limits:
            continue
        if spec.bound is Bound.MIN and value < limits[hard]:
            raise RuleSetError(f"{key} = {value:g} is below {hard} = {limits[hard]:g}; the "
                               "warning level must be the stricter one",
                               file=file, where=f"{where}.{key}")
        if spec.bound is Bound.MAX and value > limits[hard]:
            raise RuleSetError(f"{key} = {value:g} is above {hard} = {limits[hard]:g}; the "
                               "warning level must be the stricter one",
                               file=file, where=f"{where}.{key}")
    for key, value in limits.items():
        spec = specs[key]
        if spec.level is not Level.FAIL or spec.bound is not Bound.MIN:
            continue
        upper = spec.sibling(Bound.MAX, Level.FAIL)
        if upper in limits and value > limits[upper]:
            raise RuleSetError(f"{key} = {value:g} is above {upper} = {limits[upper]:g}",
                               file=file, where=where)


def _option(check: Check, key: str, value: object, *, file: str, where: str
            ) -> float | str | bool:
    spec = check.options[key]
    if spec.kind is bool:
        if not isinstance(value, bool):
            raise RuleSetError(f"expected true or false, got {value!r}", file=file, where=where)
        return value
    if spec.kind is str:
        if not isinstance(value, str):
            raise RuleSetError(f"expected a string, got {value!r}", file=file, where=where)
        if spec.choices and value not in spec.choices:
            raise RuleSetError(f"unknown value {value!r}", file=file, where=where,
                               hint=did_you_mean(value, spec.choices)
                               or "allowed: " + ", ".join(spec.choices))
        return value
    x = _number(value, file=file, where=where)
    if (spec.low is not None and x <= spec.low) or (spec.high is not None and x >= spec.high):
        raise RuleSetError(f"expected a value between {spec.low:g} and {spec.high:g} "
                           f"(exclusive), got {x:g}", file=file, where=where)
    return x


def _parse_rule(raw: object, index: int, *, file: str, origin: str) -> Rule:
    where = f"rule[{index}]"
    if not isinstance(raw, dict):
        raise RuleSetError("each [[rule]] must be a table", file=file, where=where)
    rule_id = _text(raw, "id", file=file, where=where)
    assert rule_id is not None
    if not _ID.match(rule_id):
        raise RuleSetError(f"rule id {rule_id!r} must be letters, digits, '.', '_' or '-'",
                           file=file, where=f"{where}.id")
    where = f"rule[{index}] ({rule_id})"
    check_name = _text(raw, "check", file=file, where=where)
    assert check_name is not None
    check = CHECKS.get(check_name)
    if check is None:
        raise _unknown_key(check_name, sorted(CHECKS), file=file, where=where, what="check")
    reserved = RESERVED_IDS.get(rule_id)
    if reserved is not None and check_name != reserved:
        raise RuleSetError(f"rule id '{rule_id}' is reserved for the {reserved} check, "
                           f"not '{check_name}'", file=file, where=f"{where}.check",
                           hint="the stability rules cannot be replaced; give this rule "
                           "another id")
    known = [*RULE_KEYS, *check.limit_keys, *check.options]
    limits: dict[str, float] = {}
    options: dict[str, float | str | bool] = {}
    for key, value in raw.items():
        if key in RULE_KEYS:
            continue
        if key in check.limit_keys:
            limits[key] = _number(value, file=file, where=f"{where}.{key}")
        elif key in check.options:
            options[key] = _option(check, key, value, file=file, where=f"{where}.{key}")
        else:
            hint = did_you_mean(key, known)
            hint = hint or (f"check '{check_name}' takes " +
                            (", ".join((*check.limit_keys, *check.options)) or "no limits"))
            raise RuleSetError(f"unknown key '{key}' for check '{check_name}'", file=file,
                               where=f"{where}.{key}", hint=hint)
    for key, spec in check.options.items():
        if spec.required and key not in options:
            raise RuleSetError(f"check '{check_name}' needs the option '{key}'", file=file,
                               where=where, hint="allowed: " + ", ".join(spec.choices))
    _check_limit_order(limits, check.limit_specs, file=file, where=where)
    if check_name == "error_constant":
        _check_error_constant_direction(str(options["which"]), limits, check.limit_specs,
                                        file=file, where=where)

    severity = raw.get("severity", "fail")
    if severity not in SEVERITIES:
        raise RuleSetError(f"unknown severity {severity!r}", file=file,
                           where=f"{where}.severity",
                           hint=did_you_mean(str(severity), SEVERITIES)
                           or "allowed: " + ", ".join(SEVERITIES))
    if not check.waivable and severity != "fail":
        raise RuleSetError(f"check '{check_name}' guards stability: its severity must be "
                           "'fail'", file=file, where=f"{where}.severity")
    variants = raw.get("variants", "all")
    if variants not in VARIANT_CHOICES:
        raise RuleSetError(f"unknown value {variants!r}", file=file, where=f"{where}.variants",
                           hint="allowed: " + ", ".join(VARIANT_CHOICES))
    if variants != "all" and not check.waivable:
        raise RuleSetError(f"check '{check_name}' guards stability: it applies to every "
                           "plant variant", file=file, where=f"{where}.variants",
                           hint="remove 'variants'")
    if variants != "all":
        options["variants"] = variants
    rationale = _text(raw, "rationale", file=file, where=where)
    source = _text(raw, "source", file=file, where=where)
    assert rationale is not None and source is not None
    return Rule(id=rule_id, check=check_name, limits=MappingProxyType(limits),
                options=MappingProxyType(options), severity=Severity(severity),
                rationale=rationale, source=source, origin=origin,
                limit_specs=check.limit_specs)


def _check_error_constant_direction(which: str, limits: Mapping[str, float],
                                    specs: Mapping[str, LimitKey], *, file: str,
                                    where: str) -> None:
    # A constant (Kv) must be large, an error (ramp_error) small: the other bound is a
    # sign of a mix-up, not a requirement.
    wants_lower = which in ("kp", "kv", "ka")
    for key in limits:
        if (specs[key].bound is Bound.MIN) != wants_lower:
            raise RuleSetError(
                f"'{key}' does not fit which = '{which}'", file=file, where=f"{where}.{key}",
                hint=("use min/warn_min for an error constant" if wants_lower
                      else "use max/warn_max for a steady-state error"))


def parse_ruleset(text: str, *, file: str) -> _Parsed:
    """Parse one rule-set file's text (without resolving ``extends``)."""
    try:
        data = toml_loads(text, RuleSetError, file)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
        where = f"line {m.group(1)}, column {m.group(2)}" if m else "end of file"
        what = msg[:m.start()].strip() if m else msg.replace("(at end of document)", "")
        raise RuleSetError(f"not valid TOML: {what.strip()}", file=file, where=where,
                           hint="see https://toml.io for the syntax") from exc
    for key in data:
        if key not in ("ruleset", "rule"):
            raise _unknown_key(key, ["ruleset", "rule"], file=file, where="", what="table")
    head = data.get("ruleset")
    if not isinstance(head, dict):
        raise RuleSetError("missing the [ruleset] table" if head is None else
                           "expected a table [ruleset]", file=file, where="ruleset")
    for key in head:
        if key not in RULESET_KEYS:
            raise _unknown_key(key, RULESET_KEYS, file=file, where="ruleset")
    set_id = _text(head, "id", file=file, where="ruleset")
    version = head.get("version")
    if not isinstance(version, str) or not version.strip():
        raise RuleSetError(f"'version' must be a non-empty string (write version = "
                           f"\"{version}\"), got {version!r}", file=file,
                           where="ruleset.version")
    title = _text(head, "title", file=file, where="ruleset")
    extends = _text(head, "extends", file=file, where="ruleset", required=False)
    _text(head, "description", file=file, where="ruleset", required=False)
    assert set_id is not None and title is not None
    if not _ID.match(set_id):
        raise RuleSetError(f"rule-set id {set_id!r} must be letters, digits, '.', '_' or '-'",
                           file=file, where="ruleset.id")
    raw_rules = data.get("rule", [])
    if not isinstance(raw_rules, list):
        raise RuleSetError("rules must be written as [[rule]] tables", file=file, where="rule")
    origin = f"{set_id} {version.strip()}"
    rules: list[Rule] = []
    seen: dict[str, int] = {}
    for i, raw in enumerate(raw_rules, start=1):
        rule = _parse_rule(raw, i, file=file, origin=origin)
        if rule.id in seen:
            raise RuleSetError(f"duplicate rule id '{rule.id}' (first at rule[{seen[rule.id]}])",
                               file=file, where=f"rule[{i}].id")
        seen[rule.id] = i
        rules.append(rule)
    return _Parsed(id=set_id, version=version.strip(), title=title, extends=extends,
                   rules=tuple(rules))


# --------------------------------------------------------------------------- loading
def _read(path: Path) -> tuple[bytes, str]:
    raw = read_input(path, RuleSetError, "rule-set file")
    try:
        return raw, raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise RuleSetError("not UTF-8 text", file=str(path)) from exc


def _merge(parent: tuple[Rule, ...], child: tuple[Rule, ...]) -> tuple[Rule, ...]:
    """Parent rules in order, each replaced by the child's rule of the same id; new last."""
    by_id = {r.id: r for r in child}
    merged = [by_id.pop(r.id, r) for r in parent]
    merged.extend(r for r in child if r.id in by_id)
    return tuple(merged)


def _load_chain(path: Path, stack: tuple[Path, ...]
                ) -> tuple[_Parsed, tuple[Rule, ...], tuple[RuleSetFile, ...]]:
    """Parse ``path`` and its ancestors: (this file, merged rules, files read, this first)."""
    real = path.resolve()
    if real in stack:
        cycle = " -> ".join(str(p.name) for p in (*stack, real))
        raise RuleSetError(f"rule sets extend each other in a cycle: {cycle}", file=str(path))
    raw, text = _read(path)
    parsed = parse_ruleset(text, file=str(path))
    this = RuleSetFile(id=parsed.id, version=parsed.version, path=str(path),
                       sha256=hashlib.sha256(raw).hexdigest(), text=text)
    if parsed.extends is None:
        return parsed, parsed.rules, (this,)
    try:
        parent_path = _resolve(parsed.extends, base=path.parent)
    except RuleSetError as exc:
        raise RuleSetError(exc.what, file=str(path), where="ruleset.extends",
                           hint=exc.hint) from exc
    _parent, parent_rules, parent_files = _load_chain(parent_path, (*stack, real))
    return parsed, _merge(parent_rules, parsed.rules), (this, *parent_files)


def _check_bands(rules: tuple[Rule, ...], file: str) -> None:
    """The analysis runs with one settling band: rules must not ask for different ones."""
    bands = {r.id: float(r.options["band"]) for r in rules if "band" in r.options}
    if len(set(bands.values())) > 1:
        listed = ", ".join(f"{k} = {v:g}" for k, v in bands.items())
        raise RuleSetError(f"rules ask for different settling bands ({listed})", file=file,
                           where="rule",
                           hint="use one band for every rule of a set")


def _check_gate(rules: tuple[Rule, ...], file: str) -> None:
    """A rule set is never empty and always checks closed-loop stability."""
    if not rules:
        raise RuleSetError("the rule set has no rules", file=file, where="rule",
                           hint="add [[rule]] tables, or extends = \"general\"")
    if not any(r.check == STABILITY_CHECK for r in rules):
        raise RuleSetError(f"no rule checks {STABILITY_CHECK}: every rule set must gate on "
                           "closed-loop stability", file=file, where="rule",
                           hint=f"add [[rule]] id = \"stability.closed_loop\", check = "
                           f"\"{STABILITY_CHECK}\", or extends = \"general\"")


def load_ruleset(spec: str | os.PathLike[str] | None = None) -> RuleSet:
    """Load a rule set by shipped name (``"general"``) or path; default ``general``.

    Raises
    ------
    RuleSetError
        Unknown set or file, invalid TOML, unknown check or key, a cycle of ``extends``.
    """
    path = _resolve(os.fspath(spec) if spec is not None else DEFAULT_RULESET, base=None)
    parsed, rules, files = _load_chain(path, ())
    _check_bands(rules, str(path))
    _check_gate(rules, str(path))
    top = files[0]
    return RuleSet(id=parsed.id, version=parsed.version, title=parsed.title, path=top.path,
                   sha256=top.sha256, text=top.text, rules=rules,
                   extends=tuple(f.id for f in files[1:]), files=files)
