"""Rule sets: loading, the check catalog and evaluation into findings."""

from .model import Finding, Rule, RuleSet, Status

__all__ = ["Finding", "Rule", "RuleSet", "Status"]
