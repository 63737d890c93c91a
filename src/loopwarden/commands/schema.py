"""``loopwarden schema``: print the JSON Schema of the review evidence."""

from __future__ import annotations

import argparse
import sys

HELP = "print the JSON Schema of the review JSON"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.epilog = ("The schema describes the file 'loopwarden review --json' writes "
                     "(schema loopwarden-review/1); it ships in the package as "
                     "loopwarden/schema/review.schema.json.")


def run(args: argparse.Namespace) -> int:
    from .. import schema

    sys.stdout.write(schema.text())
    return 0
