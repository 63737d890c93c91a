"""Sweep speed: 10 000 samples of a 12th-order loop, against python-control point by point.

The loop (our own scenario: a gimbal axis on a flexible mount) is a 4th-order plant
``K/(s(s − p1)(s² + 2·0.04·wr·s + wr²))`` written with the pair ``[-0.04·40, "wr"]``, under
an 8th-order controller (PID with derivative filter, two leads, a notch, a second-order
lowpass).  Four parameters: ``K``, ``p1``, ``wr`` and the pair's damping part ``sr``.

Printed, in one run (2 cores, figures taken in one run only compare with each other):

* loopwarden: phase, gain (upper and lower) and delay margins, Ms, Mt, disk margin and
  closed-loop stability of every sample (one shared grid, chunks on 2 threads), wall time;
* python-control, point by point: ``stability_margins``, the closed-loop poles of
  ``feedback(L, 1)`` and ``Ms``, ``Mt`` from ``frequency_response`` on a 2000-point grid,
  timed on a subset and scaled to 10 000 samples;
* the ratio, against the targets: ≤ 1 s and ≥ 10x;
* the whole ``run_sweep`` (corners, worst-case search, settling candidates) for scale.

No timed unit tests: the figures live here.  Taken on 2026-12-02 on the shared 2-core
machine (load average 2.3-3.6 from other work, so about one core free): 10 000 samples in
0.9-1.6 s wall (CPU time equal to the wall time: the second core was busy), python-control
2.2-3.3 ms per sample, ratio 11-14x; the whole run_sweep 2.2 s.
"""

from __future__ import annotations

import argparse
import os
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np

DESIGN = """
[design]
name = "gimbal axis on a flexible mount (bench)"
[parameters]
K = { nominal = 3000.0, min = 2200.0, max = 3800.0 }
p1 = { nominal = -2.0, min = -3.0, max = -1.0 }
wr = { nominal = 40.0, min = 32.0, max = 48.0 }
sr = { nominal = -1.6, min = -2.4, max = -0.8 }
[sweep]
samples = 10000
[plant]
zpk = { zeros = [], poles = [0.0, "p1", ["sr", "wr"]], gain = "K" }
[[controller]]
type = "pid"
kp = 0.02
ti = 2.0
td = 0.05
n = 8
[[controller]]
type = "lead"
zero = 4.0
pole = 40.0
[[controller]]
type = "lead"
zero = 8.0
pole = 30.0
[[controller]]
type = "notch"
freq = 40.0
depth_db = 20.0
zeta = 0.4
[[controller]]
type = "lowpass"
freq = 150.0
order = 2
zeta = 0.7
"""
TARGET_S = 1.0
TARGET_RATIO = 10.0


def _pool(kind: str):  # type: ignore[no-untyped-def]
    if kind == "processes":
        from concurrent.futures import ProcessPoolExecutor
        from multiprocessing import get_context

        return ProcessPoolExecutor(2, mp_context=get_context("spawn"))
    return ThreadPoolExecutor(2)


def loopwarden_side(samples: int, kind: str = "threads") -> tuple[float, object]:
    from loopwarden.analysis.sweep import _evaluate, sample_points
    from loopwarden.analysis.sweep_models import sample_loops
    from loopwarden.analysis.sweep_response import sample_grid
    from loopwarden.design.loader import parse_design

    d = parse_design(DESIGN, "bench.toml")
    X = sample_points(d, samples, 0)
    with _pool(kind) as pool:
        fam = sample_loops(d, 0, X[:600])
        _evaluate(fam, sample_grid([fam]), pool)            # warm-up (imports, caches)
        t0, c0 = time.perf_counter(), time.process_time()
        fam = sample_loops(d, 0, X)
        w = sample_grid([fam])
        fig = _evaluate(fam, w, pool)
        seconds = time.perf_counter() - t0
        cpu = time.process_time() - c0
    print(f"loopwarden: {samples} samples of a {fam.fixed.order + fam.poles.shape[1]}th-order "
          f"loop, grid {w.size} points: {seconds:.3f} s "
          f"({1e6 * seconds / samples:.0f} µs per sample; {int(np.sum(fig.stable))} stable, "
          f"{int(np.sum(fig.certified_count))} by the certified count; 2 {kind}; load "
          f"average {os.getloadavg()[0]:.1f})")
    if kind == "threads":
        # On a shared machine the wall time depends on the other load; the CPU time of
        # this process (both threads) does much less.
        print(f"  CPU time of this process: {cpu:.3f} s (both threads)")
    return seconds, (d, X, fig)


def control_side(d, X: np.ndarray, count: int) -> float:  # type: ignore[no-untyped-def]
    import control

    from loopwarden.analysis.sweep_models import sample_loops

    fam = sample_loops(d, 0, X[:count])
    w = np.logspace(-3, 4, 2000)
    t0 = time.perf_counter()
    for i in range(count):
        z = np.concatenate([fam.fixed.zeros, fam.zeros[i]])
        p = np.concatenate([fam.fixed.poles, fam.poles[i]])
        k = fam.fixed.gain * fam.gain[i]
        L = control.zpk(z, p, k)
        control.stability_margins(L, returnall=True)
        control.poles(control.feedback(L, 1))
        resp = control.frequency_response(L, w)
        lv = np.asarray(resp.complex).ravel()
        np.max(np.abs(1.0 / (1.0 + lv)))
        np.max(np.abs(lv / (1.0 + lv)))
    return (time.perf_counter() - t0) / count


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--control-samples", type=int, default=200,
                    help="python-control points timed (scaled to --samples)")
    ap.add_argument("--full", action="store_true", help="also time the whole run_sweep")
    ap.add_argument("--workers", choices=("threads", "processes"), default="threads",
                    help="how the two cores share the chunks (default threads)")
    args = ap.parse_args()
    ours, (d, X, fig) = loopwarden_side(args.samples, args.workers)
    per = control_side(d, X, args.control_samples)
    theirs = per * args.samples
    print(f"python-control point by point: {1e3 * per:.2f} ms per sample, "
          f"{theirs:.1f} s for {args.samples} (timed on {args.control_samples})")
    ratio = theirs / ours
    print(f"ratio: {ratio:.1f}x (target ≥ {TARGET_RATIO:g}x)   loopwarden time "
          f"{ours:.3f} s (target ≤ {TARGET_S:g} s on 2 cores)")
    if args.full:
        from loopwarden.analysis.sweep import run_sweep

        t0 = time.perf_counter()
        with ThreadPoolExecutor(2) as pool:
            r = run_sweep(d, executor=pool)
        print(f"run_sweep (corners {r.corners}, samples {r.samples}, worst-case search, "
              f"settling candidates): {time.perf_counter() - t0:.2f} s")


if __name__ == "__main__":
    main()
