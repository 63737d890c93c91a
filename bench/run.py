"""loopwarden benchmark: prints its figures; never part of the test suite.

Run from the repository root::

    python bench/run.py            # everything
    python bench/run.py --quick    # fewer repetitions and a smaller batch

Figures (targets on a 2-core machine, from the speed issue):
  start-up of `loopwarden --help`                 ≤ 0.3 s
  signed review end to end per sample design      ≤ 3 s for three variants
  analyze() on a 12th-order design, 3 variants, against the equivalent python-control
  calls (stability_margins(returnall=True), linfnorm of S and T, closed-loop poles, a step
  response) in the same process, as a ratio      ≤ 1.0
  batch throughput, 2 workers, JSON only          ≥ 50 designs/s
  analysis time against model order 4, 8, 16, 32  about quadratic or better
Machines here are shared and noisy: compare ratios taken in one run, not absolute times
across runs.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def _median_time(fn, repeat: int) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def generated_design(order: int, variants: int, seed: int = 7) -> str:
    """A stable, reasonably tuned loop of the given plant order, as design-file text.

    Plant: an integrator plus well-damped and lightly damped modes spread over three
    decades; controller: gain, lead, lag, lowpass.  Variants scale the gain and shift the
    modes by a few per cent.
    """
    rng = np.random.default_rng(seed)

    def plant(scale: float) -> str:
        poles: list[str] = ["0.0"]
        n = 1
        while n + 2 <= order:
            wn = float(10 ** rng.uniform(0.6, 2.5)) * scale
            zeta = float(rng.uniform(0.05, 0.7))
            poles.append(f"[{-zeta * wn:.6g}, {wn * np.sqrt(1 - zeta**2):.6g}]")
            n += 2
        while n < order:
            poles.append(f"{-float(10 ** rng.uniform(0.7, 2.5)) * scale:.6g}")
            n += 1
        dc = 1.0
        for p in poles[1:]:
            if p.startswith("["):
                re, im = (float(x) for x in p.strip("[]").split(","))
                dc *= re * re + im * im
            else:
                dc *= abs(float(p))
        return f"zpk = {{ zeros = [], poles = [{', '.join(poles)}], gain = {dc:.9g} }}"

    text = [
        "[design]", f'name = "generated order {order}"', "",
        "[plant]", plant(1.0), "",
    ]
    for i in range(variants - 1):
        text += ["[[plant.variants]]", f'name = "variant {i + 1}"', plant(1.0 + 0.05 * (i + 1)),
                 ""]
    text += [
        "[[controller]]", 'type = "gain"', "k = 0.8", "",
        "[[controller]]", 'type = "lead"', "zero = 0.5", "pole = 5.0", "",
        "[[controller]]", 'type = "lag"', "zero = 0.08", "pole = 0.008", "",
        "[[controller]]", 'type = "lowpass"', "freq = 200.0", "",
    ]
    return "\n".join(text)


def control_equivalent(design) -> None:  # type: ignore[no-untyped-def]
    """The python-control calls that give the figures analyze() computes (and fewer)."""
    import control as ct

    for v in design.variants:
        loop = design.loop(v)
        L = ct.zpk(loop.rational.zeros, loop.rational.poles, loop.rational.gain)
        ct.stability_margins(L, returnall=True)
        S = ct.feedback(1, L)
        T = ct.feedback(L, 1)
        ct.linfnorm(S)
        ct.linfnorm(T)
        T.poles()
        ct.step_response(T)


def bench_startup(repeat: int) -> None:
    exe = [sys.executable, "-m", "loopwarden", "--help"]
    t = _median_time(lambda: subprocess.run(exe, capture_output=True, check=True), repeat)
    print(f"startup  loopwarden --help                 {t:7.3f} s   (target ≤ 0.3 s)")


def bench_reviews(repeat: int) -> None:
    from loopwarden.cli import main

    with tempfile.TemporaryDirectory() as tmp:
        key = Path(tmp) / "bench.p12"
        os.environ["LOOPWARDEN_KEY_PASSPHRASE"] = "bench"
        main(["keygen", "--out", str(key), "--name", "loopwarden benchmark"])
        for path in sorted((ROOT / "sample_designs").glob("*.toml")):
            out = Path(tmp) / f"{path.stem}.pdf"

            def run(path: Path = path, out: Path = out) -> None:
                if out.exists():
                    out.unlink()
                main(["review", str(path), "--out", str(out), "--sign", str(key), "--quiet",
                      "--date", "2026-01-01"])

            t = _median_time(run, repeat)
            print(f"review   {path.name:36s} {t:7.3f} s   signed PDF, end to end")
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"memory   peak resident size of this process {peak_mb:7.1f} MB")


def bench_ratio(repeat: int) -> None:
    import loopwarden
    from loopwarden.design.loader import parse_design

    design = parse_design(generated_design(12, 3), "<generated-12>")
    loopwarden.analyze(design)  # warm-up (imports, caches)
    control_equivalent(design)
    t_ours = _median_time(lambda: loopwarden.analyze(design), repeat)
    t_ct = _median_time(lambda: control_equivalent(design), repeat)
    print(f"analyze  order 12, 3 variants              {t_ours:7.3f} s")
    print(f"control  equivalent python-control calls   {t_ct:7.3f} s")
    print(f"ratio    analyze / python-control          {t_ours / t_ct:7.2f}     (target ≤ 1.0)")


def bench_scaling(repeat: int) -> None:
    import loopwarden
    from loopwarden.design.loader import parse_design

    prev = None
    for order in (4, 8, 16, 32):
        design = parse_design(generated_design(order, 1), f"<generated-{order}>")
        t = _median_time(lambda design=design: loopwarden.analyze(design), repeat)
        growth = f"x{t / prev:5.2f} for 2x order" if prev else ""
        print(f"scaling  order {order:2d}                          {t:7.3f} s   {growth}")
        prev = t


def bench_batch(count: int) -> None:
    from loopwarden.cli import main

    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "designs"
        src.mkdir()
        for i in range(count):
            (src / f"d{i:04d}.toml").write_text(generated_design(4 + i % 5, 1, seed=i))
        t0 = time.perf_counter()
        main(["batch", str(src), "--out", str(Path(tmp) / "out"), "--jobs", "2", "--quiet"])
        dt = time.perf_counter() - t0
        print(f"batch    {count} designs, 2 workers          {count / dt:7.1f} designs/s"
              "   (target ≥ 50)")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repetitions, smaller batch")
    ap.add_argument("--only", choices=["startup", "reviews", "ratio", "scaling", "batch"])
    args = ap.parse_args()
    repeat = 2 if args.quick else 5
    parts = {
        "startup": lambda: bench_startup(repeat),
        "reviews": lambda: bench_reviews(1 if args.quick else 3),
        "ratio": lambda: bench_ratio(repeat),
        "scaling": lambda: bench_scaling(repeat),
        "batch": lambda: bench_batch(100 if args.quick else 1000),
    }
    for name, fn in parts.items():
        if args.only and name != args.only:
            continue
        try:
            fn()
        except Exception as exc:  # noqa: BLE001 - report and go on with the other figures
            print(f"{name:8s} could not run: {type(exc).__name__}: {exc}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
