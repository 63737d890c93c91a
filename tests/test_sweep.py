"""Parameter sweeps: worst cases and pass fractions against brute force outside the project.

Held-out boxes, each with its reference computed here by code that shares nothing with
loopwarden's analysis:

* box A, a gain and a delay range: ``L = K·e^(−sT)·10(s+1)/((s+10)·s(s+2))``;
* box B, a drifting resonance: ``L = K·kp(s + 1/ti)/(s(s+1)((s+1.2)² + wr²))``;
* box D, a lightly damped zero pair and pole pair drifting together while the gain
  moves the crossover through them: the smallest phase margin lies inside the box;
* box C, an unstable plant pole with a range:
  ``L = 50K(s+1)/(s(s−a)(s+50))``, whose closed loop is stable exactly when
  ``(50 − a)(K − a) > K`` (Routh–Hurwitz on ``s³ + (50−a)s² + 50(K−a)s + 50K`` [derived]).

The brute force [derived] evaluates ``L(jω)`` from polynomial coefficients (numpy polyval)
on 40 000 log-spaced frequencies at every point of a dense grid of the box and reads the
phase margin (``180° + ∠L`` at ``|L| = 1``, interpolated in ln ω), the gain margin
(``−20·log10|L|`` where the unwrapped phase passes −180°) and ``Ms = max 1/|1 + L|``.
python-control's ``stability_margins`` [reference library] checks a delay-free point.
"""

from __future__ import annotations

import json
import math
from concurrent.futures import ProcessPoolExecutor
from multiprocessing import get_context
from pathlib import Path

import numpy as np
import pytest

from loopwarden.analysis import analyze_variant
from loopwarden.analysis.sweep import corner_points, run_sweep
from loopwarden.analysis.sweep_models import sample_loops
from loopwarden.analysis.sweep_response import FIGURES, evaluate_loops, sample_grid
from loopwarden.cli import main
from loopwarden.design.loader import design_at, parse_design
from loopwarden.design.parameters import SweepSettings
from loopwarden.report import renderer
from loopwarden.review_run import run_review

BOX_A = """
[design]
name = "box A: gain and delay"
[parameters]
K = { nominal = 4.0, min = 2.0, max = 8.0 }
T = { nominal = 0.05, min = 0.02, max = 0.15 }
[sweep]
samples = 256
[plant]
zpk = { zeros = [], poles = [0.0, -2.0], gain = "K" }
delay = "T"
[[controller]]
type = "lead"
zero = 1.0
pole = 10.0
"""

BOX_B = """
[design]
name = "box B: drifting resonance"
[parameters]
K = { nominal = 1600.0, min = 1200.0, max = 2000.0 }
wr = { nominal = 40.0, min = 34.0, max = 46.0, distribution = "normal", sigma = 3.0 }
[sweep]
samples = 256
[plant]
zpk = { zeros = [], poles = [-1.0, [-1.2, "wr"]], gain = "K" }
[[controller]]
type = "pi"
kp = 0.4
ti = 0.5
"""

BOX_D = """
[design]
name = "box D: crossover through an anti-resonance"
[parameters]
K = { nominal = 600.0, min = 200.0, max = 1500.0 }
wr = { nominal = 10.0, min = 8.0, max = 12.0 }
[sweep]
samples = 64
[plant]
zpk = { zeros = [[-1.0, "wr"]], poles = [0.0, -50.0, [-3.0, "wr"]], gain = "K" }
[[controller]]
type = "gain"
k = 1.0
"""

BOX_E = """
[design]
name = "box E: unstable plant pole, stable loop"
[parameters]
K = { nominal = 4.0, min = 3.0, max = 5.0 }
a = { nominal = 1.0, min = 0.5, max = 1.5 }
[sweep]
samples = 128
[plant]
zpk = { zeros = [-1.0], poles = [0.0, "a", -50.0], gain = "K" }
[[controller]]
type = "gain"
k = 50.0
"""

