"""The Review: one immutable object handed to every renderer."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

from ..analysis.regression import FigureChange
from ..analysis.results import LoopAnalysis
from ..design.model import Design
from ..ruleset.model import Finding, RuleSet, Status, Verdict
from ..ruleset.sweep_rules import Uncertainty


@dataclass(frozen=True, slots=True, kw_only=True)
class RunInfo:
    """Injected run facts, so outputs are reproducible."""

    tool_version: str
    date: str                              # ISO date (YYYY-MM-DD) of the review
    signer: str | None = None              # subject of the signing certificate, if signing
    signed_at: str | None = None           # signing time, YYYY-MM-DDTHH:MM:SSZ, if signing


@dataclass(frozen=True, slots=True, kw_only=True)
class Baseline:
    design: Design
    analyses: tuple[LoopAnalysis, ...]
    #: candidate variant name → its figures against the baseline variant of the same name
    #: (computed once when the review is made; variants the baseline lacks are absent)
    changes: Mapping[str, tuple[FigureChange, ...]] = field(
        default_factory=lambda: MappingProxyType({}))


@dataclass(frozen=True, slots=True, kw_only=True)
class Review:
    design: Design
    ruleset: RuleSet
    analyses: tuple[LoopAnalysis, ...]     # nominal first
    findings: tuple[Finding, ...]          # sorted once: by variant order, then rule order
    run: RunInfo
    baseline: Baseline | None = None
    uncertainty: Uncertainty | None = None     # [parameters]: the sweep and its findings

    @property
    def verdict(self) -> Verdict:
        return Verdict.FAIL if any(f.status.blocks for f in self.findings) else Verdict.PASS

    def count(self, status: Status) -> int:
        return sum(1 for f in self.findings if f.status is status)
