"""Fuzz the review with malformed and edge-case design files and rule sets.

Each case (``tests/design_mutations.py``: a sample design mutated one to three times, a
mutated rule set beside it in a fifth of the cases, random TOML in a few) is reviewed by
``loopwarden review`` in a child process forked from this one (loopwarden and numpy are
imported once, before the fork), writing ``--json``, ``--junit`` and ``--markdown`` (and
the PDF in a tenth of the cases) into a fresh folder.  The child's peak memory comes from
``os.wait4`` (``ru_maxrss``); a child still running after ``--kill`` seconds is killed and
counted as over time.

Printed: counts of exit codes, the internal errors (exit 3 or a crash) with their last
stderr line, runs over 20 s, runs over 2 GB, the slowest and largest runs, and whether
anything was written by a run that exited 2.  Cases are reproducible from ``--seed``: case
``i`` uses ``random.Random(seed * 1_000_003 + i)``; ``--case I`` reruns one and keeps its
folder.

    python bench/fuzz_designs.py                 # 1500 cases, 2 at a time
    python bench/fuzz_designs.py -n 200 --jobs 1
    python bench/fuzz_designs.py --case 417      # one case, folder kept, stderr printed
"""

from __future__ import annotations

import argparse
import collections
import os
import random
import resource
import shutil
import signal
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "src"))

import design_mutations as dm  # noqa: E402

SLOW_S = 20.0
BIG_KB = 2 * 1024 * 1024


def write_case(i: int, seed: int, folder: Path, pdf_fraction: float = 0.1) -> list[str]:
    """Write case ``i`` into ``folder``; return the ``loopwarden`` arguments."""
    rng = random.Random(seed * 1_000_003 + i)
    stem, text = dm.design_case(rng)
    design = folder / "design.toml"
    design.write_text(text, encoding="utf-8", errors="surrogatepass")
    shutil.copy(ROOT / "sample_designs" / "spindle_sweep.csv", folder / "spindle_sweep.csv")
    args = ["review", str(design), "--json", str(folder / "out" / "r.json"),
            "--junit", str(folder / "out" / "r.xml"),
            "--markdown", str(folder / "out" / "r.md"), "--quiet", "--date", "2026-06-01"]
    if rng.random() < 0.2:
        rules = folder / "rules.toml"
        rules.write_text(dm.ruleset_case(rng), encoding="utf-8", errors="surrogatepass")
        args += ["--rules", str(rules)]
    if rng.random() < pdf_fraction:
        args += ["--out", str(folder / "out" / "r.pdf")]
    (folder / "out").mkdir()
    return args


def _names_file_and_key(err: list[str], folder: Path) -> bool:
    """Whether an exit-2 message names the input file and, after it, a table/key or line.

    The message reads ``loopwarden: error: FILE: WHERE: what``: FILE is the design or the
    rule set of the case, WHERE a non-empty place (``plant.num[2]``, ``line 3``...).
    """
    prefix = "loopwarden: error: "
    lines = [line for line in err if line.startswith(prefix)]
    if not lines:
        return False
    msg = lines[-1][len(prefix):]
    for name in ("design.toml", "rules.toml", "spindle_sweep.csv"):
        path = str(folder / name) + ": "
        if msg.startswith(path):
            rest = msg[len(path):]
            where, sep, what = rest.partition(": ")
            return bool(sep and where.strip() and what.strip())
    return False