BOX_C = """
[design]
name = "box C: unstable pole"
[parameters]
K = { nominal = 2.0, min = 1.0, max = 3.0 }
a = { nominal = 1.0, min = 0.5, max = 2.5 }
[sweep]
samples = 1024
worst_case = false
[plant]
zpk = { zeros = [-1.0], poles = [0.0, "a", -50.0], gain = "K" }
[[controller]]
type = "gain"
k = 50.0
"""


# --------------------------------------------------------------------------- brute force
def _poly_loop(box: str, K: np.ndarray, x: np.ndarray):  # type: ignore[no-untyped-def]
    """(numerator, denominator, delay) coefficient rows for each point (descending s)."""
    if box == "A":          # 10(s+1)/(s+10) · K/(s(s+2)), delay x
        num = np.stack([10.0 * K, 10.0 * K], axis=1)
        den = np.tile(np.convolve([1.0, 10.0], [1.0, 2.0, 0.0]), (K.size, 1))
        return num, den, x
    if box == "B":          # 0.4(s + 2)/s · K/((s+1)(s² + 2.4s + 1.44 + wr²))
        num = np.stack([0.4 * K, 0.8 * K], axis=1)
        den = np.array([np.convolve([1.0, 1.0, 0.0], [1.0, 2.4, 1.44 + w * w]) for w in x])
        return num, den, np.zeros(K.size)
    if box == "D":          # K(s² + 2s + 1 + wr²)/(s(s+50)(s² + 6s + 9 + wr²))
        num = np.array([K[i] * np.array([1.0, 2.0, 1.0 + w * w]) for i, w in enumerate(x)])
        den = np.array([np.convolve([1.0, 50.0, 0.0], [1.0, 6.0, 9.0 + w * w]) for w in x])
        return num, den, np.zeros(K.size)
    if box == "E":          # 50K(s+1)/(s(s − a)(s+50))
        num = np.stack([50.0 * K, 50.0 * K], axis=1)
        den = np.array([np.convolve([1.0, -a, 0.0], [1.0, 50.0]) for a in x])
        return num, den, np.zeros(K.size)
    raise ValueError(box)


def _brute(box: str, K: np.ndarray, x: np.ndarray) -> dict[str, np.ndarray]:
    w = np.logspace(-3, 3.5, 40_000)
    num, den, delay = _poly_loop(box, K, x)
    s = 1j * w
    pm, gm, ms, gm_low = [], [], [], []
    for i in range(K.size):
        L = np.polyval(num[i], s) / np.polyval(den[i], s) * np.exp(-s * delay[i])
        mag, ph = np.abs(L), np.unwrap(np.angle(L))
        lu = np.log(w)
        c = np.flatnonzero((mag[:-1] - 1.0) * (mag[1:] - 1.0) < 0)
        pms = []
        for j in c:
            t = -np.log(mag[j]) / (np.log(mag[j + 1]) - np.log(mag[j]))
            p = math.degrees(ph[j] + t * (ph[j + 1] - ph[j]))
            pms.append((180.0 + p + 180.0) % 360.0 - 180.0)
        pm.append(min(pms, key=abs) if pms else math.inf)
        g = (ph + math.pi) / (2 * math.pi)
        k = np.flatnonzero(np.floor(g[:-1]) != np.floor(g[1:]))
        gms, lows = [], []
        for j in k:
            target = max(np.floor(g[j]), np.floor(g[j + 1]))
            t = (target - g[j]) / (g[j + 1] - g[j])
            m = math.exp(np.log(mag[j]) + t * (np.log(mag[j + 1]) - np.log(mag[j])))
            if m <= 1.0:
                gms.append(-20.0 * math.log10(m))
            else:
                lows.append(-20.0 * math.log10(m))
        del lu
        gm.append(min(gms) if gms else math.inf)
        gm_low.append(max(lows) if lows else math.nan)
        ms.append(float(np.max(1.0 / np.abs(1.0 + L))))
    return {"phase_margin_deg": np.array(pm), "gain_margin_db": np.array(gm),
            "gain_margin_lower_db": np.array(gm_low), "peak_sensitivity": np.array(ms)}


