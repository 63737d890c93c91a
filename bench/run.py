"""loopwarden benchmark: prints its figures; never part of the test suite.

Set up once (python-control's ``linfnorm`` needs slycot), then run from the repository
root::

    pip install -e '.[bench]'
    python bench/run.py            # everything
    python bench/run.py --quick    # fewer repetitions and a batch of 100
    python bench/run.py --only ratio

Figures (targets on a 2-core machine, from the speed issue):
  start-up of `loopwarden --help` (and `rules`)   ≤ 0.3 s; which numerical packages they load
  signed review end to end per sample design,
  each in a fresh process: wall time, peak RSS    ≤ 3 s for three variants
  analyze() on a 12th-order design, 3 variants, against the equivalent python-control
  calls (stability_margins(returnall=True), linfnorm of S and T, closed-loop poles, a step
  response) in the same process, as a ratio      ≤ 1.0
  analysis time against model order 4, 8, 16, 32  about quadratic or better (exponent ≤ 2)
  batch throughput, 2 workers, JSON only, 1000
  generated designs                               ≥ 50 designs/s
  the lightly damped 12th-order gimbal loop (3 variants, 3 gain crossovers each):
    analyze() against python-control's margin, stability_margins, Ms/Mt on a grid,
    closed-loop poles, step_response and step_info, in one process, as a ratio ≤ 1.0
    `loopwarden review --out` against the script an engineer would write by hand
    (bench/by_hand.py: python-control + matplotlib, the same figures into PdfPages),
    each in a fresh process, as a ratio of medians    ≤ 1.0
    the signed review of it                        ≤ 3 s
  every command's peak resident size (ru_maxrss of the child process)
  the test suite's wall time (--suite; long)       < 4 min

    python bench/run.py --only byhand     # review --out against the hand-written script
    python bench/run.py --suite           # everything and the test suite

Every part runs even when another fails (it prints "failed" and why).  Machines here are
shared and noisy: compare ratios taken in one run, not absolute times across runs.  Times
of child processes are given as wall time and as CPU time (user + system of the child and
of the figure workers it waited for), which waiting for a busy core does not inflate.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

# As the command line does (loopwarden.cli): single-threaded BLAS for small matrices, set
# before numpy loads; python-control's calls run under the same setting.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import numpy as np  # noqa: E402 - after the thread settings

ROOT = Path(__file__).resolve().parents[1]
# Child processes (reviews, the suite) run this checkout's source, wherever they start.
os.environ["PYTHONPATH"] = os.pathsep.join(
    p for p in (str(ROOT / "src"), os.environ.get("PYTHONPATH", "")) if p)


def _median_time(fn, repeat: int) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


#: Phase margin the generated designs are tuned to (deg), at the highest frequency where
#: the untuned loop's phase is −180° + this.
GENERATED_PHASE_MARGIN_DEG = 50.0


def _generated_plant(order: int, rng: np.random.Generator) -> tuple[list[complex], list[float]]:
    """Poles of a generated plant: an integrator, a mechanical pole at 3 rad/s, then
    well-damped and lightly damped modes and real poles between 20 and 400 rad/s."""
    pairs: list[complex] = []
    reals: list[float] = [0.0]
    if order >= 2:
        reals.append(-3.0)
    n = len(reals)
    while n + 2 <= order:
        wn = float(10 ** rng.uniform(1.3, 2.6))
        zeta = float(rng.uniform(0.15, 0.6))
        pairs.append(complex(-zeta * wn, wn * np.sqrt(1 - zeta**2)))
        n += 2
    while n < order:
        reals.append(-float(10 ** rng.uniform(1.3, 2.6)))
        n += 1
    return pairs, reals


def _plant_text(pairs: list[complex], reals: list[float], scale: float) -> str:
    """zpk line of the plant with every non-zero pole scaled; unit velocity gain."""
    items = [f"{r * scale:.6g}" if r else "0.0" for r in reals]
    items += [f"[{p.real * scale:.6g}, {p.imag * scale:.6g}]" for p in pairs]
    gain = 1.0
    for r in reals:
        gain *= abs(r * scale) if r else 1.0
    for p in pairs:
        gain *= abs(p * scale) ** 2
    return f"zpk = {{ zeros = [], poles = [{', '.join(items)}], gain = {gain:.12g} }}"


def _tuned_gain(pairs: list[complex], reals: list[float]) -> float:
    """Controller gain that gives the nominal loop the target phase margin.

    The untuned loop (plant, lead 0.5/5 with unit DC gain, lag 0.08/0.008, lowpass 200)
    is evaluated factor by factor; the gain puts the crossover at the highest frequency
    where its phase is −180° + GENERATED_PHASE_MARGIN_DEG.
    """
    w = np.logspace(-2, 2, 8001)
    s = 1j * w
    poles = [*reals, *pairs, *(p.conjugate() for p in pairs), -5.0, -0.008, -200.0]
    zeros = [-0.5, -0.08]
    gain = 10.0 * 200.0            # lead (p/z) and unit-DC lowpass
    for p in (*reals, *pairs, *(p.conjugate() for p in pairs)):
        gain *= abs(p) if p else 1.0
    val = np.full(w.shape, gain, dtype=complex)
    phase = np.zeros(w.shape)
    for z in zeros:
        val *= s - z
        phase += np.angle(s - z)
    for p in poles:
        val /= s - p
        phase -= np.angle(s - p)
    target = np.radians(GENERATED_PHASE_MARGIN_DEG - 180.0)
    k = int(np.flatnonzero(phase >= target)[-1])
    return float(1.0 / abs(val[k]))


def generated_design(order: int, variants: int, seed: int = 7) -> str:
    """A stable loop tuned to a 50° phase margin, of the given plant order, as design text.

    Plant: an integrator, a real pole at 3 rad/s, then modes (damping 0.15–0.6) and real
    poles between 20 and 400 rad/s, unit velocity gain; controller: gain (tuned), lead,
    lag, lowpass.  Variants shift every pole by +5 %, +10 %, … (same gain).
    """
    rng = np.random.default_rng(seed)
    pairs, reals = _generated_plant(order, rng)
    k = _tuned_gain(pairs, reals)
    text = [
        "[design]", f'name = "generated order {order}"', "",
        "[plant]", _plant_text(pairs, reals, 1.0), "",
    ]
    for i in range(variants - 1):
        text += ["[[plant.variants]]", f'name = "variant {i + 1}"',
                 _plant_text(pairs, reals, 1.0 + 0.05 * (i + 1)), ""]
    text += [
        "[[controller]]", 'type = "gain"', f"k = {k:.6g}", "",
        "[[controller]]", 'type = "lead"', "zero = 0.5", "pole = 5.0", "",
        "[[controller]]", 'type = "lag"', "zero = 0.08", "pole = 0.008", "",
        "[[controller]]", 'type = "lowpass"', "freq = 200.0", "",
    ]
    return "\n".join(text)


#: A lightly damped 12th-order loop with several crossovers, three plant variants: the
#: gimbal sample (sample_designs/gimbal_rate.toml) with a third arm mode at 260 Hz and a
#: soft mount beside the stiff one.  Every variant's |L| crosses 0 dB three times (the
#: designed crossover and both flanks of the 52 Hz peak).  Plant 7 poles, PI 1, notch 2,
#: gyro 2.
GIMBAL_12 = """\
[design]
name = "Gimbal rate loop, 12th order (bench)"
frequency_unit = "hz"

