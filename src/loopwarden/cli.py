"""Command line: parse, dispatch, map exceptions to exit codes. No maths here.

Each subcommand is a module in :mod:`loopwarden.commands` with ``HELP`` (one line),
``add_arguments(parser)`` and ``run(args) -> int``.  Modules are imported only when their
command runs, so ``--help`` does not load the numerical stack.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib
import io
import os
import sys
import traceback
from collections.abc import Iterator, Sequence
from typing import Any, TextIO

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
    "schema": ("loopwarden.commands.schema", "print the JSON Schema of the review JSON"),
}


class _Exit(Exception):
    def __init__(self, code: int) -> None:
        self.code = code


class _SafeStream:
    """stdout/stderr as the commands see them: never a crash for a message.

    A character the terminal's encoding cannot show (``PYTHONIOENCODING=ascii``, a C
    locale) is replaced instead of raising; a reader that went away (``| head -1``) makes
    the rest of the output go nowhere instead of raising BrokenPipeError, so the command
    finishes and its exit status is unchanged.
    """

    def __init__(self, stream: TextIO) -> None:
        self._stream = stream
        self.broken = False

    def write(self, text: str) -> int:
        if self.broken:
            return len(text)
        try:
            try:
                self._stream.write(text)
            except UnicodeEncodeError:
                enc = getattr(self._stream, "encoding", None) or "ascii"
                self._stream.write(text.encode(enc, "replace").decode(enc, "replace"))
        except BrokenPipeError:
            self._went_away()
        return len(text)

    def flush(self) -> None:
        if self.broken:
            return
        try:
            self._stream.flush()
        except BrokenPipeError:
            self._went_away()

    def _went_away(self) -> None:
        self.broken = True
        # The interpreter flushes stdout once more at exit: point the descriptor at
        # /dev/null so that flush cannot fail (and print "Exception ignored ...") either.
        with contextlib.suppress(OSError, ValueError, AttributeError,
                                 io.UnsupportedOperation):
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, self._stream.fileno())
            os.close(devnull)

    def __getattr__(self, name: str) -> Any:
        return getattr(self._stream, name)


@contextlib.contextmanager
def _safe_streams() -> Iterator[None]:
    saved = sys.stdout, sys.stderr
    if sys.stdout is not None:            # None without a console (pythonw)
        sys.stdout = _SafeStream(sys.stdout)  # type: ignore[assignment]
    if sys.stderr is not None:
        sys.stderr = _SafeStream(sys.stderr)  # type: ignore[assignment]
    try:
        yield
    finally:
        with contextlib.suppress(Exception):
            if sys.stdout is not None:
                sys.stdout.flush()
        sys.stdout, sys.stderr = saved


@contextlib.contextmanager
def error_boundary() -> Iterator[None]:
    """Map exceptions to a message on stderr and an exit status.

    Messages name files, tables and values from the inputs: control characters in them are
    shown as visible escapes, never sent to the terminal raw.
    """
    from .report.escape import for_terminal

    try:
        yield
    except UserError as exc:
        print(f"loopwarden: error: {for_terminal(str(exc))}", file=sys.stderr)
        raise _Exit(EXIT_BAD_INPUT) from exc
    except KeyboardInterrupt as exc:
        print("loopwarden: interrupted; nothing was written", file=sys.stderr)
        raise _Exit(130) from exc
    except LoopwardenError as exc:
        print(f"loopwarden: internal error: {for_terminal(str(exc))}", file=sys.stderr)
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
    with _safe_streams():
        return _main(argv)


def _main(argv: Sequence[str] | None) -> int:
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
