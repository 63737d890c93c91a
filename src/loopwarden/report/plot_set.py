"""The figure set of a review: which figures each variant gets, and drawing them (in
worker processes when ``LOOPWARDEN_FIGURE_JOBS`` allows).
"""

from __future__ import annotations

from collections.abc import Sequence

from ..analysis.results import LoopAnalysis
from ..design.model import Design
from .plot_frequency import bode_figure, nyquist_figure
from .plot_pole_zero import _open_loop_poles, closed_loop_zeros, pole_zero_figure
from .plot_sensitivity import sensitivity_figure
from .plot_style import FrequencyUnit, Plot
from .plot_time import time_figure

#: Figures that need a model of the plant, with why a measured plant has none of them.
MODEL_FIGURES = {
    "poles": "A pole-zero map needs the plant's poles and zeros, and a measured frequency "
             "response has none",
    "time": "Step and ramp responses need a model to simulate, and a frequency response "
            "known on a finite range does not determine one",
}


def _figure_keys(analysis: LoopAnalysis) -> tuple[str, ...]:
    """The figures of one variant in page order (see :func:`variant_plots`)."""
    if analysis.coverage is not None:           # measured plant
        return ("bode", "nyquist", "sensitivity")
    return ("bode", "nyquist", "poles", "time", "sensitivity")


def _one_plot(design: Design, analysis: LoopAnalysis, key: str) -> Plot:
    """The figure ``key`` of one variant."""
    unit = FrequencyUnit.of(design)
    if key == "bode":
        return bode_figure(analysis, unit)
    if key == "nyquist":
        return nyquist_figure(analysis)
    if key == "poles":
        return pole_zero_figure(analysis, closed_loop_zeros(analysis),
                                open_loop_poles=_open_loop_poles(analysis))
    if key == "time":
        return time_figure(analysis)
    return sensitivity_figure(
        analysis, unit, reference_band_rad_s=design.requirements.reference_band_rad_s)


def variant_plots(design: Design, analysis: LoopAnalysis) -> dict[str, Plot]:
    """Every figure of one variant, keyed by name, in page order.

    A measured plant has no ``poles`` or ``time`` figure (see :data:`MODEL_FIGURES`):
    an empty frame would suggest something was drawn and lost.
    """
    return {key: _one_plot(design, analysis, key) for key in _figure_keys(analysis)}


#: Environment variable: how many processes draw the figures of a review (1: this one).
FIGURE_JOBS_ENV = "LOOPWARDEN_FIGURE_JOBS"


#: Below this many figures the worker start-up costs more than it saves.
_MIN_PARALLEL_FIGURES = 6


#: What a forked worker draws: (design, analyses, tasks), set in the parent before the fork.
_WORK: tuple[Design, Sequence[LoopAnalysis], list[tuple[int, str]]] | None = None


def _draw_task(i: int) -> Plot:
    assert _WORK is not None
    design, analyses, tasks = _WORK
    n, key = tasks[i]
    return _one_plot(design, analyses[n], key)


def _figure_jobs(count: int) -> int:
    """Processes to draw ``count`` figures: 1 unless there are several and spare cores."""
    import os
    import sys

    text = os.environ.get(FIGURE_JOBS_ENV, "").strip()
    if text.isdigit() and int(text) >= 1:
        jobs = int(text)
    else:
        try:
            jobs = len(os.sched_getaffinity(0))
        except AttributeError:                  # not Linux
            jobs = os.cpu_count() or 1
    if count < _MIN_PARALLEL_FIGURES or not sys.platform.startswith("linux"):
        return 1
    import multiprocessing
    import threading

    if multiprocessing.current_process().daemon:   # a daemon may not have children
        return 1
    if threading.active_count() > 1:    # forking a threaded process can deadlock the child
        return 1
    return max(1, min(jobs, 4, count))


def all_variant_plots(design: Design, analyses: Sequence[LoopAnalysis]
                      ) -> list[dict[str, Plot]]:
    """:func:`variant_plots` of every analysis, in order: the same figures, drawn in forked
    worker processes when there are several variants' worth and more than one core.

    Drawing is matplotlib's pure-Python artist walk, one core per figure; on two cores the
    fifteen figures of three variants take about half the time.  The workers are forked
    (they share the imported matplotlib and the analyses, nothing is pickled but the
    finished rasters).  ``LOOPWARDEN_FIGURE_JOBS=1`` draws everything in this process.
    """
    tasks = [(n, key) for n, a in enumerate(analyses) for key in _figure_keys(a)]
    jobs = _figure_jobs(len(tasks))
    plots: list[Plot] | None = None
    if jobs > 1:
        plots = _draw_forked(design, analyses, tasks, jobs)
    if plots is None:
        plots = [_one_plot(design, analyses[n], key) for n, key in tasks]
    out: list[dict[str, Plot]] = [{} for _ in analyses]
    for (n, key), plot in zip(tasks, plots, strict=True):
        out[n][key] = plot
    return out


def _draw_forked(design: Design, analyses: Sequence[LoopAnalysis],
                 tasks: list[tuple[int, str]], jobs: int) -> list[Plot] | None:
    """The figures of ``tasks`` drawn by ``jobs`` forked processes; None when no process
    could be started (the caller then draws them itself)."""
    import contextlib
    import multiprocessing
    import sys

    global _WORK
    # The time plots cost about twice the others: hand them out first.
    order = sorted(range(len(tasks)), key=lambda i: tasks[i][1] != "time")
    for stream in (sys.stdout, sys.stderr):      # a child must not re-flush our buffers
        with contextlib.suppress(OSError, ValueError, AttributeError):
            stream.flush()
    _WORK = (design, analyses, tasks)
    try:
        ctx = multiprocessing.get_context("fork")
        with ctx.Pool(processes=jobs) as pool:
            drawn = pool.map(_draw_task, order, chunksize=1)
    except OSError:                              # no process could be started
        return None
    finally:
        _WORK = None
    plots: list[Plot | None] = [None] * len(tasks)
    for i, plot in zip(order, drawn, strict=True):
        plots[i] = plot
    return [p for p in plots if p is not None]