def _box_grid(design_text: str, n: int) -> tuple[np.ndarray, np.ndarray]:
    d = parse_design(design_text, "box.toml")
    lo, hi = d.parameters.lower, d.parameters.upper
    a, b = np.meshgrid(np.linspace(lo[0], hi[0], n), np.linspace(lo[1], hi[1], n))
    return a.ravel(), b.ravel()


# --------------------------------------------------------------------------- figures
@pytest.mark.parametrize("text", [BOX_A, BOX_B], ids=["delay", "resonance"])
def test_vectorised_figures_match_the_full_analysis(text: str) -> None:
    # The sweep's vectorised figures equal loopwarden's per-loop analysis at random
    # points (same definitions; the per-loop analysis is checked against references
    # elsewhere): agreement to 1e−7 relative.
    d = parse_design(text, "box.toml")
    lo, hi = d.parameters.lower, d.parameters.upper
    X = np.vstack([corner_points(lo, hi, 0), lo + np.array([[0.3, 0.7], [0.9, 0.2]]) * (hi - lo)])
    fam = sample_loops(d, 0, X)
    fig = evaluate_loops(fam, sample_grid([fam]))
    for i, row in enumerate(X):
        at = design_at(d, d.parameters.values(row))
        a = analyze_variant(at, at.variants[0])
        ref = {"phase_margin_deg": a.margins.phase_margin_deg,
               "gain_margin_db": a.margins.gain_margin_db,
               "delay_margin_s": a.margins.delay_margin_s,
               "peak_sensitivity": a.sensitivity.peak_sensitivity,
               "peak_complementary": a.sensitivity.peak_complementary,
               "disk_margin": a.sensitivity.disk_margin}
        for name, value in ref.items():
            assert fig.figure(name)[i] == pytest.approx(value, rel=1e-7), name
        assert bool(fig.stable[i]) is a.stability.closed_loop_stable


def test_delay_free_point_against_python_control() -> None:
    control = pytest.importorskip("control")
    d = parse_design(BOX_B, "b.toml")
    X = np.array([[1900.0, 35.5]])
    fam = sample_loops(d, 0, X)
    fig = evaluate_loops(fam, sample_grid([fam]))
    num, den, _ = _poly_loop("B", X[:, 0], X[:, 1])
    gm, pm, _, _, _, _ = control.stability_margins(control.tf(num[0], den[0]))
    # [reference library] python-control: GM as a ratio, PM in degrees.
    assert fig.phase_margin_deg[0] == pytest.approx(pm, rel=1e-6)
    assert fig.gain_margin_db[0] == pytest.approx(20 * math.log10(gm), rel=1e-6)


# --------------------------------------------------------------------------- worst cases
@pytest.mark.parametrize(("box", "text"), [("A", BOX_A), ("B", BOX_B)],
                         ids=["gain-delay", "resonance"])
def test_worst_case_matches_brute_force(box: str, text: str) -> None:
    d = parse_design(text, "box.toml")
    result = run_sweep(d)
    K, x = _box_grid(text, 21)
    ref = _brute(box, K, x)
    lo, hi = d.parameters.lower, d.parameters.upper
    for name, worse_is_larger in (("phase_margin_deg", False), ("gain_margin_db", False),
                                  ("peak_sensitivity", True)):
        wp = result.worst[name]
        assert wp is not None
        brute = float(np.max(ref[name]) if worse_is_larger else np.min(ref[name]))
        # [derived] dense brute force of the box; 0.2 % as the issue states.
        assert wp.value == pytest.approx(brute, rel=2e-3), name
        assert np.all(np.array(wp.point) >= lo) and np.all(np.array(wp.point) <= hi)
        # The figure at the reported point, by the brute force itself.
        at = _brute(box, np.array([wp.point[0]]), np.array([wp.point[1]]))[name][0]
        assert wp.value == pytest.approx(at, rel=1e-4), name


