"""One review: analyse a design, evaluate a rule set, build the immutable Review.

This is what ``loopwarden.review(...)`` and ``loopwarden review`` call.  The date and the
tool version are injected so that the same inputs give the same outputs.
"""

from __future__ import annotations

import datetime as dt
import os
from pathlib import Path
from types import MappingProxyType
from typing import TYPE_CHECKING

from .analysis import analyze
from .design.model import Design
from .errors import UsageError
from .report.review import Baseline, Review, RunInfo
from .ruleset.evaluate import alternative_limits, analysis_settings, evaluate, resolve_limits
from .ruleset.loader import load_ruleset
from .ruleset.model import Finding, RuleSet
from .ruleset.sweep_rules import Uncertainty

if TYPE_CHECKING:  # pragma: no cover
    from .analysis.sweep import Executor

__all__ = ["review_date", "run_review"]


def review_date(text: str | None = None) -> dt.date:
    """The review date: ``text`` (YYYY-MM-DD), else ``SOURCE_DATE_EPOCH``, else today (UTC)."""
    if text is not None:
        try:
            return dt.date.fromisoformat(text)
        except ValueError as exc:
            raise UsageError(f"--date {text!r} is not a date", hint="write YYYY-MM-DD") from exc
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch:
        try:
            return dt.datetime.fromtimestamp(int(epoch), tz=dt.UTC).date()
        except (ValueError, OverflowError, OSError) as exc:
            raise UsageError(f"SOURCE_DATE_EPOCH={epoch!r} is not a Unix time in seconds"
                             ) from exc
    return dt.datetime.now(tz=dt.UTC).date()


def run_review(design: Design, ruleset: str | os.PathLike[str] | RuleSet | None = None, *,
               baseline: Design | str | os.PathLike[str] | None = None,
               today: dt.date | str | None = None,
               tool_version: str | None = None, sweep: bool = False,
               executor: Executor | None = None) -> Review:
    """Analyse ``design`` and evaluate ``ruleset`` (a name, a path or a RuleSet).

    Parameters
    ----------
    design : Design
        The candidate design.
    ruleset : str, path or RuleSet, optional
        Shipped set name or rule-set file; default ``general``.
    baseline : Design or path, optional
        A previous design to compare against (``regression`` rules).
    today : date or ISO string, optional
        The review date (waiver expiry is judged against it); default as
        :func:`review_date`.
    tool_version : str, optional
        Recorded in the outputs; default the installed loopwarden version.
    sweep : bool
        Sweep the design's ``[parameters]`` even without a ``[sweep]`` table (defaults of
        :class:`~loopwarden.design.parameters.SweepSettings`).
    executor : optional
        Runs the sweep's chunks (``map`` keeping order: a process pool, a Dask client's
        executor); None: in this process.

    Raises
    ------
    RuleSetError, DesignError
        Bad rule set, or design limits that loosen a rule / name an unknown rule.
    """
    from . import __version__

    rs = ruleset if isinstance(ruleset, RuleSet) else load_ruleset(ruleset)
    date = today if isinstance(today, dt.date) else review_date(today)
    limits = resolve_limits(design, rs)         # before the analysis: bad limits fail fast
    min_pm, band = analysis_settings(design, rs, limits)
    analyses = analyze(design, min_phase_margin_deg=min_pm, settling_band=band,
                       requirements=alternative_limits(rs, limits))

    base = None
    if baseline is not None:
        if not isinstance(baseline, Design):
            from .design.loader import load_design

            baseline = load_design(Path(baseline))
        from .analysis.regression import compare

        old = analyze(baseline, min_phase_margin_deg=min_pm, settling_band=band)
        by_name = {a.variant: a for a in old}
        changes = MappingProxyType({a.variant: compare(by_name[a.variant], a)
                                    for a in analyses if a.variant in by_name})
        base = Baseline(design=baseline, analyses=old, changes=changes)

    findings = evaluate(design, rs, analyses, today=date, limits=limits,
                        baseline=base.analyses if base is not None else None)
    uncertainty = None
    if design.parameters is not None:
        uncertainty, extra = _uncertainty(design, rs, limits, min_pm, band, date, sweep,
                                          executor)
        findings = (*findings, *extra)
    return Review(design=design, ruleset=rs, analyses=analyses, findings=findings,
                  run=RunInfo(tool_version=tool_version or __version__, date=date.isoformat()),
                  baseline=base, uncertainty=uncertainty)


def _uncertainty(design: Design, rs: RuleSet, limits: dict, min_pm: float | None,
                 band: float | None, date: dt.date, sweep: bool,
                 executor: Executor | None) -> tuple[Uncertainty, tuple[Finding, ...]]:
    """The sweep of ``[parameters]`` (when asked for) and its worst-case findings."""
    from .analysis import DEFAULT_SETTLING_BAND, analyze_variant
    from .analysis.sweep import run_sweep
    from .design.parameters import SweepSettings
    from .errors import DesignError
    from .ruleset.sweep_rules import pass_fractions, uncertainty_findings

    space = design.parameters
    assert space is not None
    if design.sweep is None and not sweep:
        return Uncertainty(parameters=space.parameters), ()
    if design.sampling is not None:
        raise DesignError("the parameters of a sampled design cannot be swept yet",
                          file=design.path, where="sweep" if design.sweep else "parameters",
                          hint="review the continuous design, or write the variants out")
    from .analysis.sweep_models import swept_variants

    if not swept_variants(design):
        raise DesignError("no plant variant that the parameters move can be swept (a "
                          "measured plant is never swept)", file=design.path,
                          where="parameters", hint="name parameters in a model plant or "
                                                   "the sensor")
    settle = band or design.requirements.settling_band or DEFAULT_SETTLING_BAND
    result = run_sweep(design, design.sweep or SweepSettings(), settling_band=settle,
                       executor=executor)
    fractions = pass_fractions(result, rs, limits)

    def analyse(at: Design, name: str):  # type: ignore[no-untyped-def]
        variant = next(v for v in at.variants if v.name == name)
        return analyze_variant(at, variant, min_phase_margin_deg=min_pm, settling_band=band)

    # Waivers apply as on any variant (decided before each finding is built); one that
    # matches nothing was reported already by evaluate().
    extra = uncertainty_findings(design, rs, limits, result, fractions, analyse, today=date)
    return (Uncertainty(parameters=space.parameters, sweep=result,
                        pass_fraction=MappingProxyType(fractions)), tuple(extra))
