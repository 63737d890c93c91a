"""``loopwarden batch``: review many designs in parallel; one JSON review each, summaries.

The work is in :mod:`loopwarden.batch`; this module parses the arguments, reports and maps
the outcome to the exit status.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

HELP = "review many designs in parallel"

EPILOG = """\
inputs: design files and folders; a folder contributes every *.toml directly inside it
(not recursive), sorted by name.

outputs, in --out (created when missing):
  <design stem>.json  the JSON review of each design (schema loopwarden-review/1); a stem
                      met twice gets -2, -3, ... in input order
  summary.csv         one row per design and variant (figures, verdict, n_fail, n_warn,
                      error); a design that could not be read has one row with the error
  summary.md          one table row per design: verdict and worst findings
A file of these names may already be in --out only if loopwarden wrote it (a review JSON
with its schema key, or an earlier batch's summary); anything else (or a link, pipe,
device or folder of such a name) stops the batch before any work, and nothing is
written. Delete or move such files, or choose another folder.

progress: a bar on stderr when it is a terminal, one line per design otherwise, nothing
with --quiet.

time: each design may take --timeout seconds (default 120); a review that takes longer is
stopped and its row in summary.csv / summary.md says so (verdict timeout). An entry that
is no regular file (a FIFO, a device, a folder named *.toml) is skipped unopened with an
error row. The other designs go on either way.

exit status: 0 every design passes, 1 a design fails, 2 a design could not be read or
timed out (the others are still reviewed) or bad arguments, 3 internal error.
"""


def _jobs(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"need at least 1 worker, got {n}")
    return n


def _seconds(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected seconds, got {text!r}") from None
    if not x >= 0 or x == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a finite number of seconds ≥ 0, got "
                                         f"{text!r}")
    return x


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = EPILOG
    parser.add_argument("inputs", nargs="+", metavar="DIR_OR_FILE",
                        help="design files (TOML) or folders of them")
    parser.add_argument("--out", metavar="OUTDIR", required=True,
                        help="folder for the reviews and summaries")
    parser.add_argument("--jobs", "-j", metavar="N", type=_jobs, default=None,
                        help="most worker processes (default: min(2, number of CPUs)); "
                             "each gets at least 4 designs, one worker runs in this process")
    parser.add_argument("--rules", metavar="SET", default=None,
                        help="shipped rule set name or a rule-set file; default general")
    parser.add_argument("--date", metavar="YYYY-MM-DD",
                        help="review date (default SOURCE_DATE_EPOCH or today, UTC)")
    parser.add_argument("--timeout", metavar="SECONDS", type=_seconds, default=120.0,
                        help="stop a design's review after this many seconds and record it "
                             "as timed out (default 120; 0: no limit)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="review the designs on the workers of this Dask scheduler "
                             "(tcp://host:8786; needs loopwarden[dask]; the workers must "
                             "see the same paths)")
    parser.add_argument("--quiet", "-q", action="store_true",
                        help="no progress and no summary; only the exit status tells")


def run(args: argparse.Namespace) -> int:
    from ..batch import collect_inputs, run_batch

    inputs = collect_inputs(args.inputs)
    out = Path(args.out)
    try:
        result = run_batch(inputs, out, ruleset=args.rules, jobs=args.jobs, date=args.date,
                           progress=None if args.quiet else sys.stderr,
                           timeout_s=args.timeout or None, scheduler=args.scheduler)
    except KeyboardInterrupt:
        # Reviews finished so far are in place; the summaries are not written.
        print(f"loopwarden: batch interrupted; no summary written in {out}", file=sys.stderr)
        return 130
    if not args.quiet:
        n = len(result.outcomes)
        not_read = (result.count("error") + result.count("internal")
                    + result.count("timeout"))
        print(f"batch: {n} design{'s' if n != 1 else ''} in {result.seconds:.1f} s: "
              f"{result.count('pass')} pass, {result.count('fail')} fail, {not_read} could "
              f"not be reviewed")
        for o in result.outcomes:
            if o.error is not None:
                print(f"  {o.verdict.upper()} {o.path}: {o.error}")
        print(f"wrote {out / 'summary.csv'}, {out / 'summary.md'} and "
              f"{n - not_read} review{'s' if n - not_read != 1 else ''}")
    return result.exit_code
