"""The loop-response interface: one margins/peaks/bandwidth code over every kind of loop.

References: python-control (``stability_margins``, continuous and dt) and closed forms
[derived] beside each check; a measured sweep of a model is checked against the model.
"""

from __future__ import annotations

import math

import control as ct
import numpy as np
import pytest

from loopwarden.analysis.loop_figures import (
    closed_loop_bandwidth,
    loop_margins,
    loop_peaks,
    loop_sensitivity,
)
from loopwarden.analysis.loop_response import (
    ContinuousResponse,
    LoopResponse,
    MeasuredResponse,
    SampledResponse,
    response_of,
)
from loopwarden.analysis.measured import measured_loop
from loopwarden.analysis.peak_search import refined_peaks
from loopwarden.analysis.sensitivity import PEAK_FUNCTIONS
from loopwarden.design.loader import load_design, parse_design
from loopwarden.lti import Loop, Zpk

ONE = Zpk.constant(1.0)
T = 0.1


def zpk(zeros, poles, gain) -> Zpk:
    return Zpk(np.array(zeros, dtype=complex), np.array(poles, dtype=complex), gain)


def loop(plant: Zpk, delay: float = 0.0) -> Loop:
    return Loop(plant=plant, controller=ONE, sensor=ONE, delay_s=delay)


def sampled_loop(plant: str):
    d = parse_design(f'[design]\nname = "t"\n[sampling]\nperiod = {T}\nmethod = "zoh"\n'
                     f'[plant]\n{plant}\n[[controller]]\ntype = "gain"\nk = 1.0\n', "t.toml")
    return d.sampled_loop(d.variants[0])


def measured_response(folder, plant: Zpk, k: float, w) -> MeasuredResponse:
    """A noise-free sweep of ``plant`` at ``w`` (rad/s, dB, deg) under the gain ``k``."""
    p = plant.freqresp(w)
    (folder / "s.csv").write_text("frequency,magnitude,phase\n" + "\n".join(
        f"{float(a)!r},{float(20 * np.log10(abs(b)))!r},{float(np.degrees(np.angle(b)))!r}"
        for a, b in zip(w, p, strict=True)) + "\n")
    (folder / "d.toml").write_text(
        '[design]\nname = "m"\n[plant]\nfrd = { file = "s.csv", frequency_unit = "rad/s", '
        'magnitude_unit = "db", phase_unit = "deg" }\n'
        f'[[controller]]\ntype = "gain"\nk = {k!r}\n')
    d = load_design(folder / "d.toml")
    return response_of(measured_loop(d, d.variants[0]))


def test_every_kind_of_loop_is_a_loop_response(tmp_path):
    cont = response_of(loop(zpk([], [0.0, -1.0], 1.0)))
    samp = response_of(sampled_loop("zpk = { poles = [0.0], gain = 4.0 }"))
    meas = measured_response(tmp_path, zpk([], [-1.0, -5.0], 10.0), 1.0,
                             np.logspace(-1, 2, 50))
    assert isinstance(cont, ContinuousResponse) and isinstance(samp, SampledResponse)
    assert isinstance(meas, MeasuredResponse)
    for r in (cont, samp, meas):
        assert isinstance(r, LoopResponse)
    assert (cont.domain, samp.domain, meas.domain) == ("s", "z", "s")
    assert samp.nyquist_rad_s == pytest.approx(math.pi / T) and cont.nyquist_rad_s is None
    assert meas.rational is None and "model" not in meas.capabilities
    assert {"model", "roots", "time_response"} <= samp.capabilities
    assert "continuous" in cont.capabilities and "continuous" not in samp.capabilities


def test_continuous_margins_against_python_control():
    lp = loop(zpk([-3.0], [0.0, -1.0, -5.0, -8.0], 60.0))
    m = loop_margins(ContinuousResponse(lp))
    gm, pm, _, wpc, wgc, _ = ct.stability_margins(ct.zpk([-3.0], [0, -1, -5, -8], 60.0))
    assert m.gain_margin_db == pytest.approx(20 * math.log10(gm), rel=1e-8)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-8)
    assert m.gain_crossover_rad_s == pytest.approx(wgc, rel=1e-8)
    assert m.phase_crossover_rad_s == pytest.approx(wpc, rel=1e-8)


def test_sampled_margins_against_python_control():
    samp = SampledResponse(sampled_loop("zpk = { poles = [0.0, -2.0], gain = 6.0 }"))
    rat = samp.rational
    m = loop_margins(samp)
    gm, pm, _, wpc, wgc, _ = ct.stability_margins(ct.zpk(rat.zeros, rat.poles, rat.gain, T))
    assert m.gain_margin_db == pytest.approx(20 * math.log10(gm), rel=1e-7)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-7)
    assert m.gain_crossover_rad_s == pytest.approx(wgc, rel=1e-7)
    assert m.phase_crossover_rad_s == pytest.approx(wpc, rel=1e-7)
    assert m.delay_margin_samples == pytest.approx(m.delay_margin_s / T, rel=1e-14)


