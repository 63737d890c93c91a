"""Outputs never harm a file: inputs, links, pipes and foreign files are refused (exit 2,
nothing written); files loopwarden wrote are replaced; stale temporary files are cleaned;
the terminal output survives a non-UTF-8 encoding and a reader that goes away.

The loop is e^(−0.5s)/s (passes general: PM 61.35° [derived]); what is tested here is file
handling, not the numbers.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import textwrap
import time
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from loopwarden.cli import main
from loopwarden.errors import UsageError
from loopwarden.report.atomic import (
    STALE_TMP_S,
    clean_stale_tmp,
    tmp_name,
    write_outputs,
    written_by_us,
)

ROOT = Path(__file__).resolve().parents[1]
SRC = ROOT / "src"
PASSING = """
[design]
name = "Tank level"
[plant]
zpk = { zeros = [], poles = [0.0], gain = 1.0 }
delay = 0.5
[[controller]]
type = "gain"
k = 1.0
"""


def put(folder: Path, text: str, name: str = "design.toml") -> Path:
    path = folder / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def snapshot(folder: Path) -> dict[str, bytes | str]:
    out: dict[str, bytes | str] = {}
    for p in folder.iterdir():
        if p.is_symlink():
            out[p.name] = "link -> " + os.readlink(p)
        elif p.is_file():
            out[p.name] = p.read_bytes()
        else:
            out[p.name] = "special"
    return out


def review(folder: Path, *extra: str) -> int:
    # a signed review is dated today (it may not be back-dated); others on a fixed day
    date = [] if "--sign" in extra else ["--date", "2025-05-05"]
    return main(["review", str(folder / "design.toml"), "--quiet", *date, *extra])


# --------------------------------------------------------------------------- inputs
@pytest.mark.parametrize("which", ["design", "baseline", "rules", "csv", "passphrase", "key"])
def test_an_output_never_replaces_an_input(which: str, tmp_path: Path, capsys) -> None:
    put(tmp_path, PASSING)
    args: list[str] = []
    target: Path
    if which == "design":
        target = tmp_path / "design.toml"
    elif which == "baseline":
        target = put(tmp_path, PASSING, "old.toml")
        args = ["--baseline", str(target)]
    elif which == "rules":
        target = tmp_path / "mine.toml"
        shutil.copy(ROOT / "rules" / "general.toml", target)
        args = ["--rules", str(target)]
    elif which == "csv":
        for name in ("spindle_sweep.toml", "spindle_sweep.csv"):
            shutil.copy(ROOT / "sample_designs" / name, tmp_path / name)
        shutil.copy(tmp_path / "spindle_sweep.toml", tmp_path / "design.toml")
        target = tmp_path / "spindle_sweep.csv"
    else:
        from loopwarden.signing.keys import make_key

        (tmp_path / "pw.txt").write_bytes(b"pw\n")
        (tmp_path / "pw.txt").chmod(0o600)
        make_key(tmp_path / "k.p12", "A", b"pw")
        args = ["--sign", str(tmp_path / "k.p12"), "--passphrase-file",
                str(tmp_path / "pw.txt"), "--out", str(tmp_path / "r.pdf")]
        target = tmp_path / ("pw.txt" if which == "passphrase" else "k.p12")
    before = snapshot(tmp_path)
    # --force never allows it either
    for option in ("--json", "--junit", "--markdown"):
        assert review(tmp_path, *args, "--json" if option != "--json" else "--junit",
                      str(tmp_path / "fresh.out"), option, str(target), "--force") == 2
        assert snapshot(tmp_path) == before, "nothing may be written"
    err = capsys.readouterr().err
    assert "is an input file of this run" in err and str(target) in err


def test_an_output_through_a_hard_link_to_an_input_is_refused(tmp_path: Path) -> None:
    design = put(tmp_path, PASSING)
    os.link(design, tmp_path / "r.json")
    assert review(tmp_path, "--json", str(tmp_path / "r.json"), "--force") == 2
    assert (tmp_path / "r.json").read_text(encoding="utf-8") == design.read_text(
        encoding="utf-8")


# --------------------------------------------------------------------------- special files
@pytest.mark.parametrize("kind", ["symlink", "dangling-symlink", "fifo", "folder", "device"])
def test_a_non_regular_file_is_never_replaced(kind: str, tmp_path: Path, capsys) -> None:
    put(tmp_path, PASSING)
    target = tmp_path / "r.json"
    if kind == "symlink":
        # even a link to a review loopwarden wrote: the link would be replaced by a file
        assert review(tmp_path, "--json", str(tmp_path / "real.json")) == 0
        target.symlink_to(tmp_path / "real.json")
    elif kind == "dangling-symlink":
        target.symlink_to(tmp_path / "nowhere.json")
    elif kind == "fifo":
        os.mkfifo(target)
    elif kind == "folder":
        target.mkdir()
    else:
        target = Path("/dev/null")
    before = snapshot(tmp_path)
    assert review(tmp_path, "--json", str(target), "--markdown", str(tmp_path / "r.md"),
                  "--force") == 2
    assert snapshot(tmp_path) == before
    err = capsys.readouterr().err
    assert str(target) in err and "not a regular file" in err


# --------------------------------------------------------------------------- foreign files
def test_a_foreign_file_needs_force_and_nothing_is_written_before(tmp_path: Path,
                                                                   capsys) -> None:
    put(tmp_path, PASSING)
    (tmp_path / "notes.md").write_text("# my notes\n", encoding="utf-8")
    before = snapshot(tmp_path)
    # the JSON could be written, the Markdown may not: neither is
    assert review(tmp_path, "--json", str(tmp_path / "r.json"), "--markdown",
                  str(tmp_path / "notes.md")) == 2
    assert snapshot(tmp_path) == before
    err = capsys.readouterr().err
    assert "notes.md exists and was not written by loopwarden" in err and "--force" in err
    assert review(tmp_path, "--json", str(tmp_path / "r.json"), "--markdown",
                  str(tmp_path / "notes.md"), "--force") == 0
    assert "**Verdict: PASS**" in (tmp_path / "notes.md").read_text(encoding="utf-8")


def test_files_loopwarden_wrote_are_recognised_and_replaced(tmp_path: Path) -> None:
    put(tmp_path, PASSING)
    outs = {"--json": tmp_path / "r.json", "--junit": tmp_path / "r.xml",
            "--markdown": tmp_path / "r.md", "--out": tmp_path / "r.pdf"}
    args = [x for opt, p in outs.items() for x in (opt, str(p))]
    assert review(tmp_path, *args) == 0
    for path in outs.values():
        assert written_by_us(path), path
    ET.parse(outs["--junit"])                      # the marker comment keeps it valid XML
    assert review(tmp_path, *args) == 0            # no --force needed
    # a foreign file of each kind is not recognised
    for name, data in (("a.json", b'{"schema": "other/1"}'), ("a.xml", b"<testsuites/>"),
                       ("a.md", b"# loopwarden review: x\n"), ("a.pdf", b"%PDF-1.7\n%%EOF")):
        assert not written_by_us(put(tmp_path, data.decode(), name)), name


# --------------------------------------------------------------------------- temp files
def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_stale_temporary_files_are_cleaned(tmp_path: Path) -> None:
    target = tmp_path / "r.json"
    dead = tmp_name(target, _dead_pid())
    old_live = tmp_name(target, os.getppid())       # a live process, but hours old
    young_live = tmp_path / f".r.json.loopwarden-tmp-{os.getppid()}x"   # not our pattern
    other = tmp_name(tmp_path / "other.json", _dead_pid())              # another target
    for p in (dead, old_live, young_live, other):
        p.write_bytes(b"partial")
    past = time.time() - STALE_TMP_S - 60
    os.utime(old_live, (past, past))
    removed = clean_stale_tmp(target)
    assert set(removed) == {dead, old_live}
    assert young_live.exists() and other.exists()
    fresh_live = tmp_name(target, os.getppid())
    fresh_live.write_bytes(b"being written by a live process")
    assert clean_stale_tmp(target) == [] and fresh_live.exists()


def test_write_outputs_cleans_up_and_leaves_no_temporary_file(tmp_path: Path) -> None:
    target = tmp_path / "r.json"
    stale = tmp_name(target)                 # our own pid, before we wrote: a killed run's
    stale.write_bytes(b"partial")
    write_outputs({target: b'{"schema": "loopwarden-review/1"}\n'})
    assert target.read_bytes().startswith(b'{"schema"')
    assert [p.name for p in tmp_path.iterdir()] == ["r.json"]


def test_write_outputs_checks_every_file_before_writing_any(tmp_path: Path) -> None:
    (tmp_path / "b.md").write_text("mine\n", encoding="utf-8")
    with pytest.raises(UsageError, match="b.md exists and was not written by loopwarden"):
        write_outputs({tmp_path / "a.json": b"{}", tmp_path / "b.md": b"x"})
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b.md"]


# --------------------------------------------------------------------------- batch
def test_batch_refuses_a_link_in_its_output_folder(tmp_path: Path, capsys) -> None:
    designs = tmp_path / "designs"
    designs.mkdir()
    put(designs, PASSING, "tank.toml")
    out = tmp_path / "out"
    out.mkdir()
    (tmp_path / "elsewhere.json").write_text(json.dumps({"schema": "loopwarden-review/1"}))
    (out / "tank.json").symlink_to(tmp_path / "elsewhere.json")
    assert main(["batch", str(designs), "--out", str(out), "--quiet"]) == 2
    assert (out / "tank.json").is_symlink() and sorted(p.name for p in out.iterdir()) == [
        "tank.json"]
    assert "not a regular file" in capsys.readouterr().err


# --------------------------------------------------------------------------- streams
def _run(args: list[str], env: dict[str, str] | None = None,
         **kwargs: object) -> subprocess.Popen[bytes]:
    full_env = {**os.environ, "PYTHONPATH": str(SRC), **(env or {})}
    return subprocess.Popen([sys.executable, "-m", "loopwarden", *args], env=full_env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            **kwargs)  # type: ignore[call-overload]


def test_review_on_an_ascii_terminal_does_not_crash(tmp_path: Path) -> None:
    # A design name and messages with non-ASCII text (°, ≥, é) on an ASCII-only stdout.
    design = put(tmp_path, PASSING.replace('"Tank level"', '"Réservoir niveau ≥ 3"'))
    proc = _run(["review", str(design), "--date", "2025-05-05"],
                env={"PYTHONIOENCODING": "ascii", "LANG": "C", "LC_ALL": "C"})
    out, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err.decode()
    assert b"Traceback" not in err
    assert b"verdict: PASS" in out and b"R?servoir niveau ? 3" in out


def test_a_closed_pipe_is_no_traceback_and_keeps_the_exit_status() -> None:
    # `loopwarden rules --show general | head -1`, with the reader gone before the write.
    proc = _run(["rules", "--show", "general"])
    assert proc.stdout is not None and proc.stderr is not None
    proc.stdout.close()
    err = proc.stderr.read()
    assert proc.wait(timeout=300) == 0
    assert b"Traceback" not in err and b"BrokenPipe" not in err and b"Exception" not in err


def test_safe_stream_swallows_a_broken_pipe_and_replaces_unencodable_text() -> None:
    import io

    from loopwarden.cli import _SafeStream

    class Closed(io.StringIO):
        def write(self, s: str) -> int:
            raise BrokenPipeError(32, "Broken pipe")

    stream = _SafeStream(Closed())                     # type: ignore[arg-type]
    assert stream.write("hello\n") == 6 and stream.broken
    stream.flush()                                      # no error either
    raw = io.BytesIO()
    ascii_out = _SafeStream(io.TextIOWrapper(raw, encoding="ascii"))
    ascii_out.write("PM ≥ 45°\n")
    ascii_out.flush()
    assert raw.getvalue() == b"PM ? 45?\n"
