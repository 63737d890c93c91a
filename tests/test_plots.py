"""Figures of the PDF review, drawn from the LoopAnalysis of real sample designs."""

from __future__ import annotations

import dataclasses
import functools
import io
import math
from pathlib import Path

import control
import numpy as np
import pytest
from PIL import Image

import loopwarden
from loopwarden.report import plots

SAMPLES = Path(__file__).resolve().parents[1] / "sample_designs"


@functools.cache
def sample_review(name: str):  # type: ignore[no-untyped-def]
    return loopwarden.review(loopwarden.load_design(str(SAMPLES / f"{name}.toml")),
                             today="2026-01-15")


def test_plotted_phase_meets_minus_180_plus_pm_at_crossover() -> None:
    # Reference: python-control's stability_margins on the same rational loop (hoist, no
    # delay).  On the plotted branch the phase at the gain crossover must be −180° + PM.
    review = sample_review("hoist_lag_tail")
    a = review.analyses[0]
    loop = review.design.loop(review.design.variants[0]).rational
    _gm, pm, _sm, _wpc, wgc, _wms = control.stability_margins(
        control.zpk(loop.zeros, loop.poles, loop.gain))
    ph = plots._phase_deg(a)
    at = plots._interp_log(a.curves.frequency_rad_s, ph, wgc)
    assert at == pytest.approx(-180.0 + pm, abs=0.2)      # grid interpolation of the curve
    assert ph[0] == pytest.approx(0.0, abs=10.0)          # type 0: branch starts near 0°


def test_frequency_unit_hz_divides_by_two_pi() -> None:
    # [derived] 1 Hz = 2π rad/s; gimbal_rate is written in Hz, hoist in rad/s.
    unit = plots.FrequencyUnit.of(sample_review("gimbal_rate").design)
    assert unit.label == "Hz"
    assert unit.show(2.0 * math.pi) == pytest.approx(1.0, rel=1e-12)
    assert plots.FrequencyUnit.of(sample_review("hoist_lag_tail").design).show(3.0) == 3.0


def test_every_figure_is_an_rgb_png_at_print_resolution() -> None:
    review = sample_review("hoist_lag_tail")
    figs = plots.variant_plots(review.design, review.analyses[0])
    assert list(figs) == ["bode", "nyquist", "poles", "time", "sensitivity"]
    for fig in figs.values():
        img = Image.open(io.BytesIO(fig.png))
        assert img.format == "PNG" and img.mode == "RGB"
        assert img.size == (round(fig.width_in * plots.DPI), round(fig.height_in * plots.DPI))
        assert plots.DPI >= 200 and "Software" not in img.info and fig.caption


def test_figures_are_byte_identical_across_renders() -> None:
    a = sample_review("hoist_lag_tail").analyses[0]
    assert plots.time_figure(a).png == plots.time_figure(a).png


def test_closed_loop_zeros_are_read_from_the_model() -> None:
    # [derived from the design file] r → y zeros of C·P with a unity sensor: the lag zero
    # at −0.5 rad/s is the only finite zero of the hoist loop.
    z = plots.closed_loop_zeros(sample_review("hoist_lag_tail").analyses[0])
    assert z.tolist() == [pytest.approx(-0.5)]