def test_held_integrator_ends_are_exact():
    # [derived] L = kT/(z − 1): L(−1) = −kT/2, so the phase crossing and |S| peak lie
    # exactly at the Nyquist frequency: GM = 2/(kT), Ms = 2/(2 − kT); |T(1)| = 1.
    k = 4.0
    samp = SampledResponse(sampled_loop(f"zpk = {{ poles = [0.0], gain = {k} }}"))
    kt = k * T
    m = loop_margins(samp)
    assert m.phase_crossover_rad_s == pytest.approx(math.pi / T, rel=1e-14)
    assert m.gain_margin_db == pytest.approx(20 * math.log10(2 / kt), rel=1e-12)
    (ms, w_ms), (mt, w_mt), _ = loop_peaks(samp)
    assert ms == pytest.approx(2 / (2 - kt), rel=1e-12) and w_ms == pytest.approx(math.pi / T)
    assert mt == pytest.approx(1.0, rel=1e-12) and w_mt == 0.0


def test_bandwidth_of_an_integrator_loop_is_its_crossover():
    # [derived] L = ωc/s: T = ωc/(s + ωc), |T| = 1/√2 at ω = ωc.
    for wc in (0.3, 2.0, 50.0):
        bw = closed_loop_bandwidth(ContinuousResponse(loop(zpk([], [0.0], wc))))
        assert bw == pytest.approx(wc, rel=1e-12)


def test_measured_response_of_a_model_sweep_matches_the_model(tmp_path):
    # A dense noise-free sweep of P = 10/((s + 1)(s + 5)) under k = 2 against the model's
    # margins and Ms from python-control / the continuous adapter.
    meas = measured_response(tmp_path, zpk([], [-1.0, -5.0], 10.0), 2.0,
                             np.logspace(-2, 3, 600))
    m = loop_margins(meas)
    _, pm, _, _, wgc, _ = ct.stability_margins(ct.zpk([], [-1, -5], 20.0))
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-4)
    assert m.gain_crossover_rad_s == pytest.approx(wgc, rel=1e-4)
    model = loop_sensitivity(ContinuousResponse(loop(zpk([], [-1.0, -5.0], 20.0))))
    assert loop_sensitivity(meas).peak_sensitivity == pytest.approx(model.peak_sensitivity,
                                                                    rel=1e-4)


def test_both_scalar_maximisers_reach_the_same_peaks():
    # |S|, |T|, |S − 1/2| of a lightly damped loop: golden section and scipy's bounded Brent
    # give the same peak values to rounding, and neither is below a dense evaluation.
    lp = loop(zpk([], [0.0, -0.2 + 3j, -0.2 - 3j], 4.0))
    resp = ContinuousResponse(lp)
    w = resp.grid()
    ends = [(), (), ()]
    golden = refined_peaks(PEAK_FUNCTIONS, w, resp.value, ends, method="golden")
    brent = refined_peaks(PEAK_FUNCTIONS, w, resp.value, ends, method="brent")
    dense = np.logspace(-2, 2, 400_001)
    lv = resp.value(dense)
    for (g, wg), (b, wb), fn in zip(golden, brent, PEAK_FUNCTIONS, strict=True):
        assert g == pytest.approx(b, rel=1e-12)
        assert wg == pytest.approx(wb, rel=1e-6)
        assert g >= float(np.max(fn(lv))) * (1 - 1e-12)


def test_not_applicable_follows_from_the_table_of_parts():
    # What a loop cannot run follows from what each part needs: a measured plant (no model)
    # loses every model-based check with the reason the part states; a sampled loop (model,
    # roots, simulation, but not continuous time) and a continuous loop lose none.
    from loopwarden.analysis.loop_response import ContinuousResponse as C
    from loopwarden.analysis.loop_response import MeasuredResponse as M
    from loopwarden.analysis.loop_response import SampledResponse as S
    from loopwarden.analysis.pipeline import PARTS, applies, not_applicable

    measured = not_applicable(M.capabilities, "measured plant")
    assert list(measured) == ["internal_stability", "system_type", "error_constant",
                              "step_overshoot", "step_settling", "step_rise",
                              "slow_pair_tail", "boost_band", "lag_phase_budget",
                              "integral_alternative"]
    assert measured["step_rise"] == "measured plant: the step response needs a model"
    assert not_applicable(S.capabilities, "sampled loop") == {}
    assert not_applicable(C.capabilities, "") == {}
    for part in PARTS:
        assert applies(part.name, C.capabilities)
        assert applies(part.name, M.capabilities) == (not part.needs)


def test_closed_loop_roots_against_the_characteristic_polynomial():
    # [derived] 1 + k/(s(s + 1)(s + 2)) = 0 ⇔ s³ + 3s² + 2s + k = 0; in z, 1 + L(z) = 0 ⇔
    # den + num = 0 for L = num/den.  A delay loop has infinitely many: None.
    k = 3.0
    cont = ContinuousResponse(loop(zpk([], [0.0, -1.0, -2.0], k)))
    assert np.allclose(np.sort_complex(cont.closed_loop_roots()),
                       np.sort_complex(np.roots([1.0, 3.0, 2.0, k])), rtol=1e-10)
    assert ContinuousResponse(loop(zpk([], [0.0], 1.0), delay=0.1)).closed_loop_roots() is None
    samp = SampledResponse(sampled_loop("zpk = { poles = [0.0, -2.0], gain = 6.0 }"))
    rat = samp.rational
    char = np.polyadd(np.real(np.poly(rat.poles)), rat.gain * np.real(np.poly(rat.zeros)))
    assert np.allclose(np.sort_complex(samp.closed_loop_roots()),
                       np.sort_complex(np.roots(char)), rtol=1e-9, atol=1e-12)