[plant]
zpk = { zeros = [[-0.76, 38.0]], poles = [-1.0, [-1.04, 52.0], [-2.8, 140.0], [-5.2, 260.0]], \
gain = 2.432e13 }

[[plant.variants]]
name = "stiff mount"
zpk = { zeros = [[-0.84, 42.0]], poles = [-1.0, [-1.14, 57.0], [-3.1, 155.0], [-5.7, 285.0]], \
gain = 3.522e13 }

[[plant.variants]]
name = "soft mount"
zpk = { zeros = [[-0.70, 35.0]], poles = [-1.0, [-0.96, 48.0], [-2.6, 130.0], [-4.8, 240.0]], \
gain = 1.794e13 }

[[controller]]
type = "pi"
kp = 3.5
ti = 0.15

[[controller]]
type = "notch"
freq = 140.0
depth_db = 20.0
zeta = 0.5

[sensor]
zpk = { poles = [[-70.0, 71.414]], gain = 394784.18 }

[requirements]
reference_band = 1.0
settling_time = 0.25
"""


#: The same loop with a proportional gain and a lag stage in place of the PI (zero at
#: 1.06 Hz, pole a decade lower): the review then also re-tunes the integral alternative
#: and finds where the lag helps, work python-control has no single call for.
GIMBAL_12_LAG = GIMBAL_12.replace(
    'type = "pi"\nkp = 3.5\nti = 0.15\n',
    'type = "gain"\nk = 3.5\n\n[[controller]]\ntype = "lag"\nzero = 1.06\npole = 0.106\n')


def control_peaks(design) -> None:  # type: ignore[no-untyped-def]
    """python-control's calls for what analyze() reports on a loop with several
    crossovers: margin and stability_margins over all crossings, Ms and Mt on a grid,
    closed-loop poles, step_response and step_info."""
    import control as ct

    for v in design.variants:
        loop = design.loop(v)
        L = ct.zpk(loop.rational.zeros, loop.rational.poles, loop.rational.gain)
        ct.margin(L)
        ct.stability_margins(L, returnall=True)
        S = ct.feedback(1, L)
        T = ct.feedback(L, 1)
        w = np.logspace(-2, 5, 5000)
        lw = L(1j * w)
        float(np.max(np.abs(1 / (1 + lw))))
        float(np.max(np.abs(lw / (1 + lw))))
        T.poles()
        S.poles()
        ct.step_response(T)
        ct.step_info(T)


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


def _line(label: str, what: str, value: str, note: str = "") -> None:
    print(f"{label:8s} {what:42s} {value:>12s}   {note}".rstrip(), flush=True)


def _console_script() -> list[str]:
    """``loopwarden`` next to this interpreter (the installed entry point), else -m."""
    exe = Path(sys.executable).with_name("loopwarden")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "loopwarden"]


def run_child(cmd: list[str], env: dict[str, str] | None = None,
              cwd: str | None = None) -> tuple[float, float, float, int, str, str]:
    """Run ``cmd``: (wall s, CPU s, peak RSS MB, exit status, stdout, stderr).

    CPU time is user + system of the child and of the processes it waited for (the
    figure workers), from wait4; peak RSS is the child's own ru_maxrss.
    """
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=out, stderr=err, env=env, cwd=cwd)
        _pid, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - t0
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        return (wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024,
                proc.returncode, out.read().decode(errors="replace"),
                err.read().decode(errors="replace"))


def _medians(runs: list[tuple[float, float, float]]) -> tuple[float, float, float]:
    """Median wall, median CPU, largest peak RSS of repeated child runs."""
    return (float(np.median([r[0] for r in runs])), float(np.median([r[1] for r in runs])),
            max(r[2] for r in runs))


_NUMERICAL = ("numpy", "scipy", "matplotlib", "control", "reportlab", "pyhanko")
_LOADED = ("import sys\nfrom loopwarden.cli import main\nrc = main(sys.argv[1:])\n"
           f"print('LOADED', *[m for m in {_NUMERICAL!r} if m in sys.modules])\n")


def bench_startup(repeat: int) -> None:
    exe = _console_script()
    t = _median_time(lambda: subprocess.run([*exe, "--help"], capture_output=True,
                                            check=True), repeat)
    _line("startup", "loopwarden --help", f"{t:.3f} s", "target ≤ 0.3 s")
    t = _median_time(lambda: subprocess.run([*exe, "rules"], capture_output=True,
                                            check=True), repeat)
    _line("startup", "loopwarden rules", f"{t:.3f} s")
    for args in (["--help"], ["rules"]):
        wall, cpu, rss, _rc, _o, _e = run_child([*exe, *args])
        _line("memory", f"loopwarden {' '.join(args)}", f"{rss:.0f} MB",
              f"peak RSS; {wall:.3f} s wall, {cpu:.3f} s CPU")
    for args in (["--help"], ["rules"]):
        out = subprocess.run([sys.executable, "-c", _LOADED, *args], capture_output=True,
                             text=True, check=False).stdout
        loaded = next((ln.split()[1:] for ln in out.splitlines() if ln.startswith("LOADED")),
                      ["?"])
        _line("imports", f"loopwarden {' '.join(args)} loads", ", ".join(loaded) or "none",
              "of " + ", ".join(_NUMERICAL))


_REVIEW = """\
import resource, sys, time
t0 = time.perf_counter()
from loopwarden.cli import main
# signed, so dated today: a signed review may not be back-dated
rc = main(["review", sys.argv[1], "--out", sys.argv[2], "--sign", sys.argv[3], "--quiet"])
print("RESULT", rc, time.perf_counter() - t0,
      resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
"""


def bench_reviews(repeat: int) -> None:
    """Each sample design reviewed in a fresh process (start-up, imports, analysis, PDF,
    signature): median wall time seen from outside, and the child's peak resident size."""
    from loopwarden.cli import main
    from loopwarden.design.loader import load_design

    with tempfile.TemporaryDirectory() as tmp:
        key = Path(tmp) / "bench.p12"
        env = {**os.environ, "LOOPWARDEN_KEY_PASSPHRASE": "bench"}
        os.environ["LOOPWARDEN_KEY_PASSPHRASE"] = "bench"
        with contextlib.redirect_stdout(io.StringIO()):
            main(["keygen", "--out", str(key), "--name", "loopwarden benchmark"])
        gimbal = Path(tmp) / "gimbal12_bench.toml"
        gimbal.write_text(GIMBAL_12)
        for path in [*sorted((ROOT / "sample_designs").glob("*.toml")), gimbal]:
            try:
                variants = len(load_design(str(path)).variants)
                out = Path(tmp) / f"{path.stem}.pdf"
                walls, cpus, peaks = [], [], []
                for _ in range(repeat):
                    out.unlink(missing_ok=True)
                    wall, cpu, rss, rc, stdout, stderr = run_child(
                        [sys.executable, "-c", _REVIEW, str(path), str(out), str(key)],
                        env=env)
                    walls.append(wall)
                    cpus.append(cpu)
                    result = [ln.split() for ln in stdout.splitlines()
                              if ln.startswith("RESULT")]
                    if not result or result[0][1] not in ("0", "1"):
                        raise RuntimeError(f"review exited {rc}: {stderr.strip()[-300:]}")
                    peaks.append(rss)
                note = f"{variants} variant{'s' if variants != 1 else ''}, CPU " \
                       f"{float(np.median(cpus)):.2f} s, peak {max(peaks):.0f} MB" + \
                       (", target ≤ 3 s" if variants >= 3 else "")
                _line("review", f"{path.name} signed PDF", f"{float(np.median(walls)):.3f} s",
                      note)
            except Exception as exc:  # noqa: BLE001 - one design must not hide the others
                _line("review", path.name, "failed", f"{type(exc).__name__}: {exc}")
        try:
            bench_review_parts(ROOT / "sample_designs" / "conveyor_axis.toml", key, env)
        except Exception as exc:  # noqa: BLE001 - the breakdown is extra information
            _line("  part", "review breakdown", "failed", f"{type(exc).__name__}: {exc}")


_BREAKDOWN = """\
import sys, time
t0 = time.perf_counter()
from loopwarden.design.loader import load_design
from loopwarden.review_run import run_review
t1 = time.perf_counter()
review = run_review(load_design(sys.argv[1]), today="2026-01-01")
t2 = time.perf_counter()
from loopwarden.commands.review import _embedded
from loopwarden.report import renderer
from loopwarden.report.pdf import render_pdf
t3 = time.perf_counter()
evidence = renderer("json").render(review)
pdf = render_pdf(review, embedded=_embedded(review, evidence))
t4 = time.perf_counter()
from loopwarden.signing.sign import sign_pdf
sign_pdf(pdf, sys.argv[2], b"bench")
t5 = time.perf_counter()
print("PARTS", t1 - t0, t2 - t1, t3 - t2, t4 - t3, t5 - t4)
"""


def bench_review_parts(design: Path, key: Path, env: dict[str, str]) -> None:
    """Where a signed review's time goes, for one design, in a fresh process."""
    proc = subprocess.run([sys.executable, "-c", _BREAKDOWN, str(design), str(key)],
                          capture_output=True, text=True, env=env, check=False)
    parts = next((ln.split()[1:] for ln in proc.stdout.splitlines()
                  if ln.startswith("PARTS")), None)
    if parts is None:
        raise RuntimeError(proc.stderr.strip()[-300:])
    names = ("import loader, analysis", "analysis and rules", "import reportlab, mpl",
             "JSON, PDF and figures", "sign (incl. pyHanko import)")
    for name, sec in zip(names, parts, strict=True):
        _line("  part", f"{design.stem}: {name}", f"{float(sec):.3f} s")


def bench_ratio(repeat: int) -> None:
    import loopwarden
    from loopwarden.design.loader import parse_design

    design = parse_design(generated_design(12, 3), "<generated-12>")
    loopwarden.analyze(design)  # warm-up (imports, caches)
    t_ours = _median_time(lambda: loopwarden.analyze(design), repeat)
    _line("analyze", "order 12, 3 variants", f"{t_ours:.3f} s")
    try:
        control_equivalent(design)
    except Exception as exc:  # noqa: BLE001 - slycot missing, most likely
        _line("control", "python-control calls", "failed",
              f"{type(exc).__name__}: {exc} (pip install -e '.[bench]')")
        bench_ratio_gimbal(repeat)      # needs no slycot
        return
    t_ct = _median_time(lambda: control_equivalent(design), repeat)
    _line("control", "equivalent python-control calls", f"{t_ct:.3f} s")
    _line("ratio", "analyze / python-control", f"{t_ours / t_ct:.2f}", "target ≤ 1.0")
    bench_ratio_gimbal(repeat)


def _median_cpu(fn, repeat: int) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeat):
        t0 = time.process_time()
        fn()
        times.append(time.process_time() - t0)
    return float(np.median(times))