def test_delay_loop_marks_only_the_deciding_crossings() -> None:
    # A transport delay makes the phase cross −180° again and again; only the crossings
    # that set the figures or have a gain margin within 30 dB are drawn.
    from loopwarden.analysis.results import PhaseCrossing

    a = next(x for x in sample_review("conveyor_axis").analyses if x.variant == "heavy load")
    # Add the far crossings a 4 ms delay produces (∠L = −180° − 360°·k near ω = (2k+1)π/τ
    # with |L| tiny there) to whatever the analysis lists.
    far = tuple(PhaseCrossing(frequency_rad_s=(2 * k + 1) * math.pi / 0.004,
                              magnitude=10 ** (-(100 + 10 * k) / 20),
                              gain_margin_db=100.0 + 10 * k) for k in range(1, 9))
    a = dataclasses.replace(a, margins=dataclasses.replace(
        a.margins, phase_crossings=a.margins.phase_crossings + far))
    gains, phases = plots.marked_crossings(a.margins)
    assert any(p.frequency_rad_s == a.margins.phase_crossover_rad_s for p in phases)
    assert len(phases) <= plots.MAX_MARKED and len(gains) <= plots.MAX_MARKED
    assert all(abs(p.gain_margin_db) <= plots.MARK_GM_DB
               or p.frequency_rad_s == a.margins.phase_crossover_rad_s for p in phases)
    fig = plots.bode_figure(a, plots.FrequencyUnit("rad/s", 1.0))
    assert "not drawn" in fig.caption


def test_missing_parts_render_an_explanation_not_a_crash() -> None:
    a = sample_review("hoist_lag_tail").analyses[0]
    broken = dataclasses.replace(
        a, stability=dataclasses.replace(a.stability, closed_loop_poles=(), method="nyquist"),
        step=None, slow_tail=None, errors={"step": "closed loop is unstable"})
    assert "not available" in plots.pole_zero_figure(broken, np.zeros(0, complex)).caption
    with_model = plots.pole_zero_figure(broken, np.array([-0.5 + 0j]),
                                        open_loop_poles=np.array([-2.0 + 0j, -20.0 + 0j]))
    assert "Nyquist count" in with_model.caption
    assert "unstable" in plots.time_figure(broken).caption


def test_slow_pair_tail_is_drawn_from_the_analysis() -> None:
    # The caption names the tail only when the analysis found a slow pair (hoist has one).
    a = sample_review("hoist_lag_tail").analyses[0]
    assert a.slow_tail is not None and a.slow_tail.pairs
    assert "slow pair" in plots.time_figure(a).caption
    no_tail = dataclasses.replace(a, slow_tail=dataclasses.replace(a.slow_tail, pairs=()))
    assert "slow pair" not in plots.time_figure(no_tail).caption


# --------------------------------------------------------------------------- sampled loops
def test_sampled_frequency_axis_ends_at_the_nyquist_frequency() -> None:
    # pump_pressure samples at T = 0.05 s and is written in Hz: π/T = 62.83 rad/s = 10 Hz
    # [derived: f_N = 1/(2T)].
    review = sample_review("pump_pressure")
    unit = plots.FrequencyUnit.of(review.design)
    for a in review.analyses:
        lo, hi = plots.frequency_view(a, unit)
        assert hi == pytest.approx(1.0 / (2 * 0.05), rel=1e-12)
        assert lo == pytest.approx(a.curves.frequency_rad_s[0] / (2 * math.pi))
        figs = plots.variant_plots(review.design, a)
        assert "Nyquist frequency π/T = 10 Hz" in figs["bode"].caption
        assert "Nyquist frequency" in figs["sensitivity"].caption
        assert "π/T" in figs["nyquist"].caption
        assert "sampling instants t = kT" in figs["time"].caption


def test_z_plane_keeps_the_unit_circle_in_view_and_names_far_roots() -> None:
    review = sample_review("pump_pressure")
    a = review.analyses[0]
    poles = np.asarray(a.stability.closed_loop_poles, dtype=complex)
    zeros = plots.closed_loop_zeros(a)
    r, outside = plots.z_plane_view(poles, zeros)
    # Every closed-loop pole of a stable sampled loop is inside the unit circle
    # [definition], so the view is set by the circle and the roots within 2.5.
    assert np.all(np.abs(poles) < 1.0) and 1.25 <= r <= 1.1 * plots.Z_VIEW_MAX
    assert all(abs(x) > r for x in outside)
    assert set(np.round(outside, 9)) == set(np.round(zeros[np.abs(zeros) > r], 9))
    caption = plots.pole_zero_figure(a, zeros).caption
    assert "z-plane" in caption and "unit circle" in caption
    for x in outside:
        assert f"z = {plots._fmt_z(x)}" in caption


