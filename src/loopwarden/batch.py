"""Review many designs in parallel worker processes.

The parent collects the inputs, checks every output path, hands chunks of designs to a
:class:`concurrent.futures.ProcessPoolExecutor` (``spawn`` start method, so it behaves the
same on every platform and a worker only imports what a review needs: no matplotlib, no
reportlab) and writes ``summary.csv`` and ``summary.md`` once every design is done.  Each
worker writes its designs' JSON reviews itself (atomically), so the evidence never travels
through the pipe.

Output folder policy: the folder is created when missing.  A file the batch would write
may already exist only when loopwarden wrote it: a ``.json`` file whose top-level
``schema`` is ``loopwarden-review/1``, a ``summary.csv`` starting with the batch header
line, a ``summary.md`` starting with the batch title.  Anything else (a user's file, an
input design) stops the batch before any design is reviewed.  The review of a design that
can no longer be read is removed, so the folder never shows stale evidence for it.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
import multiprocessing
import os
import signal
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from pathlib import Path
from typing import IO, Any

from .batch_inputs import (  # noqa: F401  (re-exported: the old import path stays valid)
    _REVIEW_SCHEMA,
    COLUMNS,
    MD_TITLE,
    SUMMARY_CSV,
    SUMMARY_MD,
    _csv_header,
    _ours,
    check_out_dir,
    collect_inputs,
    output_names,
)
from .errors import UsageError, UserError

__all__ = ["COLUMNS", "BatchResult", "DesignOutcome", "Progress", "collect_inputs",
           "default_jobs", "output_names", "review_file", "run_batch"]

_WORST = 3                                  # findings named per design in summary.md
_PER_WORKER = 4                             # fewer designs than this per worker: fewer workers
#: Wall time allowed per design (s) unless --timeout says otherwise.  Every design the
#: input limits accept reviews well inside it (bench/fuzz_designs.py measures it).
DEFAULT_TIMEOUT_S = 120.0

Row = dict[str, Any]


@dataclasses.dataclass(frozen=True, slots=True, kw_only=True)
class DesignOutcome:
    """What one design gave: its summary rows, verdict, counts, worst findings or error.

    ``verdict`` is ``"pass"``, ``"fail"``, ``"error"`` (bad input: the design file, its
    limits or waivers, an entry that is no regular file, or its review could not be
    written), ``"timeout"`` (the review took longer than the per-design timeout and was
    stopped) or ``"internal"`` (a bug in loopwarden while reviewing it).
    """

    index: int
    path: str
    output: str
    design: str | None
    verdict: str
    rows: tuple[Row, ...]
    n_fail: int = 0
    n_warn: int = 0
    worst: tuple[str, ...] = ()
    error: str | None = None


@dataclasses.dataclass(frozen=True, slots=True, kw_only=True)
class BatchResult:
    outcomes: tuple[DesignOutcome, ...]     # in input order
    out_dir: Path
    seconds: float

    def count(self, verdict: str) -> int:
        return sum(1 for o in self.outcomes if o.verdict == verdict)

    @property
    def exit_code(self) -> int:
        """3 a design hit an internal error, 2 one could not be read or timed out, 1 one
        fails, else 0."""
        if self.count("internal"):
            return 3
        if self.count("error") or self.count("timeout"):
            return 2
        return 1 if self.count("fail") else 0


def default_jobs() -> int:
    """``min(2, cpu count)``: the machines this runs on are small and shared."""
    return max(1, min(2, os.cpu_count() or 1))


# --------------------------------------------------------------------------- one design
_RULESETS: dict[str, Any] = {}             # per worker process: rule-set path → RuleSet


def _ruleset(path: str) -> Any:
    from .ruleset.loader import load_ruleset

    if path not in _RULESETS:
        _RULESETS[path] = load_ruleset(path)
    return _RULESETS[path]


def _number(x: Any) -> Any:
    """Floats as they are (inf stays inf; pandas writes it as ``inf``), None for n/a."""
    return None if x is None else float(x) if isinstance(x, float | int) else x


def _rows(review: Any, file: str) -> tuple[Row, ...]:
    rows = []
    for a in review.analyses:
        mine = [f for f in review.findings if f.variant == a.variant]
        n_fail = sum(f.status.blocks for f in mine)
        step = a.step

        def known(check: str, value: Any, a: Any = a) -> Any:
            # A figure the analysis could not decide (a placeholder) is left empty.
            return None if check in a.undecided else value

        rows.append({
            "design": review.design.name, "file": file, "variant": a.variant,
            "verdict": "fail" if n_fail else "pass",
            "closed_loop_stable": known("closed_loop_stability",
                                        a.stability.closed_loop_stable),
            "gain_margin_db": known("gain_margin", _number(a.margins.gain_margin_db)),
            "phase_margin_deg": known("phase_margin", _number(a.margins.phase_margin_deg)),
            "delay_margin_s": known("delay_margin", _number(a.margins.delay_margin_s)),
            "peak_sensitivity": known("peak_sensitivity",
                                      _number(a.sensitivity.peak_sensitivity)),
            "peak_complementary": known("peak_complementary",
                                        _number(a.sensitivity.peak_complementary)),
            "disk_margin": known("disk_margin", _number(a.sensitivity.disk_margin)),
            "system_type": known("system_type", a.tracking.system_type),
            "kv": known("error_constant", _number(a.tracking.kv)),
            "overshoot_pct": None if step is None else _number(step.overshoot_pct),
            "settling_time_s": None if step is None else _number(step.settling_time_s),
            "n_fail": n_fail, "n_warn": sum(f.status.value == "warn" for f in mine),
            "error": None,
        })
    return tuple(rows)


def _worst(review: Any) -> tuple[str, ...]:
    """Up to three blocking findings, else warnings: ``rule [variant]: measured (limit)``."""
    from .report.markdown import limit_text
    from .ruleset.checks import fmt

    ranked = ([f for f in review.findings if f.status.blocks]
              or [f for f in review.findings if f.status.value == "warn"])
    out = []
    for f in ranked[:_WORST]:
        measured = fmt(f.measured, f.unit) if f.measured is not None else f.status.value
        limit = limit_text(f)
        out.append(f"{f.rule} [{f.variant or 'design'}]: {measured}"
                   + (f" ({limit})" if limit else ""))
    if len(ranked) > _WORST:
        out.append(f"… {len(ranked) - _WORST} more")
    return tuple(out)


def _error_row(path: str, message: str, verdict: str) -> Row:
    row: Row = dict.fromkeys(COLUMNS)
    row |= {"file": path, "verdict": verdict, "error": message}
    return row


class DesignTimeout(BaseException):
    """Raised inside a review when its per-design time is up (see :func:`_time_limit`).

    A BaseException, so that no handler of a single check or part swallows it.
    """


@contextlib.contextmanager
def _time_limit(seconds: float | None) -> Iterator[None]:
    """Raise :class:`DesignTimeout` in this thread after ``seconds`` of wall time.

    Uses the real-time interval timer (SIGALRM), so it works in the main thread of a
    process (a batch worker, or the batch itself with one worker) on POSIX systems;
    elsewhere the review runs without a limit.  The timer interrupts Python code; a single
    numerical library call finishes first (the input limits keep each one short).
    """
    usable = (seconds is not None and seconds > 0 and hasattr(signal, "setitimer")
              and threading.current_thread() is threading.main_thread())
    if not usable:
        yield
        return

    def expire(signum: int, frame: Any) -> None:
        raise DesignTimeout()

    previous = signal.signal(signal.SIGALRM, expire)
    signal.setitimer(signal.ITIMER_REAL, float(seconds))  # type: ignore[arg-type]
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0.0)
        signal.signal(signal.SIGALRM, previous)


def _warm_imports() -> None:
    """Import what a review loads lazily before its clock starts: the timeout then never
    interrupts an import (which could leave a module half-initialised in this worker)."""
    import importlib

    for name in ("scipy.interpolate", "loopwarden.analysis.time_response",
                 "loopwarden.analysis.integral_alternative", "loopwarden.analysis.discrete_loop",
                 "loopwarden.analysis.measured", "loopwarden.analysis.pole_zero",
                 "loopwarden.analysis.regression", "loopwarden.report.json_out",
                 "loopwarden.ruleset.evaluate"):
        importlib.import_module(name)


def review_file(index: int, path: str, output: str, ruleset_path: str, date: str,
                tool_version: str | None = None, timeout_s: float | None = None
                ) -> DesignOutcome:
    """Review one design file and write its JSON review to ``output``.

    Never raises for the design's own problems: bad input gives ``error``, a review
    longer than ``timeout_s`` seconds ``timeout``, a bug ``internal``, each with the
    message in the outcome (and its summary row).
    """
    from .design.loader import load_design
    from .report import renderer
    from .report.atomic import write_outputs
    from .review_run import run_review

    if timeout_s:
        _warm_imports()
    try:
        with _time_limit(timeout_s):
            design = load_design(path)
            review = run_review(design, _ruleset(ruleset_path), today=date,
                                tool_version=tool_version)
            evidence = renderer("json").render(review)
        write_outputs({Path(output): evidence}, inputs=[Path(path)])
    except DesignTimeout:
        msg = (f"skipped: the review took longer than {timeout_s:g} s (--timeout) and was "
               "stopped")
        return DesignOutcome(index=index, path=path, output=output, design=None,
                             verdict="timeout", error=msg,
                             rows=(_error_row(path, msg, "timeout"),))
    except UserError as exc:
        msg = str(exc)
        return DesignOutcome(index=index, path=path, output=output, design=None,
                             verdict="error", error=msg,
                             rows=(_error_row(path, msg, "error"),))
    except Exception as exc:  # noqa: BLE001 - one broken design must not stop the batch
        msg = f"internal error ({type(exc).__name__}: {exc}); please report it"
        return DesignOutcome(index=index, path=path, output=output, design=None,
                             verdict="internal", error=msg,
                             rows=(_error_row(path, msg, "internal"),))
    rows = _rows(review, path)
    return DesignOutcome(index=index, path=path, output=output, design=design.name,
                         verdict=review.verdict, rows=rows,
                         n_fail=sum(r["n_fail"] for r in rows),
                         n_warn=sum(1 for f in review.findings if f.status.value == "warn"),
                         worst=_worst(review))


def review_chunk(tasks: Sequence[tuple[int, str, str]], ruleset_path: str, date: str,
                 tool_version: str | None, timeout_s: float | None = None
                 ) -> list[DesignOutcome]:
    """Worker entry point (module level, so the ``spawn`` start method can pickle it)."""
    return [review_file(i, p, o, ruleset_path, date, tool_version, timeout_s)
            for i, p, o in tasks]


# --------------------------------------------------------------------------- progress
class Progress:
    """Progress on a stream: a redrawn text bar on a terminal, one line per design else."""

    WIDTH = 30

    def __init__(self, total: int, stream: IO[str] | None, *, bar: bool | None = None):
        self.total, self.done, self.stream = total, 0, stream
        self.bar = bool(stream is not None and stream.isatty()) if bar is None else bar
        self.failed = self.not_reviewed = 0
        self._last = 0.0

    def update(self, outcome: DesignOutcome) -> None:
        self.done += 1
        self.failed += outcome.verdict == "fail"
        self.not_reviewed += outcome.verdict in ("error", "internal", "timeout")
        if self.stream is None:
            return
        if not self.bar:
            what = outcome.verdict + (f": {outcome.error}" if outcome.error else "")
            self.stream.write(f"[{self.done}/{self.total}] {outcome.path}: {what}\n")
            self.stream.flush()
            return
        now = time.monotonic()
        if now - self._last >= 0.1 or self.done == self.total:   # redraw ≤ 10 times a second
            self._last = now
            filled = self.WIDTH * self.done // max(self.total, 1)
            self.stream.write(f"\r[{'#' * filled}{'.' * (self.WIDTH - filled)}] "
                              f"{self.done}/{self.total} designs, {self.failed} fail, "
                              f"{self.not_reviewed} not reviewed")
            if self.done == self.total:
                self.stream.write("\n")
            self.stream.flush()


# --------------------------------------------------------------------------- the run
def _chunks(tasks: list[tuple[int, str, str]], jobs: int) -> list[list[tuple[int, str, str]]]:
    # Several designs per round trip keep the pipe cheap; about eight chunks per worker
    # keep the load balanced when some designs take much longer than others.
    size = max(1, min(16, math.ceil(len(tasks) / (8 * jobs))))
    return [tasks[i:i + size] for i in range(0, len(tasks), size)]


def _in_parallel(tasks: list[tuple[int, str, str]], jobs: int, args: tuple[Any, ...],
                 on_done: Callable[[DesignOutcome], None]) -> list[DesignOutcome]:
    outcomes: list[DesignOutcome] = []
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=jobs, mp_context=context) as pool:
        pending: set[Future[list[DesignOutcome]]] = {
            pool.submit(review_chunk, chunk, *args) for chunk in _chunks(tasks, jobs)}
        try:
            while pending:
                done, pending = wait(pending, return_when=FIRST_COMPLETED)
                for fut in done:
                    for outcome in fut.result():
                        outcomes.append(outcome)
                        on_done(outcome)
        except BaseException:
            pool.shutdown(wait=True, cancel_futures=True)
            raise
    return outcomes


def _on_dask(tasks: list[tuple[int, str, str]], scheduler: str, args: tuple[Any, ...],
             on_done: Callable[[DesignOutcome], None]) -> list[DesignOutcome]:
    """The chunks of designs reviewed by the workers of a Dask cluster (``--scheduler``)."""
    from .cluster import connect

    with connect(scheduler) as client:
        futures = [client.submit(review_chunk, chunk, *args, pure=False)
                   for chunk in _chunks(tasks, max(1, len(client.nthreads()) or 1))]
        outcomes: list[DesignOutcome] = []
        for fut in futures:                 # in order: the outcomes are sorted anyway
            for outcome in fut.result():
                outcomes.append(outcome)
                on_done(outcome)
    return outcomes


def run_batch(inputs: Sequence[Path], out_dir: Path, *, ruleset: str | None = None,
              jobs: int | None = None, date: str | None = None,
              progress: IO[str] | None = None, tool_version: str | None = None,
              timeout_s: float | None = DEFAULT_TIMEOUT_S,
              scheduler: str | None = None) -> BatchResult:
    """Review every design of ``inputs`` into ``out_dir``; write the two summaries.

    Parameters
    ----------
    inputs : sequence of Path
        Design files (see :func:`collect_inputs`).
    out_dir : Path
        Output folder (created when missing; see the module for what may be in it).
    ruleset : str, optional
        Shipped set name or rule-set file; default ``general``.
    jobs : int, optional
        Most worker processes; default :func:`default_jobs`.  Each worker gets at least
        four designs; with one worker the designs are reviewed in this process.
    date : str, optional
        Review date (YYYY-MM-DD); default as :func:`loopwarden.review_run.review_date`.
    progress : text stream, optional
        Where progress goes (a bar when it is a terminal); None for none.
    timeout_s : float, optional
        Wall time allowed per design (default :data:`DEFAULT_TIMEOUT_S`); a review that
        takes longer is stopped and gets a ``timeout`` row.  None or 0: no limit.
    scheduler : str, optional
        Address of a Dask scheduler: the designs are reviewed by its workers (``jobs`` is
        then not used); the workers must see the same paths.

    Raises
    ------
    UsageError, RuleSetError
        Bad arguments, a bad rule set or an output folder that cannot be used; nothing
        has been written then.
    """
    from .review_run import review_date
    from .ruleset.loader import load_ruleset

    t0 = time.perf_counter()
    jobs = default_jobs() if jobs is None else jobs
    if jobs < 1:
        raise UsageError(f"--jobs {jobs}: need at least one worker")
    day = review_date(date).isoformat()
    rs = load_ruleset(ruleset)              # bad rule set: exit 2 before any work
    inputs = list(inputs)
    names = output_names(inputs)
    check_out_dir(out_dir, names, [*inputs, *(Path(f.path) for f in rs.files)])
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"--out {out_dir}: cannot create the folder: "
                         f"{exc.strerror or exc}") from exc

    tasks = [(i, str(p), str(out_dir / n)) for i, (p, n) in enumerate(zip(inputs, names,
                                                                          strict=True))]
    bar = Progress(len(tasks), progress)
    args = (rs.path, day, tool_version, timeout_s)
    # Starting a worker (a fresh interpreter importing numpy and scipy) costs about as
    # much as a few small reviews: give each worker at least a few designs.
    workers = min(jobs, math.ceil(len(tasks) / _PER_WORKER))
    if scheduler is not None:
        outcomes = _on_dask(tasks, scheduler, args, bar.update)
    elif workers == 1:
        outcomes = []
        for task in tasks:
            outcomes.append(review_file(*task, *args))
            bar.update(outcomes[-1])
    else:
        outcomes = _in_parallel(tasks, workers, args, bar.update)
    outcomes.sort(key=lambda o: o.index)

    for o in outcomes:
        stale = Path(o.output)
        if o.error is not None and stale.exists():   # checked above: it is ours
            stale.unlink()
    result = BatchResult(outcomes=tuple(outcomes), out_dir=out_dir,
                         seconds=time.perf_counter() - t0)
    _write_summaries(result, rs, day, tool_version)
    return result


# The summaries read the records above (imported last: no import cycle).
from .batch_summary import _write_summaries, summary_csv, summary_md  # noqa: E402, F401