def bench_ratio_gimbal(repeat: int) -> None:
    """analyze() on the lightly damped 12th-order loop against python-control's calls,
    alternating, CPU time of this process (single-threaded BLAS for both)."""
    import loopwarden
    from loopwarden.design.loader import parse_design

    for label, text, note in (("gimbal 12", GIMBAL_12, "target ≤ 1.0"),
                              ("gimbal 12 lag", GIMBAL_12_LAG,
                               "with the integral alternative and boost band")):
        design = parse_design(text, "<gimbal-12>")
        if label == "gimbal 12":
            crossings = [len(a.margins.gain_crossings) for a in loopwarden.analyze(design)]
            assert min(crossings) >= 3, crossings
        loopwarden.analyze(design)
        control_peaks(design)
        ours, theirs = [], []
        for _ in range(max(repeat, 5)):
            ours.append(_median_cpu(lambda design=design: loopwarden.analyze(design), 1))
            theirs.append(_median_cpu(lambda design=design: control_peaks(design), 1))
        t_ours, t_ct = float(np.median(ours)), float(np.median(theirs))
        _line("analyze", f"{label}, 3 variants (CPU)", f"{t_ours:.3f} s",
              "3 gain crossovers per variant")
        _line("control", "margin, stability_margins, Ms/Mt, step", f"{t_ct:.3f} s")
        _line("ratio", f"analyze / python-control, {label}", f"{t_ours / t_ct:.2f}", note)