def test_sampled_closed_loop_zeros_against_scipy(tmp_path: Path) -> None:
    # y/r = C·P_y/(1 + C·P_ym) for a digital PI C(z) = 2(z − 0.9)/(z − 1) around
    # P(s) = (s + 2)/((s + 1)(s + 3)) with a sensor 1/(0.02 s + 1), T = 0.1 s: its zeros are
    # C's zero 0.9, the ZOH zeros of P [scipy.signal.cont2discrete] and the sensor's mode
    # e^(−50·T) (a zero of y/r, as the sensor pole is in continuous time) [derived].
    from scipy.signal import cont2discrete

    design = loopwarden.load_design(str(_write(tmp_path, "pi_z.toml", """
        [design]
        name = "digital PI"
        [sampling]
        period = 0.1
        [plant]
        zpk = { zeros = [-2.0], poles = [-1.0, -3.0], gain = 1.0 }
        [sensor]
        tf = { num = [1.0], den = [0.02, 1.0] }
        [[controller]]
        type = "tf"
        domain = "z"
        num = [2.0, -1.8]
        den = [1.0, -1.0]
        """)))
    num, _den, _ = cont2discrete(([1.0, 2.0], np.poly([-1.0, -3.0])), 0.1, method="zoh")
    expected = np.concatenate([[0.9], np.roots(np.trim_zeros(num[0], "f")), [math.exp(-5.0)]])
    got = plots.closed_loop_zeros(loopwarden.analyze(design)[0])
    assert sorted(got.real) == pytest.approx(sorted(expected.real), abs=1e-7)
    assert np.all(np.abs(got.imag) < 1e-9)


def _write(folder: Path, name: str, body: str) -> Path:
    import textwrap

    path = folder / name
    path.write_text(textwrap.dedent(body), encoding="utf-8")
    return path


# --------------------------------------------------------------------------- measured plants
#: A sweep too short for its loop: P(s) = 50/((s + 1)(s/200 + 1)) measured over 0.1–5 rad/s
#: under a PI (kp = 1, ti = 1 s).  At 5 rad/s |L| = |1 + 1/(5j)|·50/(|1 + 5j|·|1 + j/40|)
#: = 9.997 ≥ 1 [derived], so the gain crossover lies above the sweep.
SHORT_SWEEP = """
    [design]
    name = "Short sweep"
    [plant.frd]
    file = "short.csv"
    frequency_unit = "rad/s"
    magnitude_unit = "db"
    phase_unit = "deg"
    [[controller]]
    type = "pi"
    kp = 1.0
    ti = 1.0
    """


