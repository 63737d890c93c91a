"""``loopwarden verify``: check a signed PDF review and the inputs it names."""

from __future__ import annotations

import argparse

HELP = "check a signed PDF review"

EPILOG = """\
passes only when: the PDF carries exactly one PAdES signature; it is intact; the signing
certificate chains to --trust; it covers every byte of the file (nothing appended, no later
incremental update); the embedded evidence, read from the signed revision, is a
loopwarden-review/1 document whose embedded design, baseline, rule-set and measured-plant
(CSV) files hash to what it records; the --design / --baseline / --rules files given hash
to the same values, as do the CSV files the design names (read relative to the design
file); the bytes outside the signed range are the signature followed by zeros only; and
the evidence records the signing time the signature carries, with the review date neither
after it nor more than 3 days before it.

It prints the review date and the signing time (UTC) it read.

Without --trust the signature cannot be trusted and verification fails.

exit status: 0 verified, 1 a check failed, 2 unreadable input.
"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = EPILOG
    parser.add_argument("pdf", metavar="REVIEW.pdf", help="the signed PDF review")
    parser.add_argument("--trust", metavar="CERT.pem",
                        help="certificate the signer's certificate must chain to (PEM/DER)")
    parser.add_argument("--design", metavar="DESIGN.toml",
                        help="design file that must match the evidence's design.sha256")
    parser.add_argument("--rules", metavar="RULES.toml",
                        help="rule-set file that must match the evidence's ruleset.sha256")
    parser.add_argument("--baseline", metavar="OLD.toml",
                        help="baseline design file that must match the evidence's "
                             "baseline.design.sha256")
    parser.add_argument("--quiet", "-q", action="store_true",
                        help="print nothing; only the exit status tells")


def run(args: argparse.Namespace) -> int:
    from ..report.escape import for_terminal
    from ..signing.verify import verify_pdf

    report = verify_pdf(args.pdf, trust=args.trust, design=args.design, rules=args.rules,
                        baseline=args.baseline)
    if not args.quiet:
        # Names in the details come from the PDF under test: never sent to the terminal raw.
        lines = [f"  review date:  {report.review_date or 'not read'}",
                 f"  signing time: {report.signed_at or 'not read'}"]
        lines += [f"  {'ok  ' if c.passed else 'FAIL'} {c.name}: {c.detail}"
                  for c in report.checks]
        failed = sum(1 for c in report.checks if not c.passed)
        if report.ok:
            lines.append(f"verified: {args.pdf} (signed by {report.signer}; review verdict "
                         f"{report.verdict})")
        else:
            lines.append(f"NOT verified: {args.pdf} ({failed} check"
                         f"{'s' if failed != 1 else ''} failed)")
        print(for_terminal("\n".join(lines)))
    return 0 if report.ok else 1