def _child(args: list[str], folder: Path, limit_bytes: int) -> None:
    """In the forked child: run the command line with stdout/stderr to files; exit."""
    code = 99
    try:
        resource.setrlimit(resource.RLIMIT_AS, (limit_bytes, limit_bytes))
        for fd, name in ((1, "stdout"), (2, "stderr")):
            f = os.open(folder / name, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
            os.dup2(f, fd)
            os.close(f)
        sys.stdout = open(1, "w", closefd=False)  # noqa: SIM115
        sys.stderr = open(2, "w", closefd=False)  # noqa: SIM115
        from loopwarden.cli import main

        code = main(args)
        sys.stdout.flush()
        sys.stderr.flush()
    except BaseException:  # noqa: BLE001 - everything is a crash, reported as 98
        import traceback

        traceback.print_exc()
        sys.stderr.flush()
        code = 98
    os._exit(code)


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("-n", type=int, default=1500, help="cases (default 1500)")
    p.add_argument("--seed", type=int, default=12)
    p.add_argument("--jobs", type=int, default=2)
    p.add_argument("--kill", type=float, default=60.0, help="kill a run after this (s)")
    p.add_argument("--limit-gb", type=float, default=6.0,
                   help="address-space limit per run (GB): a safety net for the machine")
    p.add_argument("--case", type=int, default=None, help="run only this case, keep it")
    p.add_argument("--start", type=int, default=0)
    p.add_argument("--pdf", type=float, default=0.1,
                   help="fraction of the cases that also write the PDF (default 0.1)")
    opts = p.parse_args()

    # Single-threaded BLAS, as the command line sets it before numpy loads (cli.main):
    # numpy imported here first would otherwise start a BLAS thread pool that every forked
    # child inherits, and on a busy 2-core machine its spinning threads multiplied the
    # CPU time of a run several-fold (seed 777 case 568: over 25 s against 4 s from the
    # command line).
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")
    # Import the numerical stack once, before forking (a child starts warm).
    import loopwarden.analysis.time_response  # noqa: F401
    import loopwarden.cli  # noqa: F401
    import loopwarden.report.json_out  # noqa: F401

    base = Path(tempfile.mkdtemp(prefix="lw-fuzz-"))
    cases = [opts.case] if opts.case is not None else list(range(opts.start,
                                                                 opts.start + opts.n))
    limit = int(opts.limit_gb * 1024 ** 3)
    running: dict[int, tuple[int, float, Path]] = {}
    codes: collections.Counter[int] = collections.Counter()
    internal: list[tuple[int, str]] = []
    slow: list[tuple[float, int]] = []
    big: list[tuple[int, int]] = []
    wrote_on_2: list[int] = []
    unnamed_2: list[tuple[int, str]] = []
    stats: list[tuple[float, int, int]] = []
    cpu: list[tuple[float, int]] = []       # CPU seconds (user + system) of each run
    t_start = time.monotonic()

    def reap(block: bool) -> None:
        while running:
            pid, status, usage = os.wait4(-1, 0 if block else os.WNOHANG)
            if pid == 0:
                for cpid, (_i, t0, _folder) in list(running.items()):
                    if time.monotonic() - t0 > opts.kill:
                        os.kill(cpid, signal.SIGKILL)
                return
            i, t0, folder = running.pop(pid)
            dt_s = time.monotonic() - t0
            code = (os.WEXITSTATUS(status) if os.WIFEXITED(status)
                    else -os.WTERMSIG(status))
            codes[code] += 1
            rss = usage.ru_maxrss
            stats.append((dt_s, rss, i))
            cpu.append((usage.ru_utime + usage.ru_stime, i))
            if dt_s > SLOW_S:
                slow.append((dt_s, i))
            if rss > BIG_KB:
                big.append((rss, i))
            err = (folder / "stderr").read_text(errors="replace").strip().splitlines()
            if code not in (0, 1, 2):
                internal.append((i, f"exit {code}: " + (err[-1] if err else "")[:300]))
            if code == 2 and any((folder / "out").iterdir()):
                wrote_on_2.append(i)
            if code == 2 and not _names_file_and_key(err, folder):
                unnamed_2.append((i, (err[-1] if err else "")[:300]))
            if opts.case is not None:
                print((folder / "stderr").read_text(errors="replace"))
                print(f"case {i}: exit {code}, {dt_s:.1f} s, {rss / 1024:.0f} MB, {folder}")
            else:
                shutil.rmtree(folder, ignore_errors=True)
            block = False

    for n_done, i in enumerate(cases):
        while len(running) >= opts.jobs:
            reap(block=False)
            time.sleep(0.02)
        folder = base / f"case-{i}"
        folder.mkdir()
        args = write_case(i, opts.seed, folder, opts.pdf)
        pid = os.fork()
        if pid == 0:
            _child(args, folder, limit)
        running[pid] = (i, time.monotonic(), folder)
        if n_done and n_done % 100 == 0:
            print(f"... {n_done} cases, {time.monotonic() - t_start:.0f} s, exits "
                  f"{dict(sorted(codes.items()))}", flush=True)
    while running:
        reap(block=False)
        time.sleep(0.02)

    n = len(stats)
    print(f"\n{n} cases (seed {opts.seed}) in {time.monotonic() - t_start:.0f} s")
    print("exit codes:", dict(sorted(codes.items())))
    print(f"internal errors (exit not 0/1/2): {len(internal)}")
    for i, msg in internal[:40]:
        print(f"  case {i}: {msg}")
    print(f"runs over {SLOW_S:.0f} s: {len(slow)}  "
          + ", ".join(f"case {i} {t:.0f} s" for t, i in sorted(slow, reverse=True)[:10]))
    print(f"runs over 2 GB: {len(big)}  "
          + ", ".join(f"case {i} {kb / 1024:.0f} MB" for kb, i in sorted(big, reverse=True)))
    print(f"exit 2 with a file written: {len(wrote_on_2)} {wrote_on_2[:10]}")
    print(f"exit 2 whose message does not name the input file and a key: {len(unnamed_2)}")
    for i, msg in unnamed_2[:20]:
        print(f"  case {i}: {msg}")
    if stats:
        stats.sort()
        print("slowest: " + ", ".join(f"case {i} {t:.1f} s" for t, _, i in stats[-5:][::-1]))
        cpu.sort()
        print("most CPU (user + system; wall time counts waiting on a loaded machine): "
              + ", ".join(f"case {i} {t:.1f} s" for t, i in cpu[-5:][::-1]))
        by_mem = sorted(stats, key=lambda s: s[1])
        median_mb, max_mb = by_mem[n // 2][1] / 1024, by_mem[-1][1] / 1024
        print(f"peak memory: median {median_mb:.0f} MB, max {max_mb:.0f} MB "
              f"(case {by_mem[-1][2]})")
    if opts.case is None:
        shutil.rmtree(base, ignore_errors=True)
    return 1 if internal or slow or big or wrote_on_2 or unnamed_2 else 0


if __name__ == "__main__":
    sys.exit(main())