def write_short_sweep(folder: Path) -> Path:
    """The SHORT_SWEEP design and its CSV (40 points from the model) in ``folder``."""
    w = np.logspace(-1.0, math.log10(5.0), 40)
    p = 50.0 / ((1j * w + 1.0) * (1j * w / 200.0 + 1.0))
    rows = ["frequency,magnitude,phase"] + [
        f"{wi:.10g},{20 * math.log10(abs(pi)):.10g},{math.degrees(np.angle(pi)):.10g}"
        for wi, pi in zip(w, p, strict=True)]
    (folder / "short.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    return _write(folder, "short.toml", SHORT_SWEEP)


def test_measured_view_extends_past_the_sweep_and_shades_it() -> None:
    # spindle_sweep.csv runs from 0.5 Hz to 1000 Hz (its first and last rows, read here with
    # the csv module); the axis reaches MEASURED_MARGIN beyond each end.
    import csv

    review = sample_review("spindle_sweep")
    with open(SAMPLES / "spindle_sweep.csv", newline="", encoding="utf-8") as fh:
        rows = [r for r in csv.reader(line for line in fh if not line.startswith("#"))]
    freqs = [float(r[rows[0].index("frequency")]) for r in rows[1:] if r]
    a = review.analyses[0]
    lo, hi = plots.frequency_view(a, plots.FrequencyUnit.of(review.design))
    assert lo == pytest.approx(freqs[0] / plots.MEASURED_MARGIN, rel=1e-9)
    assert hi == pytest.approx(freqs[-1] * plots.MEASURED_MARGIN, rel=1e-9)
    figs = plots.variant_plots(review.design, a)
    assert "Shaded: the measured range of spindle_sweep.csv" in figs["bode"].caption
    assert f"({len(freqs)} points)" in figs["bode"].caption
    assert "measured range" in figs["sensitivity"].caption
    assert "not decided" not in figs["bode"].caption      # every crossing is inside it


def test_measured_variant_has_no_model_figures() -> None:
    review = sample_review("spindle_sweep")
    measured = plots.variant_plots(review.design, review.analyses[0])
    assert list(measured) == ["bode", "nyquist", "sensitivity"]
    assert set(plots.MODEL_FIGURES) == {"poles", "time"}
    # the model variant beside it keeps all five
    model = plots.variant_plots(review.design, review.analyses[1])
    assert list(model) == ["bode", "nyquist", "poles", "time", "sensitivity"]


def test_crossing_beyond_a_short_sweep_is_flagged(tmp_path: Path) -> None:
    review = loopwarden.review(loopwarden.load_design(str(write_short_sweep(tmp_path))),
                               today="2026-01-15")
    a = review.analyses[0]
    assert a.coverage is not None
    assert a.coverage.loop_gain_at_max == pytest.approx(9.997, abs=1e-3)   # [derived] above
    sides = plots.uncovered_sides(a)
    assert sides and set(sides.values()) == {"above"}
    assert set(sides) == set(a.coverage.uncovered)
    figs = plots.variant_plots(review.design, a)
    bode = figs["bode"].caption
    assert "a crossing may lie above it" in bode and "PM not decided by the sweep" in bode
    assert "Ms = not decided by the sweep" in figs["sensitivity"].caption
    assert "No Ms disc" in figs["nyquist"].caption


def test_figures_drawn_in_worker_processes_equal_those_drawn_here(
        monkeypatch: pytest.MonkeyPatch) -> None:
    # The forked drawing is only a speed-up: every figure, in every variant and in page
    # order, must be the same raster and caption as variant_plots draws in this process.
    # spindle_sweep: a measured variant (3 figures) beside a model one (5), 8 in all.
    review = sample_review("spindle_sweep")
    import threading

    monkeypatch.setenv(plots.FIGURE_JOBS_ENV, "2")
    # (a process with other threads is never forked: then both sides are drawn here)
    assert plots._figure_jobs(8) == (2 if threading.active_count() == 1 else 1)
    forked = plots.all_variant_plots(review.design, review.analyses)
    here = [plots.variant_plots(review.design, a) for a in review.analyses]
    assert [list(f) for f in forked] == [list(h) for h in here]
    assert forked == here
    monkeypatch.setenv(plots.FIGURE_JOBS_ENV, "1")
    assert plots._figure_jobs(8) == 1


def test_figures_started_ahead_equal_those_drawn_here(monkeypatch: pytest.MonkeyPatch) -> None:
    # review --out starts the figures in forked workers right after the analysis
    # (report/figure_pool.py); what it hands the PDF must be exactly what variant_plots
    # draws here, variant by variant and in page order.
    from loopwarden.report.figure_pool import FigureJob

    review = sample_review("spindle_sweep")
    monkeypatch.setenv(plots.FIGURE_JOBS_ENV, "2")
    job = FigureJob(review.design, review.analyses)
    ahead = job.result()
    job.close()                                   # nothing left to stop: a no-op
    here = [plots.variant_plots(review.design, a) for a in review.analyses]
    assert [list(f) for f in ahead] == [list(h) for h in here]
    assert ahead == here
    # One process (or too few figures): nothing starts, result() draws them here.
    monkeypatch.setenv(plots.FIGURE_JOBS_ENV, "1")
    assert FigureJob(review.design, review.analyses).result() == here
