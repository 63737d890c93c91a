"""Writing outputs safely: all or nothing, never over an input or a file we did not write.

Every output is first written to a temporary file beside its target,
``.<name>.loopwarden-tmp-<pid>``, then moved into place with :func:`os.replace` (atomic on
one file system), so a reader never sees half a file and a failure leaves the previous
file intact.  Temporary files an earlier run left behind (it was killed) are removed when
their process is gone or they are older than :data:`STALE_TMP_S`.

All checks run before the first byte is written, for every output of the run; any refusal
is a :class:`~loopwarden.errors.UsageError` (exit 2) naming the path and why, and nothing
is written:

- the folder must exist, and two outputs must not name one file;
- an output must not be an input of the run (design, baseline, rule-set files, measured
  plant CSVs, key, passphrase file) — compared as files, so hard links count;
- an existing path that is not a regular file (a symbolic link, a FIFO, a device, a
  socket, a folder) is never replaced;
- an existing regular file is replaced only when loopwarden wrote it (:func:`written_by_us`:
  a JSON document with our ``schema`` key, a PDF with our producer, JUnit XML or Markdown
  with our marker comment), or when the caller passes ``force`` (``--force``).
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import stat
import time
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path

from ..errors import UsageError

__all__ = ["MARKER", "STALE_TMP_S", "check_outputs", "clean_stale_tmp", "tmp_name",
           "write_outputs", "written_by_us"]

#: Marker comment in the JUnit XML and Markdown loopwarden writes (recognised on rewrite).
MARKER = "written by loopwarden; it may overwrite this file"
#: A temporary file older than this is stale even if its process id is in use again.
STALE_TMP_S = 3600.0
_TMP = re.compile(r"^\.(?P<name>.+)\.loopwarden-tmp-(?P<pid>[0-9]+)$")
_SNIFF = 4096                   # bytes read from the head (and tail) of an existing file


def tmp_name(path: Path, pid: int | None = None) -> Path:
    """The temporary file for ``path``: ``.<name>.loopwarden-tmp-<pid>`` beside it."""
    return _folder(path) / f".{path.name}.loopwarden-tmp-{os.getpid() if pid is None else pid}"


def _folder(path: Path) -> Path:
    return path.parent if str(path.parent) else Path(".")


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return False            # ours, before we made it: left by an earlier run
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True             # someone else's live process
    return True


def clean_stale_tmp(path: Path, *, now: float | None = None) -> list[Path]:
    """Remove temporary files for ``path`` that an earlier, killed run left behind.

    Only regular files named exactly like our temporary files for this target are
    touched; one is stale when its process is gone or it is older than
    :data:`STALE_TMP_S`.  Returns the files removed.
    """
    folder = _folder(Path(path))
    now = time.time() if now is None else now
    removed: list[Path] = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        m = _TMP.match(entry.name)
        if m is None or m.group("name") != Path(path).name:
            continue
        try:
            st = entry.stat(follow_symlinks=False)
        except OSError:
            continue
        if not stat.S_ISREG(st.st_mode):
            continue
        if _alive(int(m.group("pid"))) and now - st.st_mtime < STALE_TMP_S:
            continue
        with contextlib.suppress(OSError):
            os.unlink(entry.path)
            removed.append(Path(entry.path))
    return removed


# --------------------------------------------------------------------------- recognition
def _head_tail(path: Path) -> tuple[bytes, bytes]:
    with path.open("rb") as fh:
        head = fh.read(_SNIFF)
        size = os.fstat(fh.fileno()).st_size
        fh.seek(max(0, size - _SNIFF))
        tail = fh.read(_SNIFF)
    return head, tail


def written_by_us(path: Path) -> bool:
    """True when the regular file ``path`` is recognisably one loopwarden wrote.

    A JSON document whose top-level ``schema`` starts with ``loopwarden-``; a PDF whose
    producer is loopwarden; an XML or Markdown file carrying :data:`MARKER` in a comment.
    """
    try:
        head, tail = _head_tail(path)
        if head.lstrip().startswith(b"{"):
            if path.stat().st_size > 512 * 1024 * 1024:
                return False
            doc = json.loads(path.read_bytes().decode("utf-8"))
            return isinstance(doc, dict) and str(doc.get("schema", "")).startswith(
                "loopwarden-")
        if head.startswith(b"%PDF-"):
            return b"/Producer (loopwarden " in path.read_bytes()
    except (OSError, UnicodeDecodeError, ValueError):
        return False
    marker = f"<!-- {MARKER} -->".encode()
    return marker in head or marker in tail


def _same(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or (a.exists() and b.exists() and a.samefile(b))
    except OSError:
        return False


def _kind(mode: int) -> str | None:
    """What a non-regular file is, in words; None for a regular file."""
    for test, name in ((stat.S_ISDIR, "a folder"), (stat.S_ISLNK, "a symbolic link"),
                       (stat.S_ISFIFO, "a FIFO (named pipe)"), (stat.S_ISCHR, "a device"),
                       (stat.S_ISBLK, "a device"), (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return name
    return None if stat.S_ISREG(mode) else "not a regular file"


def check_outputs(outputs: Iterable[tuple[str, Path]], *, inputs: Iterable[Path] = (),
                  force: bool = False,
                  ours: Callable[[Path], bool] = written_by_us) -> None:
    """Raise UsageError unless every output path can be written without harm.

    Parameters
    ----------
    outputs : iterable of (option, path)
        The option that named the path (``"--json"``) is used in messages.
    inputs : iterable of Path
        Files that must never be overwritten (even with ``force``).
    force : bool
        Allow replacing an existing regular file loopwarden did not write.
    ours : callable
        Recognises a file loopwarden wrote (default :func:`written_by_us`).
    """
    inputs = [Path(p) for p in inputs]
    seen: list[tuple[str, Path]] = []
    for option, path in outputs:
        path = Path(path)
        folder = _folder(path)
        if not folder.is_dir():
            raise UsageError(f"{option} {path}: the folder {str(folder)!r} does not exist",
                             hint="create it first; nothing was written")
        for other_option, other in seen:
            if _same(path, other):
                raise UsageError(f"{option} and {other_option} both write {path}",
                                 hint="nothing was written")
        for inp in inputs:
            if _same(path, inp):
                raise UsageError(f"{option} {path} is an input file of this run",
                                 hint="refusing to overwrite it, even with --force; "
                                      "choose another name; nothing was written")
        try:
            mode: int | None = os.lstat(path).st_mode
        except FileNotFoundError:
            mode = None
        except OSError as exc:
            raise UsageError(f"{option} {path}: cannot inspect it: {exc.strerror or exc}",
                             hint="nothing was written") from exc
        if mode is not None:
            kind = _kind(mode)
            if kind is not None:
                raise UsageError(f"{option} {path} is {kind}, not a regular file",
                                 hint="refusing to replace it, even with --force; choose "
                                      "another name; nothing was written")
            if not force and not ours(path):
                raise UsageError(f"{option} {path} exists and was not written by loopwarden",
                                 hint="refusing to overwrite it; choose another name, or "
                                      "pass --force to replace it; nothing was written")
        seen.append((option, path))


def write_outputs(files: Mapping[Path, bytes], *, inputs: Iterable[Path] = (),
                  force: bool = False,
                  ours: Callable[[Path], bool] = written_by_us) -> None:
    """Write every file atomically; on any failure none of them is replaced.

    The checks of :func:`check_outputs` run first, for all files, before any is written.
    """
    check_outputs(((str(p), Path(p)) for p in files), inputs=inputs, force=force, ours=ours)
    staged: list[tuple[Path, Path]] = []
    mask = os.umask(0)          # read the umask: outputs get the usual 0666 & ~umask mode
    os.umask(mask)
    path = Path(".")
    try:
        for path, data in ((Path(p), d) for p, d in files.items()):
            clean_stale_tmp(path)
            tmp = tmp_name(path)
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
            staged.append((tmp, path))
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.chmod(tmp, 0o666 & ~mask)
    except OSError as exc:
        for tmp, _ in staged:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        raise UsageError(f"cannot write {path}: {exc.strerror or exc}",
                         hint="nothing was written") from exc
    for tmp, target in staged:
        os.replace(tmp, target)
