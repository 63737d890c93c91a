"""Waivers: which of the design's ``[[waivers]]`` apply to a rule on a variant, and what
they make of its outcome, decided before the finding is built.

An unexpired waiver (valid through its expiry date) turns ``fail`` into ``waived`` (the
first one wins); an expired one changes nothing and the message says so; stability
checks refuse waivers; a waiver for a rule that does not fail says it is not needed; one
that matches no finding becomes a ``warn`` finding of its own.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

from ..design.model import Waiver
from ..errors import did_you_mean
from .checks import CHECKS
from .model import Finding, Status

__all__ = ["Waived", "decide_waiver", "unmatched_waiver", "waiver_matches"]

Details = Mapping[str, float | str | None]
_WAIVER_RATIONALE = "A waiver that matches nothing is probably stale or misspelt."


@dataclass(frozen=True, slots=True)
class Waived:
    """A rule's outcome after its waivers: what the finding will say."""

    status: Status
    message: str
    waiver: str | None                      # justification, approver and expiry, if any
    details: Details


def _waiver_text(w: Waiver) -> str:
    return f"{w.reason} (approved by {w.approved_by}, expires {w.expires.isoformat()})"


def _waive_parts(details: Details) -> Details:
    """The details with every failing part's status turned into ``waived``."""
    return MappingProxyType({k: Status.WAIVED.value if k.endswith(".status")
                             and v == Status.FAIL.value else v for k, v in details.items()})


def waiver_matches(w: Waiver, rule_id: str, variant: str) -> bool:
    """True when ``w`` names this rule and this variant (or every variant)."""
    return w.rule == rule_id and (w.variant is None or w.variant == variant)


def decide_waiver(check: str, status: Status, message: str, details: Details,
                  waivers: Sequence[Waiver], *, today: dt.date | None) -> Waived:
    """Apply the waivers matching one rule on one variant, in design order."""
    waiver: str | None = None
    for w in waivers:
        if waiver is not None and status is Status.WAIVED:
            continue                        # an earlier waiver already applies
        if not CHECKS[check].waivable:
            if status is Status.FAIL:
                waiver = f"refused: {_waiver_text(w)}"
                message = (f"{message}. Waiver by {w.approved_by} refused: {check} "
                           "cannot be waived")
        elif today is None or w.expires < today:
            if status is Status.FAIL:
                waiver = f"expired: {_waiver_text(w)}"
                message = (f"{message}. Waiver by {w.approved_by} expired on "
                           f"{w.expires.isoformat()}; it does not count")
        elif status is Status.FAIL:
            status, waiver, details = Status.WAIVED, _waiver_text(w), _waive_parts(details)
            message = (f"{message}. Waived by {w.approved_by} until "
                       f"{w.expires.isoformat()}: {w.reason}")
        else:
            message = (f"{message}. (Waiver by {w.approved_by} not needed: the rule does not "
                       "fail)")
    return Waived(status, message, waiver, details)


def unmatched_waiver(w: Waiver, rule_ids: Sequence[str]) -> Finding:
    """The ``warn`` finding for a waiver that matched no finding (stale or misspelt)."""
    scope = f" on variant '{w.variant}'" if w.variant else ""
    hint = did_you_mean(w.rule, rule_ids)
    return Finding(
        rule=w.rule, check="waiver", status=Status.WARN, variant=w.variant,
        measured=None, limit=None, unit="", limit_source="design [[waivers]]",
        message=f"waiver for rule '{w.rule}'{scope} matches no finding"
                + (f" ({hint})" if hint else "") + "; it has no effect",
        waiver=_waiver_text(w), rationale=_WAIVER_RATIONALE, source="design [[waivers]]")