def test_worst_case_inside_the_box_found_by_the_search() -> None:
    # Box D: the phase margin is smallest where the crossover meets the phase dip below
    # the anti-resonance, inside the gain range; the brute force [derived] on a 66 × 11
    # grid brackets it.
    d = parse_design(BOX_D, "d.toml")
    wp = run_sweep(d).worst["phase_margin_deg"]
    K, x = np.meshgrid(np.linspace(200.0, 1500.0, 66), np.linspace(8.0, 12.0, 11))
    ref = _brute("D", K.ravel(), x.ravel())["phase_margin_deg"]
    brute = float(np.min(ref))
    assert wp is not None and wp.value == pytest.approx(brute, rel=2e-3)
    assert wp.value <= brute + 1e-6            # never better than a point of the grid
    assert 200.0 < wp.point[0] < 1500.0 and 8.0 <= wp.point[1] <= 12.0
    assert wp.found_by == "search"


def test_unstable_plant_pole_worst_case_matches_brute_force() -> None:
    # Box E: an unstable plant pole a in [0.5, 1.5], the closed loop stable over the whole
    # box (Routh–Hurwitz below holds at every corner and is monotone in K and a). Its gain
    # margin is a gain-reduction margin (|L| > 1 where the phase crosses −180°).
    d = parse_design(BOX_E, "e.toml")
    result = run_sweep(d)
    assert bool(result.stable.all())
    K, x = _box_grid(BOX_E, 21)
    assert _routh_stable(K, x).all()
    ref = _brute("E", K, x)
    for name, worse_is_larger in (("phase_margin_deg", False),
                                  ("gain_margin_lower_db", True),
                                  ("peak_sensitivity", True)):
        wp = result.worst[name]
        brute = float(np.nanmax(ref[name]) if worse_is_larger else np.nanmin(ref[name]))
        assert wp is not None and wp.value == pytest.approx(brute, rel=2e-3), name
        assert 3.0 <= wp.point[0] <= 5.0 and 0.5 <= wp.point[1] <= 1.5


def _routh_stable(K: np.ndarray, a: np.ndarray) -> np.ndarray:
    return (50.0 - a) * (K - a) > K


def test_unstable_part_of_the_box_is_found() -> None:
    d = parse_design(BOX_C, "c.toml")
    review = run_review(d, today="2026-12-01")
    doc = json.loads(renderer("json").render(review))
    unc = doc["uncertainty"]
    assert unc["unstable_samples"] > 0
    example = unc["unstable_example"]["parameters"]
    assert 1.0 <= example["K"] <= 3.0 and 0.5 <= example["a"] <= 2.5
    assert not _routh_stable(np.array(example["K"]), np.array(example["a"]))
    # Every sample's verdict agrees with Routh–Hurwitz [derived].
    sw = review.uncertainty.sweep
    exact = _routh_stable(sw.points[:, 0], sw.points[:, 1])
    assert np.array_equal(sw.stable, exact)
    # Stable fraction of the uniform box: the area where (50 − a)(K − a) > K, by a
    # 4000 × 4000 midpoint grid [derived]; the sweep's fraction within 1.5 points.
    k, a = np.meshgrid(1.0 + (np.arange(4000) + 0.5) / 2000.0,
                       0.5 + (np.arange(4000) + 0.5) / 2000.0)
    area = float(np.mean(_routh_stable(k, a)))
    assert unc["pass_fraction"]["stability.closed_loop"] == pytest.approx(area, abs=0.015)
    worst_stab = [f for f in doc["findings"] if f["rule"] == "stability.closed_loop"
                  and f["variant"].endswith("(worst case)")]
    assert len(worst_stab) == 1 and worst_stab[0]["status"] == "fail"


#: Fractions of 100 000 uniform points of box A passing the general rule set's phase
#: margin (≥ 45°), gain margin (≥ 6 dB) and Ms (≤ 2) limits [derived]: independent numpy
#: brute force in bench/sweep_reference.py (seed 12345), whose output is quoted there.
BOX_A_FRACTIONS = {"margin.phase": 0.7605, "margin.gain": 0.80931,
                   "robustness.sensitivity_peak": 0.69087}


def test_pass_fractions_match_a_large_sample() -> None:
    d = parse_design(BOX_A.replace("samples = 256", "samples = 2000")
                     .replace("[sweep]", "[sweep]\nworst_case = false"), "a.toml")
    review = run_review(d, today="2026-12-01")
    got = review.uncertainty.pass_fraction
    for rule, ref in BOX_A_FRACTIONS.items():
        assert got[rule] == pytest.approx(ref, abs=0.015), rule


