"""``loopwarden review``: review one design against a rule set and write the outputs.

Everything is computed and rendered in memory first; only then are the files written, each
atomically.  Bad input (design, rule set, arguments, output folders) leaves nothing
written.  Exit status: 0 nothing fails, 1 a finding fails (or errors), 2 bad input,
3 internal error.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime as dt
import hashlib
import os
import sys
from pathlib import Path
from typing import Any

HELP = "review one design against a rule set"

EPILOG = """\
outputs: --json (evidence, schema loopwarden-review/1), --junit (CI), --markdown (summary),
--out (PDF review, optionally signed with --sign). A compact findings table goes to
stdout unless --quiet.

existing files: an output may replace only a file loopwarden wrote (a review JSON, a PDF
review, JUnit or Markdown with loopwarden's marker comment); --force allows replacing other
regular files. Never replaced: an input of the run (design, baseline, rule sets, measured
plant CSVs, key, passphrase file), a symbolic link, a pipe, a device or a folder.

date: --date, else SOURCE_DATE_EPOCH, else today (UTC); waiver expiry is judged on it.
With --sign the date may lie at most 3 days before the signing time and never after it;
the PDF records both the review date and the signing time.

exit status: 0 nothing fails (waived counts as not failing), 1 a finding fails or could
not be computed, 2 bad input (nothing written), 3 internal error.
"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = EPILOG
    parser.add_argument("design", metavar="DESIGN", help="design file (TOML)")
    parser.add_argument("--rules", metavar="SET", default=None,
                        help="shipped rule set name (general, motion-servo, "
                             "process-control) or a rule-set file; default general")
    parser.add_argument("--baseline", metavar="OLD", default=None,
                        help="previous design file to compare against (regression rules)")
    parser.add_argument("--out", metavar="PDF", help="write the PDF review here")
    parser.add_argument("--json", metavar="FILE", help="write the JSON evidence here")
    parser.add_argument("--junit", metavar="FILE", help="write JUnit XML here")
    parser.add_argument("--markdown", metavar="FILE", help="write a Markdown summary here")
    parser.add_argument("--sign", metavar="KEY.p12", help="sign the PDF with this PKCS#12 key")
    parser.add_argument("--passphrase-file", metavar="FILE",
                        help="file holding the key's passphrase (first line)")
    parser.add_argument("--date", metavar="YYYY-MM-DD",
                        help="review date (default SOURCE_DATE_EPOCH or today, UTC)")
    parser.add_argument("--force", action="store_true",
                        help="replace an existing output file loopwarden did not write "
                             "(never an input of the run, a link, a pipe or a device)")
    parser.add_argument("--quiet", "-q", action="store_true",
                        help="print nothing; only the exit status tells")
    parser.add_argument("--sweep", action="store_true",
                        help="sweep the design's [parameters] even without a [sweep] table "
                             "(2000 samples, seed 0, corners, worst-case search)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="run the sweep's chunks on this Dask scheduler "
                             "(tcp://host:8786; needs loopwarden[dask])")
    parser.add_argument("--worst-variants", action="store_true",
                        help="print the sweep's worst points as [[plant.variants]] tables "
                             "to paste into a design file")


def _embedded(review: object, evidence: bytes) -> dict[str, bytes]:
    """Files embedded in the PDF: the evidence JSON and every input file as read.

    ``design.toml`` and ``rules.toml`` hash to ``design.sha256`` / ``ruleset.sha256`` of
    the evidence; sets the rule set extends follow as ``rules-<id>.toml``; the CSV of each
    measured plant as ``plant-<variant>.csv``, hashing to its
    ``design.measured_plants[j].sha256``.
    """
    from ..errors import UsageError
    from ..report.review import Review
    from ..signing.verify import plant_attachment_names

    assert isinstance(review, Review)
    files = {"review.json": evidence, "design.toml": review.design.text.encode("utf-8")}
    for i, f in enumerate(review.ruleset.files):
        files["rules.toml" if i == 0 else f"rules-{f.id}.toml"] = f.text.encode("utf-8")
    if review.baseline is not None:
        files["baseline.toml"] = review.baseline.design.text.encode("utf-8")
    measured = [v for v in review.design.variants if v.measured is not None]
    names = plant_attachment_names([v.name for v in measured])
    for v in measured:
        assert v.measured is not None
        try:
            data = Path(v.measured.path).read_bytes()
        except OSError as exc:
            raise UsageError(f"cannot read the measured response again to embed it: "
                             f"{exc.strerror or exc}", file=v.measured.path) from exc
        if hashlib.sha256(data).hexdigest() != v.measured.sha256:
            # The evidence records the file the analysis read; embed nothing else.
            raise UsageError("the measured response changed while the review ran",
                             file=v.measured.path, hint="run the review again")
        files[names[v.name]] = data
    return files


def _signing_time_now(date: object, args: argparse.Namespace) -> dt.datetime:
    """Now (UTC, whole seconds), after checking the review date may be signed at it."""
    from ..errors import UsageError
    from ..signing.review_age import MAX_REVIEW_AGE_DAYS, review_date_problem

    assert isinstance(date, dt.date)
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    problem = review_date_problem(date, now)
    if problem is not None:
        source = (f"--date {args.date}" if args.date is not None else
                  "SOURCE_DATE_EPOCH" if os.environ.get("SOURCE_DATE_EPOCH") else "the date")
        raise UsageError(f"{source}: {problem}",
                         hint=f"a signed review is dated at most {MAX_REVIEW_AGE_DAYS} days "
                              "before it is signed, never after; nothing was written")
    return now


def _measured_files(*designs: object) -> list[Path]:
    """The measured-plant CSV files the designs name (inputs of the run)."""
    from ..design.model import Design

    out = []
    for d in designs:
        if isinstance(d, Design):
            out += [Path(v.measured.path) for v in d.variants if v.measured is not None]
    return out


def run(args: argparse.Namespace) -> int:
    from ..design.loader import load_design
    from ..errors import UsageError
    from ..report.atomic import check_outputs
    from ..review_run import review_date, run_review
    from ..ruleset.loader import load_ruleset
    from ..signing.review_age import signing_time_text

    date = review_date(args.date)
    if args.sign and not args.out:
        raise UsageError("--sign needs --out (the PDF to sign)")
    if args.passphrase_file and not args.sign:
        raise UsageError("--passphrase-file is only used with --sign")
    if args.sign:
        _signing_time_now(date, args)           # fail fast: a back-dated signed review
    outputs = [(opt, Path(p)) for opt, p in (("--out", args.out), ("--json", args.json),
                                             ("--junit", args.junit),
                                             ("--markdown", args.markdown)) if p]
    inputs = [Path(p) for p in (args.design, args.baseline, args.sign, args.passphrase_file)
              if p]
    check_outputs(outputs, inputs=inputs, force=args.force)   # before any analysis

    design = load_design(args.design)
    baseline = load_design(args.baseline) if args.baseline else None
    ruleset = load_ruleset(args.rules)
    inputs += [Path(f.path) for f in ruleset.files] + _measured_files(design, baseline)
    check_outputs(outputs, inputs=inputs, force=args.force)
    passphrase, signer = None, None
    if args.sign:
        # Open the key before the analysis: a wrong passphrase is bad input (exit 2), and
        # the signer's name belongs on the cover and in the evidence.
        from ..signing.keys import read_passphrase, signer_name

        passphrase = read_passphrase(args)
        signer = signer_name(args.sign, passphrase)

    if (args.sweep or args.scheduler or args.worst_variants) and design.parameters is None:
        what = ("--sweep" if args.sweep else "--scheduler" if args.scheduler
                else "--worst-variants")
        raise UsageError(f"{what}: the design has no [parameters] to sweep",
                         file=args.design, hint="name uncertain plant numbers in a "
                                                "[parameters] table")
    if args.scheduler:
        from ..cluster import connect, executor

        with connect(args.scheduler) as client:
            review = run_review(design, ruleset, baseline=baseline, today=date,
                                sweep=args.sweep or args.worst_variants,
                                executor=executor(client))
    else:
        review = run_review(design, ruleset, baseline=baseline, today=date,
                            sweep=args.sweep or args.worst_variants)
    signed_at = None
    if signer is not None:
        # The signing time goes into the evidence and the signature alike (to the second).
        signed_at = _signing_time_now(date, args)
        review = dataclasses.replace(review, run=dataclasses.replace(
            review.run, signer=signer, signed_at=signing_time_text(signed_at)))
    figures = None
    if args.out:
        # The figures start drawing in forked workers now, while the JSON, JUnit and
        # Markdown are rendered and reportlab (and pyHanko) load here.
        from ..report.figure_pool import FigureJob

        figures = FigureJob(review.design, review.analyses)
    try:
        return _write_outputs(review, args, inputs, passphrase, signed_at, figures)
    finally:
        if figures is not None:
            figures.close()


def _write_outputs(review: Any, args: argparse.Namespace, inputs: list[Path],
                   passphrase: bytes | None, signed_at: dt.datetime | None,
                   figures: Any) -> int:
    from ..report import renderer
    from ..report.atomic import write_outputs

    # Everything is rendered before the first file is written.
    evidence = renderer("json").render(review)
    files: dict[Path, bytes] = {}
    if args.json:
        files[Path(args.json)] = evidence
    if args.junit:
        files[Path(args.junit)] = renderer("junit").render(review)
    if args.markdown:
        files[Path(args.markdown)] = renderer("markdown").render(review)
    if args.out:
        files[Path(args.out)] = _pdf(review, evidence, args, passphrase, signed_at, figures)
    table = renderer("terminal").render(review).decode("utf-8")
    write_outputs(files, inputs=inputs, force=args.force)

    if not args.quiet:
        from ..report.escape import for_terminal

        sys.stdout.write(table)
        if args.worst_variants:
            from ..report.escape import for_terminal
            from ..report.worst_variants import worst_variants_toml

            sys.stdout.write(for_terminal(worst_variants_toml(review)))
        for path in files:
            print(for_terminal(f"wrote {path}"))
    return 0 if review.verdict == "pass" else 1


def _pdf(review: object, evidence: bytes, args: argparse.Namespace,
         passphrase: bytes | None, signed_at: dt.datetime | None, figures: Any = None
         ) -> bytes:
    from ..errors import UsageError

    try:
        from ..report.pdf import render_pdf
    except ModuleNotFoundError as exc:
        if exc.name != "loopwarden.report.pdf":
            raise
        raise UsageError("PDF output is not available in this build") from exc
    if args.sign:
        from ..signing.sign import preload, sign_pdf

        preload()                           # while the figure workers draw
    pdf: bytes = render_pdf(review, embedded=_embedded(review, evidence), figures=figures)
    if args.sign:
        pdf = sign_pdf(pdf, args.sign, passphrase, signing_time=signed_at)
    return pdf
