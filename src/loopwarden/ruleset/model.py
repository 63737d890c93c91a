"""Rule sets and findings (model objects shared by evaluation and renderers)."""

from __future__ import annotations

import enum
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType


class Status(enum.StrEnum):
    """Outcome of one rule on one variant. Order of severity: error > fail > warn.

    String-valued: ``finding.status == "fail"`` holds, and the JSON shows the value.
    """

    PASS = "pass"
    WARN = "warn"
    FAIL = "fail"
    WAIVED = "waived"
    NA = "n/a"
    ERROR = "error"

    @property
    def blocks(self) -> bool:
        """True when this status makes the review fail (exit 1)."""
        return self in (Status.FAIL, Status.ERROR)


class Severity(enum.StrEnum):
    """What breaching a rule's limits becomes (see :mod:`loopwarden.ruleset.evaluate`)."""

    FAIL = "fail"
    WARN = "warn"
    INFO = "info"


class Verdict(enum.StrEnum):
    """The review's outcome: ``fail`` when any finding blocks (fail or error)."""

    PASS = "pass"
    FAIL = "fail"


class Bound(enum.StrEnum):
    """Which side of a limit is safe: ``min`` (measured ≥ limit) or ``max`` (≤)."""

    MIN = "min"
    MAX = "max"

    @property
    def sign(self) -> str:
        return "≥" if self is Bound.MIN else "≤"

    def breached(self, measured: float, limit: float) -> bool:
        return measured < limit if self is Bound.MIN else measured > limit

    def stricter(self, old: float, new: float) -> bool:
        """True when ``new`` is a stricter limit than ``old``."""
        return new > old if self is Bound.MIN else new < old


class Level(enum.StrEnum):
    """What a limit is: the fail level or the (stricter) warning level."""

    FAIL = "fail"
    WARN = "warn"


_KEY = re.compile(r"^(?P<warn>warn_)?(?P<bound>min|max)(?:_(?P<quantity>[a-z][a-z0-9_]*))?$")


@dataclass(frozen=True, slots=True)
class LimitKey:
    """One limit key of a check, read once: ``warn_max_iae`` is the warning level of the
    upper bound on the quantity ``iae``; ``min`` the fail level of the lower bound on the
    check's main quantity (``quantity`` empty).

    Key names are read here and nowhere else (:meth:`parse`, called when the check catalog
    is built); rule evaluation, the loader and the renderers use the typed fields.
    """

    name: str
    quantity: str
    bound: Bound
    level: Level

    @classmethod
    def parse(cls, name: str) -> LimitKey:
        m = _KEY.match(name)
        if m is None:
            raise ValueError(f"limit key {name!r} is not [warn_]min|max[_quantity]")
        return cls(name=name, quantity=m["quantity"] or "", bound=Bound(m["bound"]),
                   level=Level.WARN if m["warn"] else Level.FAIL)

    def sibling(self, bound: Bound, level: Level) -> str:
        """The name of the key of the same quantity with this bound and level."""
        return (("warn_" if level is Level.WARN else "") + bound.value
                + (f"_{self.quantity}" if self.quantity else ""))

    @property
    def fail_key(self) -> str:
        """The name of the fail-level key of the same quantity and bound."""
        return self.sibling(self.bound, Level.FAIL)


@dataclass(frozen=True, slots=True, kw_only=True)
class Rule:
    """One rule as read from a rule-set file (limits already in the check's units)."""

    id: str
    check: str
    limits: Mapping[str, float]            # e.g. {"min": 45.0, "warn_min": 50.0}
    options: Mapping[str, float | str | bool] = field(
        default_factory=lambda: MappingProxyType({}))   # check-specific settings
    severity: Severity = Severity.FAIL     # what a breach becomes
    rationale: str
    source: str
    origin: str                            # "motion-servo 1.0" or a path: where it was read
    #: every limit key the rule's check takes (not only those the set gives: a design may
    #: supply more), read at load into quantity, bound and level
    limit_specs: Mapping[str, LimitKey] = field(
        default_factory=lambda: MappingProxyType({}))


@dataclass(frozen=True, slots=True, kw_only=True)
class RuleSetFile:
    """One rule-set file as read (the set itself or a set it extends)."""

    id: str
    version: str
    path: str
    sha256: str                            # of the file bytes
    text: str


@dataclass(frozen=True, slots=True, kw_only=True)
class RuleSet:
    id: str
    version: str
    title: str
    path: str
    sha256: str
    text: str                              # the file exactly as read (for embedding)
    rules: tuple[Rule, ...]
    extends: tuple[str, ...] = ()          # ids of the sets it extends, nearest first
    files: tuple[RuleSetFile, ...] = ()    # every file read: this one first, then parents


@dataclass(frozen=True, slots=True, kw_only=True)
class Finding:
    """One rule evaluated on one variant, complete at birth.

    ``measured`` and ``limit`` are in ``unit``; ``limit_source`` says where the limit came
    from ("rule set general 1.0", "design [requirements].settling_time", ...).
    """

    rule: str
    check: str
    status: Status
    variant: str | None                    # None for design-wide findings
    measured: float | str | None
    limit: float | str | None
    unit: str
    message: str
    limit_source: str
    rationale: str = ""
    source: str = ""
    waiver: str | None = None              # justification, approver and expiry when waived
    limit_key: LimitKey | None = None      # the limit that decided a numeric finding
    details: Mapping[str, float | str | None] = field(
        default_factory=lambda: MappingProxyType({}))
