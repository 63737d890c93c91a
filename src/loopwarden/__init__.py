"""loopwarden: review a feedback loop against a rule set and leave signed evidence.

Python API for notebooks::

    import loopwarden
    design = loopwarden.load_design("sample_designs/conveyor_axis.toml")
    results = loopwarden.analyze(design)          # one LoopAnalysis per plant variant
    review = loopwarden.review(design)            # findings against the default rule set
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

if TYPE_CHECKING:  # pragma: no cover
    from .analysis.results import LoopAnalysis
    from .design.model import Design
    from .report.review import Review


def load_design(path: str) -> Design:
    """Read and validate a design file (raises DesignError on bad input)."""
    from .design.loader import load_design as _load

    return _load(path)


def analyze(design: Design, **options: Any) -> tuple[LoopAnalysis, ...]:
    """Analyse every plant variant of a design, nominal first."""
    from .analysis import analyze as _analyze

    return _analyze(design, **options)


def review(design: Design, ruleset: str | None = None, **options: Any) -> Review:
    """Analyse a design and evaluate a rule set (name or path; default ``general``)."""
    from .review_run import run_review

    return run_review(design, ruleset=ruleset, **options)
