"""Writing outputs safely: all or nothing, never over an input file.

Every output is first written to a temporary file in its own folder, then moved into place
with :func:`os.replace` (atomic on one file system), so a reader never sees half a file and
a failure leaves the previous file intact.  All checks run before the first byte is
written: a missing folder, two outputs on one path, or an output that is an input file
(the design, the rule set, a key) is a :class:`~loopwarden.errors.UsageError` and nothing
is written.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path

from ..errors import UsageError

__all__ = ["check_outputs", "write_outputs"]


def _same(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or (a.exists() and b.exists() and a.samefile(b))
    except OSError:
        return False


def check_outputs(outputs: Iterable[tuple[str, Path]], *, inputs: Iterable[Path] = ()) -> None:
    """Raise UsageError unless every output path can be written without harm.

    Parameters
    ----------
    outputs : iterable of (option, path)
        The option that named the path (``"--json"``) is used in messages.
    inputs : iterable of Path
        Files that must never be overwritten.
    """
    inputs = [Path(p) for p in inputs]
    seen: list[tuple[str, Path]] = []
    for option, path in outputs:
        path = Path(path)
        folder = path.parent if str(path.parent) else Path(".")
        if not folder.is_dir():
            raise UsageError(f"{option} {path}: the folder {str(folder)!r} does not exist",
                             hint="create it first; nothing was written")
        if path.is_dir():
            raise UsageError(f"{option} {path} is a folder", hint="give a file name")
        for other_option, other in seen:
            if _same(path, other):
                raise UsageError(f"{option} and {other_option} both write {path}")
        for inp in inputs:
            if _same(path, inp):
                raise UsageError(f"{option} {path} is an input file of this review",
                                 hint="refusing to overwrite it; choose another name")
        seen.append((option, path))


def write_outputs(files: Mapping[Path, bytes], *, inputs: Iterable[Path] = ()) -> None:
    """Write every file atomically; on any failure none of them is replaced."""
    check_outputs(((str(p), p) for p in files), inputs=inputs)
    staged: list[tuple[str, Path]] = []
    mask = os.umask(0)          # mkstemp makes 0600 files; give outputs the usual mode
    os.umask(mask)
    try:
        for path, data in files.items():
            path = Path(path)
            fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp",
                                       dir=path.parent if str(path.parent) else ".")
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
    for tmp, path in staged:
        os.replace(tmp, path)
