"""Reading input files (design, rule set, measured CSV, baseline) safely.

Only regular files are read.  A FIFO would block the review forever, a device could
stream without end, a directory is no file: each is bad input (a :class:`UserError` of the
caller's class, exit 2), decided by :func:`os.stat` before the file is opened and checked
again on the opened descriptor (opened non-blocking, so even a FIFO swapped in between
cannot stall).  A path holding a NUL byte cannot name a file and is refused the same way.
Files above :data:`MAX_INPUT_BYTES` are refused before they are read.

TOML text is checked for nesting before it is parsed (:func:`check_nesting`): the
standard-library reader recurses once per level of nested arrays and inline tables and
would overflow the interpreter's stack on a few thousand levels.  No valid design or rule
set nests more than a handful of levels.
"""

from __future__ import annotations

import os
import stat
from typing import Any

from .errors import UserError

__all__ = ["MAX_INPUT_BYTES", "MAX_NESTING", "check_nesting", "check_path", "read_input",
           "require_regular_file", "toml_loads"]

#: Largest input file read (bytes): far above any design, rule set or frequency sweep.
MAX_INPUT_BYTES = 32 * 1024 * 1024
#: Deepest nesting of arrays and inline tables accepted in a TOML input (a matrix row of
#: a state-space form is 2 levels inside its inline table; a complex root 3).
MAX_NESTING = 16

_KINDS = ((stat.S_ISDIR, "is a directory"), (stat.S_ISFIFO, "is a named pipe (FIFO)"),
          (stat.S_ISCHR, "is a character device"), (stat.S_ISBLK, "is a block device"),
          (stat.S_ISSOCK, "is a socket"))


def _kind(mode: int) -> str:
    return next((what for test, what in _KINDS if test(mode)), "is not a regular file")


def check_path(path: str | os.PathLike[str], error: type[UserError], what: str,
               *, shown: str | None = None) -> None:
    """Refuse a path with a NUL byte (``error`` naming ``shown``, default the path)."""
    name = shown if shown is not None else os.fspath(path)
    if "\0" in os.fspath(path):
        raise error(f"the {what} path contains a NUL byte", file=name.replace("\0", "\\0"),
                    hint="a file name cannot contain NUL; check how the path was written")


def require_regular_file(path: str | os.PathLike[str], error: type[UserError], what: str, *,
                         shown: str | None = None, hint_missing: str | None = None
                         ) -> os.stat_result:
    """``os.stat`` of ``path`` when it is a regular file, else ``error`` naming the file.

    Nothing is opened: a FIFO is refused without blocking.
    """
    check_path(path, error, what, shown=shown)
    name = shown if shown is not None else os.fspath(path)
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise error(f"{what} not found", file=name, hint=hint_missing) from None
    except OSError as exc:
        raise error(f"cannot read the {what}: {exc.strerror or exc}", file=name) from None
    if not stat.S_ISREG(st.st_mode):
        raise error(f"{_kind(st.st_mode)}, not a {what}", file=name,
                    hint="give the path of a regular file")
    return st


def read_input(path: str | os.PathLike[str], error: type[UserError], what: str, *,
               shown: str | None = None, hint_missing: str | None = None) -> bytes:
    """The bytes of a regular input file, or ``error`` (exit 2) naming the file.

    Parameters
    ----------
    path : path
        The file to read.
    error : UserError subclass
        DesignError, RuleSetError or UsageError: the class raised.
    what : str
        What the file is, for messages ("design file", "measurement file").
    shown : str, optional
        The name used in messages (default the path).
    hint_missing : str, optional
        Hint when the file does not exist.
    """
    st = require_regular_file(path, error, what, shown=shown, hint_missing=hint_missing)
    name = shown if shown is not None else os.fspath(path)
    if st.st_size > MAX_INPUT_BYTES:
        raise error(f"the {what} is {st.st_size} bytes; at most {MAX_INPUT_BYTES} are read",
                    file=name)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise error(f"cannot read the {what}: {exc.strerror or exc}", file=name) from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):       # replaced between stat and open
            raise error(f"{_kind(st.st_mode)}, not a {what}", file=name)
        chunks, total = [], 0
        while True:
            chunk = os.read(fd, 1 << 20)
            if not chunk:
                break
            total += len(chunk)
            if total > MAX_INPUT_BYTES:
                raise error(f"the {what} is larger than {MAX_INPUT_BYTES} bytes", file=name)
            chunks.append(chunk)
    except OSError as exc:
        raise error(f"cannot read the {what}: {exc.strerror or exc}", file=name) from None
    finally:
        os.close(fd)
    return b"".join(chunks)


def check_nesting(text: str, error: type[UserError], file: str) -> None:
    """Refuse TOML text whose arrays or inline tables nest deeper than :data:`MAX_NESTING`.

    A light scan: strings (basic, literal, multi-line) and comments are skipped, table
    headers (``[x]``/``[[x]]`` at the start of a line outside any value) are not counted.
    """
    depth = 0
    i, n = 0, len(text)
    line, line_start = 1, 0
    at_line_start = True
    while i < n:
        ch = text[i]
        if ch == "\n":
            line, line_start, at_line_start = line + 1, i + 1, True
            i += 1
            continue
        if ch in " \t\r":
            i += 1
            continue
        if ch == "#":
            j = text.find("\n", i)
            i = n if j < 0 else j
            continue
        if ch in "\"'":
            triple = text.startswith(ch * 3, i)
            end = ch * 3 if triple else ch
            j = i + len(end)
            while j < n:
                if ch == '"' and text[j] == "\\":
                    j += 2
                    continue
                if text.startswith(end, j):
                    break
                if not triple and text[j] == "\n":
                    break
                j += 1
            skipped = text[i:j]
            newlines = skipped.count("\n")
            if newlines:
                line += newlines
                line_start = i + skipped.rfind("\n") + 1
            i = j + len(end)
            at_line_start = False
            continue
        if at_line_start and depth == 0 and ch == "[":
            j = text.find("\n", i)              # a table header: not a value
            i = n if j < 0 else j
            continue
        at_line_start = False
        if ch in "[{":
            depth += 1
            if depth > MAX_NESTING:
                raise error(f"arrays or inline tables nested more than {MAX_NESTING} levels "
                            "deep", file=file,
                            where=f"line {line}, column {i - line_start + 1}",
                            hint="no design or rule set needs this much nesting")
        elif ch in "]}":
            depth = max(0, depth - 1)
        i += 1


def toml_loads(text: str, error: type[UserError], file: str) -> dict[str, Any]:
    """``tomllib.loads`` after :func:`check_nesting`; a stack overflow is bad input too.

    :class:`tomllib.TOMLDecodeError` is left to the caller (it has its own messages).
    """
    import tomllib

    check_nesting(text, error, file)
    try:
        return tomllib.loads(text)
    except RecursionError:
        raise error("nested too deeply to read", file=file,
                    hint=f"keep arrays and tables within {MAX_NESTING} levels") from None
