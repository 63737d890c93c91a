"""``loopwarden verify``: check a signed PDF review and the inputs it names."""

from __future__ import annotations

import argparse

HELP = "check a signed PDF review"

EPILOG = """\
passes only when: the PDF carries exactly one PAdES signature; it is intact; the signing
certificate chains to --trust; it covers every byte of the file (nothing appended, no later
incremental update); the embedded evidence, read from the signed revision, is a
loopwarden-review/1 document whose embedded design, rule-set and measured-plant (CSV) files
hash to what it records; and the --design / --rules files given hash to the same values,
as do the CSV files the design names (read relative to the design file).

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
    parser.add_argument("--quiet", "-q", action="store_true",
                        help="print nothing; only the exit status tells")


def run(args: argparse.Namespace) -> int:
    from ..signing.verify import verify_pdf

    report = verify_pdf(args.pdf, trust=args.trust, design=args.design, rules=args.rules)
    if not args.quiet:
        for check in report.checks:
            mark = "ok  " if check.passed else "FAIL"
            print(f"  {mark} {check.name}: {check.detail}")
        failed = sum(1 for c in report.checks if not c.passed)
        if report.ok:
            print(f"verified: {args.pdf} (signed by {report.signer}; review verdict "
                  f"{report.verdict})")
        else:
            print(f"NOT verified: {args.pdf} ({failed} check{'s' if failed != 1 else ''} "
                  "failed)")
    return 0 if report.ok else 1
