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
    z = plots.closed_loop_zeros(sample_review("hoist_lag_tail").design, "nominal")
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
