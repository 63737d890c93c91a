"""Command line: parse, dispatch, map exceptions to exit codes. No maths here.

Each subcommand is a module in :mod:`loopwarden.commands` with ``HELP`` (one line),
``add_arguments(parser)`` and ``run(args) -> int``.  Modules are imported only when their
command runs, so ``--help`` does not load the numerical stack.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib
import os
import sys
import traceback
from collections.abc import Iterator, Sequence

from . import __version__
from .errors import LoopwardenError, UserError

EXIT_OK = 0
EXIT_FINDINGS_FAIL = 1
EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3

#: command name → (module, one-line help). Explicit, greppable, no import magic.
COMMANDS: dict[str, tuple[str, str]] = {
    "review": ("loopwarden.commands.review", "review one design against a rule set"),
    "rules": ("loopwarden.commands.rules", "list the check catalog and the shipped rule sets"),
    "batch": ("loopwarden.commands.batch", "review many designs in parallel"),
    "keygen": ("loopwarden.commands.keygen", "make a local signing key for trials"),
    "verify": ("loopwarden.commands.verify", "check a signed PDF review"),
}


class _Exit(Exception):
    def __init__(self, code: int) -> None:
        self.code = code


@contextlib.contextmanager
def error_boundary() -> Iterator[None]:
    """Map exceptions to a message on stderr and an exit status."""
    try:
        yield
    except UserError as exc:
        print(f"loopwarden: error: {exc}", file=sys.stderr)
        raise _Exit(EXIT_BAD_INPUT) from exc
    except KeyboardInterrupt as exc:
        print("loopwarden: interrupted; nothing was written", file=sys.stderr)
        raise _Exit(130) from exc
    except LoopwardenError as exc:
        print(f"loopwarden: internal error: {exc}", file=sys.stderr)
        raise _Exit(EXIT_INTERNAL) from exc
    except Exception as exc:  # noqa: BLE001 - the one place that catches everything
        print("loopwarden: internal error (a bug; please report it with this trace):",
              file=sys.stderr)
        traceback.print_exc(file=sys.stderr)
        raise _Exit(EXIT_INTERNAL) from exc


def _parser(with_commands: Sequence[str] | None = None) -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="loopwarden",
        description="Review a feedback loop (plant + controller design file) against a rule "
                    "set; write JSON, JUnit, Markdown and a signed PDF review.",
        epilog="Exit status: 0 nothing fails, 1 a finding fails, 2 bad input, "
               "3 internal error. Run 'loopwarden COMMAND --help' for a command's options.",
    )
    parser.add_argument("--version", action="version", version=f"loopwarden {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (module, help_text) in COMMANDS.items():
        p = sub.add_parser(name, help=help_text, description=help_text)
        if with_commands and name in with_commands:
            importlib.import_module(module).add_arguments(p)
    return parser


#: BLAS thread pools: the analysis works on matrices of a few dozen rows, where a second
#: thread only adds hand-over cost (it halves the speed on 2 cores, worse with batch
#: workers competing).  Set before numpy loads (commands import it lazily) and inherited
#: by batch workers; a value the user set wins.
_SINGLE_THREADED = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    for name in _SINGLE_THREADED:
        os.environ.setdefault(name, "1")
    args_list = list(sys.argv[1:] if argv is None else argv)
    # Only the chosen command's module is imported (keeps --help fast).
    chosen = next((a for a in args_list if not a.startswith("-")), None)
    wanted = [chosen] if chosen in COMMANDS else None
    try:
        parser = _parser(wanted)
        try:
            args = parser.parse_args(args_list)
        except SystemExit as exc:  # argparse: --help (0) or a usage error (2)
            return int(exc.code or 0)
        if args.command is None:
            parser.print_help()
            return EXIT_BAD_INPUT
        with error_boundary():
            module = importlib.import_module(COMMANDS[args.command][0])
            return int(module.run(args))
    except _Exit as exc:
        return exc.code
    return EXIT_INTERNAL


def main_entry() -> None:
    """Console-script entry point."""
    sys.exit(main())