# --------------------------------------------------------------------------- determinism
def _json_bytes(text: str, tmp_path: Path, name: str, *extra: str) -> bytes:
    design = tmp_path / "design.toml"
    design.write_text(text)
    out = tmp_path / f"{name}.json"
    assert main(["review", str(design), "--json", str(out), "--date", "2026-12-01", "-q",
                 "--force", *extra]) == 0
    return out.read_bytes()


def test_same_seed_same_bytes_here_in_processes_and_on_dask(tmp_path: Path) -> None:
    text = BOX_B.replace("samples = 256", "samples = 600")   # three chunks
    local = _json_bytes(text, tmp_path, "local")
    d = parse_design(text, "design.toml")
    here = renderer("json").render(run_review(d, today="2026-12-01"))
    with ProcessPoolExecutor(2, mp_context=get_context("spawn")) as pool:
        pooled = renderer("json").render(run_review(d, today="2026-12-01", executor=pool))
    from dask import distributed
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster:
        on_dask = _json_bytes(text, tmp_path, "dask", "--scheduler", cluster.scheduler_address)
    assert json.loads(local)["uncertainty"]["samples"] == 600
    assert local == here == pooled == on_dask


def test_worst_variants_paste_back(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    design = tmp_path / "a.toml"
    design.write_text(BOX_A)
    assert main(["review", str(design), "--worst-variants", "--date", "2026-12-01"]) in (0, 1)
    out = capsys.readouterr().out
    toml = out[out.index("# Worst points"):]
    # [derived] the pasted variant is the worst point itself: its phase margin, reviewed
    # as an ordinary variant, is the sweep's worst.
    pasted = parse_design(BOX_A.replace("[[controller]]", toml + "\n[[controller]]", 1),
                          "pasted.toml")
    d = parse_design(BOX_A, "a.toml")
    worst = run_sweep(d, SweepSettings(samples=64)).worst["phase_margin_deg"]
    variant = next(v for v in pasted.variants if "phase_margin_deg" in v.name)
    a = analyze_variant(pasted, variant)
    assert a.margins.phase_margin_deg == pytest.approx(worst.value, rel=1e-6)


def test_sweep_figures_cover_the_json_contract() -> None:
    d = parse_design(BOX_B, "b.toml")
    doc = json.loads(renderer("json").render(run_review(d, today="2026-12-01")))
    unc = doc["uncertainty"]
    assert set(unc["worst"]) == {*FIGURES, "settling_time_s"}
    assert set(unc["parameters"]["wr"]) == {"nominal", "min", "max", "distribution", "sigma"}
    assert unc["seed"] == 0 and unc["samples"] == 256 and unc["corners"] == 4
    for rule, frac in unc["pass_fraction"].items():
        assert frac is None or 0.0 <= frac <= 1.0, rule


def test_pdf_has_the_uncertainty_section(tmp_path: Path) -> None:
    import pypdf

    design = tmp_path / "d.toml"
    design.write_text(BOX_D.replace("samples = 64", "samples = 64\nworst_case = false"))
    out = tmp_path / "d.pdf"
    assert main(["review", str(design), "--out", str(out), "--date", "2026-12-01",
                 "-q"]) == 0
    pages = [p.extract_text() for p in pypdf.PdfReader(out).pages]
    section = next(t for t in pages if "Uncertain parameters" in t)
    assert "random points passing" in section and "K = " in section
    assert "against wr and K" in " ".join(pages) or "against K and wr" in " ".join(pages)


def test_batch_on_dask_matches_the_local_batch(tmp_path: Path) -> None:
    from dask import distributed

    from loopwarden.batch import run_batch

    src = tmp_path / "designs"
    src.mkdir()
    (src / "b.toml").write_text(BOX_B.replace("samples = 256", "samples = 64"))
    (src / "plain.toml").write_text(BOX_B.split("[parameters]")[0]
                                    + BOX_B.split("[plant]")[1].join(["[plant]", ""])
                                    .replace('"K"', "1600.0").replace('"wr"', "40.0"))
    local = run_batch(sorted(src.glob("*.toml")), tmp_path / "local", date="2026-12-01",
                      jobs=1)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        remote = run_batch(sorted(src.glob("*.toml")), tmp_path / "dask", date="2026-12-01",
                           scheduler=cluster.scheduler_address)
    assert [o.verdict for o in local.outcomes] == [o.verdict for o in remote.outcomes]
    for name in ("b.json", "plain.json", "summary.csv"):
        assert (tmp_path / "local" / name).read_bytes() == (tmp_path / "dask" / name).read_bytes()


def test_delay_loop_stability_matches_the_first_crossing() -> None:
    # Box A with the gain range widened into instability. L has no open-loop RHP pole and
    # its phase falls monotonically through −180° (type 1, lead, delay), |L| falling too:
    # the closed loop is stable exactly when |L| < 1 at the first phase crossover
    # [derived: Nyquist criterion, P = 0], read here on a dense grid.
    text = BOX_A.replace("max = 8.0", "max = 30.0").replace("samples = 256", "samples = 48")
    d = parse_design(text, "wide.toml")
    X = np.vstack([corner_points(d.parameters.lower, d.parameters.upper, 0),
                   np.column_stack([np.linspace(2.0, 30.0, 29), np.linspace(0.15, 0.02, 29)])])
    fam = sample_loops(d, 0, X)
    fig = evaluate_loops(fam, sample_grid([fam]))
    w = np.logspace(-2, 3, 200_000)
    s = 1j * w
    expected = []
    for K, T in X:
        L = 10.0 * K * (s + 1.0) / ((s + 10.0) * s * (s + 2.0)) * np.exp(-s * T)
        ph = np.unwrap(np.angle(L))
        expected.append(bool(np.abs(L[np.argmax(ph <= -math.pi)]) < 1.0))
    assert fig.stable.tolist() == expected
    assert 0 < sum(expected) < X.shape[0]


def test_certified_fallback_agrees(monkeypatch: pytest.MonkeyPatch) -> None:
    # Every row forced onto the certified per-loop count (no step accepted, no cutting):
    # the verdicts are those of Routh–Hurwitz [derived] for box C, as the grid count's.
    from loopwarden.analysis import sweep_stability

    d = parse_design(BOX_C, "c.toml")
    X = np.column_stack([np.linspace(1.0, 3.0, 9), np.linspace(2.5, 0.5, 9)])
    fam = sample_loops(d, 0, X)
    w = sample_grid([fam])
    fast = evaluate_loops(fam, w)
    monkeypatch.setattr(sweep_stability, "_STEP_RTOL", 0.0)
    monkeypatch.setattr(sweep_stability, "_MAX_DEPTH", 0)
    slow = evaluate_loops(fam, w)
    assert slow.certified_count.all() and not fast.certified_count.any()
    exact = _routh_stable(X[:, 0], X[:, 1])
    assert slow.stable.tolist() == fast.stable.tolist() == exact.tolist()
    assert 0 < int(exact.sum()) < exact.size


def test_waivers_are_decided_on_the_worst_case_findings() -> None:
    """A waiver of the rule on every variant (no `variant` key) turns the worst case's fail
    into waived; an expired one does not (README "Waivers", as on any variant)."""
    waiver = """
[[waivers]]
rule = "margin.phase"
reason = "retune scheduled"
approved_by = "A. Engineer"
expires = {expires}
"""
    statuses = {}
    for expires in ("2027-03-31", "2026-11-01"):
        d = parse_design(BOX_A.replace("samples = 256", "samples = 64")
                         + waiver.replace("{expires}", expires), "a.toml")
        review = run_review(d, today="2026-12-01")
        found = [f for f in review.findings
                 if f.rule == "margin.phase" and f.variant == "nominal (worst case)"]
        assert len(found) == 1
        statuses[expires] = found[0]
    assert statuses["2027-03-31"].status == "waived"
    assert "Waived by A. Engineer" in statuses["2027-03-31"].message
    assert statuses["2026-11-01"].status == "fail"
    assert "expired" in statuses["2026-11-01"].message