def _by_hand_loops(design) -> dict:  # type: ignore[no-untyped-def]
    """The loops of ``design`` as the literal zeros, poles and gains a user would type."""
    out = {"name": design.name, "variants": []}
    for v in design.variants:
        r = design.loop(v).rational
        out["variants"].append({
            "name": v.name, "gain": float(r.gain),
            "zeros": [[float(z.real), float(z.imag)] for z in r.zeros],
            "poles": [[float(p.real), float(p.imag)] for p in r.poles]})
    return out


def bench_by_hand(repeat: int) -> None:
    """`loopwarden review --out` (unsigned PDF) against bench/by_hand.py on the same loops,
    each in a fresh process, alternating; ratio of the medians."""
    import json

    from loopwarden.design.loader import load_design, parse_design

    exe = _console_script()
    env = dict(os.environ)
    with tempfile.TemporaryDirectory() as tmp:
        gimbal = Path(tmp) / "gimbal12.toml"
        gimbal.write_text(GIMBAL_12)
        for label, path, design in (
                ("gimbal 12", gimbal, parse_design(GIMBAL_12, str(gimbal))),
                ("conveyor", ROOT / "sample_designs" / "conveyor_axis.toml",
                 load_design(str(ROOT / "sample_designs" / "conveyor_axis.toml")))):
            loops = Path(tmp) / f"{path.stem}.json"
            loops.write_text(json.dumps(_by_hand_loops(design)))
            ours, theirs = [], []
            for _ in range(repeat):
                for runs, cmd in (
                        (ours, [*exe, "review", str(path), "--out", str(Path(tmp) / "ours.pdf"),
                                "--force", "--quiet"]),
                        (theirs, [sys.executable, str(ROOT / "bench" / "by_hand.py"),
                                  str(loops), str(Path(tmp) / "theirs.pdf")])):
                    wall, cpu, rss, rc, _out, err = run_child(cmd, env=env)
                    if rc not in (0, 1):
                        raise RuntimeError(f"{cmd[1]} exited {rc}: {err.strip()[-300:]}")
                    runs.append((wall, cpu, rss))
            (w1, c1, m1), (w2, c2, m2) = _medians(ours), _medians(theirs)
            n = len(design.variants)
            _line("byhand", f"{label}: review --out ({n} variants)", f"{w1:.3f} s",
                  f"CPU {c1:.3f} s, peak {m1:.0f} MB")
            _line("byhand", f"{label}: python-control + matplotlib", f"{w2:.3f} s",
                  f"CPU {c2:.3f} s, peak {m2:.0f} MB")
            _line("ratio", f"{label}: review --out / by hand", f"{w1 / w2:.2f}",
                  f"wall; CPU {c1 / c2:.2f}; target ≤ 1.0; load average "
                  f"{os.getloadavg()[0]:.2f}")


