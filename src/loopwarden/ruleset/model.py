"""Rule sets and findings (model objects shared by evaluation and renderers)."""

from __future__ import annotations

import enum
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType


class Status(enum.Enum):
    """Outcome of one rule on one variant. Order of severity: error > fail > warn."""

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


@dataclass(frozen=True, slots=True, kw_only=True)
class Rule:
    """One rule as read from a rule-set file (limits already in the check's units)."""

    id: str
    check: str
    limits: Mapping[str, float]            # e.g. {"min": 45.0, "warn_min": 50.0}
    options: Mapping[str, float | str | bool] = field(
        default_factory=lambda: MappingProxyType({}))   # check-specific settings
    severity: str = "fail"                 # "fail" | "warn" | "info": what a breach becomes
    rationale: str
    source: str
    origin: str                            # "motion-servo 1.0" or a path: where it was read


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
    details: Mapping[str, float | str | None] = field(
        default_factory=lambda: MappingProxyType({}))
