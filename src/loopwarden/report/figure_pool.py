"""Figures drawn ahead: forked workers start drawing as soon as the analysis is done.

``review --out`` starts a :class:`FigureJob` right after the analysis; while the workers
draw, this process renders the JSON, JUnit and Markdown, imports reportlab (and pyHanko
when signing) and lays out the text pages.  :meth:`FigureJob.result` then hands over the
same figures :func:`loopwarden.report.plots.all_variant_plots` would draw, in the same
order, so the PDF is byte-identical.  When the figures are too few, only one core is free,
or no process can be forked, nothing starts and :meth:`result` draws them here.
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from ..analysis.results import LoopAnalysis
    from ..design.model import Design
    from .plots import Plot

__all__ = ["FigureJob"]

#: What a forked worker draws: (design, analyses, tasks), set before the fork.
_WORK: tuple[Design, Sequence[LoopAnalysis], list[tuple[int, str]]] | None = None


def _draw(i: int) -> Plot:
    from .plots import _one_plot

    assert _WORK is not None
    design, analyses, tasks = _WORK
    n, key = tasks[i]
    return _one_plot(design, analyses[n], key)


class FigureJob:
    """The figures of every variant of a review, drawn in forked workers from now on."""

    def __init__(self, design: Design, analyses: Sequence[LoopAnalysis]) -> None:
        from .plots import _figure_jobs, _figure_keys

        self.design, self.analyses = design, analyses
        self.tasks = [(n, key) for n, a in enumerate(analyses) for key in _figure_keys(a)]
        # The time plots cost about twice the others: hand them out first.
        self._order = sorted(range(len(self.tasks)), key=lambda i: self.tasks[i][1] != "time")
        self._pool: Any = None
        self._pending: Any = None
        jobs = _figure_jobs(len(self.tasks))
        if jobs > 1:
            self._start(jobs)

    def _start(self, jobs: int) -> None:
        import multiprocessing

        global _WORK
        for stream in (sys.stdout, sys.stderr):  # a child must not re-flush our buffers
            with contextlib.suppress(OSError, ValueError, AttributeError):
                stream.flush()
        _WORK = (self.design, self.analyses, self.tasks)
        try:
            self._pool = multiprocessing.get_context("fork").Pool(processes=jobs)
            self._pending = self._pool.map_async(_draw, self._order, chunksize=1)
        except OSError:                          # no process could be started
            self._pool = self._pending = None
        finally:
            _WORK = None                         # the workers hold their own copy

    def result(self) -> list[dict[str, Plot]]:
        """Every variant's figures keyed by name, in page order (waits for the workers)."""
        from .plots import _one_plot

        plots: list[Plot]
        if self._pending is not None:
            try:
                drawn = self._pending.get()
            finally:
                self._pool.close()
                self._pool.join()
                self._pool = self._pending = None
            slots: list[Plot | None] = [None] * len(self.tasks)
            for i, plot in zip(self._order, drawn, strict=True):
                slots[i] = plot
            plots = [p for p in slots if p is not None]
        else:
            plots = [_one_plot(self.design, self.analyses[n], key) for n, key in self.tasks]
        out: list[dict[str, Plot]] = [{} for _ in self.analyses]
        for (n, key), plot in zip(self.tasks, plots, strict=True):
            out[n][key] = plot
        return out

    def close(self) -> None:
        """Stop the workers without waiting for their figures (an error path)."""
        if self._pool is not None:
            self._pool.terminate()
            self._pool.join()
            self._pool = self._pending = None