def bench_suite() -> None:
    """The whole test suite's wall time, as the developer guide runs it."""
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src")}
    wall, cpu, rss, rc, out, err = run_child(
        [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider"], env=env,
        cwd=str(ROOT))
    last = (out.strip().splitlines() or ["?"])[-1]
    _line("suite", "pytest -q (whole suite)", f"{wall:.1f} s",
          f"CPU {cpu:.1f} s, peak {rss:.0f} MB, target < 240 s; {last}")
    if rc != 0:
        raise RuntimeError(f"pytest exited {rc}")


def bench_scaling(repeat: int) -> None:
    import loopwarden
    from loopwarden.design.loader import parse_design

    prev = None
    for order in (4, 8, 16, 32):
        design = parse_design(generated_design(order, 1), f"<generated-{order}>")
        loopwarden.analyze(design)
        t = _median_time(lambda design=design: loopwarden.analyze(design), repeat)
        note = ""
        if prev:
            note = f"x{t / prev:.2f} for 2x order (exponent {np.log2(t / prev):.2f})"
        _line("scaling", f"order {order:2d}, 1 variant", f"{t:.3f} s", note)
        prev = t


def bench_batch(count: int) -> None:
    from loopwarden.cli import main

    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "designs"
        src.mkdir()
        for i in range(count):
            (src / f"d{i:04d}.toml").write_text(generated_design(4 + i % 5, 1, seed=i))
        t0 = time.perf_counter()
        rc = main(["batch", str(src), "--out", str(Path(tmp) / "out"), "--jobs", "2",
                   "--quiet"])
        dt = time.perf_counter() - t0
        written = len(list((Path(tmp) / "out").glob("d*.json")))
        if rc not in (0, 1) or written != count:
            raise RuntimeError(f"batch exited {rc} with {written} of {count} reviews")
        _line("batch", f"{count} designs, 2 workers, JSON", f"{count / dt:.1f} /s",
              f"target ≥ 50 designs/s; load average now {os.getloadavg()[0]:.2f}")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repetitions, smaller batch")
    ap.add_argument("--only", choices=["startup", "reviews", "ratio", "byhand", "scaling",
                                       "batch", "suite"])
    ap.add_argument("--suite", action="store_true",
                    help="also time the whole test suite (minutes)")
    args = ap.parse_args()
    repeat = 2 if args.quick else 5
    import numpy
    import scipy

    print(f"loopwarden benchmark: Python {sys.version.split()[0]}, numpy {numpy.__version__}, "
          f"scipy {scipy.__version__}, {os.cpu_count()} CPUs, "
          f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS')}, "
          f"load average {os.getloadavg()[0]:.2f} (other processes share these cores)",
          flush=True)
    parts = {
        "startup": lambda: bench_startup(repeat),
        "reviews": lambda: bench_reviews(1 if args.quick else 3),
        "ratio": lambda: bench_ratio(repeat),
        "byhand": lambda: bench_by_hand(3 if args.quick else 5),
        "scaling": lambda: bench_scaling(repeat),
        "batch": lambda: bench_batch(100 if args.quick else 1000),
        "suite": bench_suite,
    }
    for name, fn in parts.items():
        if args.only and name != args.only:
            continue
        if name == "suite" and not (args.suite or args.only == "suite"):
            continue
        try:
            fn()
        except Exception as exc:  # noqa: BLE001 - report and go on with the other figures
            _line(name, "could not run", "failed", f"{type(exc).__name__}: {exc}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
