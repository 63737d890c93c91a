"""The integral-action alternative against REFERENCE_VALUES.md, python-control margins and
the design loader (the snippet must paste into a design and give the same loop)."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy import optimize

from helpers import FPE_TOML, NEW_LAG_DESIGNS, OGATA_TOML
from loopwarden.analysis.boost_band import find_boosts
from loopwarden.analysis.integral_alternative import (
    integral_alternatives,
    integral_loop,
    integral_stage,
)
from loopwarden.analysis.margins import compute_margins
from loopwarden.analysis.slow_pairs import slow_tail
from loopwarden.analysis.time_response import step_response
from loopwarden.analysis.tracking import compute_tracking
from loopwarden.design.loader import parse_design
from loopwarden.lti import Loop, Zpk

BAND = 0.02


def setup(text: str):
    d = parse_design(text, "test.toml")
    loop = d.loop(d.variants[0])
    margins = compute_margins(loop)
    boosts = find_boosts(loop, d.controller, margins, None)
    return d, loop, margins, boosts


def pc_margins(loop: Loop) -> tuple[float, float]:
    """python-control reference: (PM deg, GM dB) of a rational loop."""
    lo = loop.rational
    gm, pm, _, _ = control.margin(control.zpk(lo.zeros, lo.poles, lo.gain))
    return float(pm), 20 * math.log10(gm) if np.isfinite(gm) else math.inf


def test_ogata_integral_alternative_unretuned():
    # REFERENCE_VALUES.md integral alternative [derived]: 0.5(s+0.1)/s on 1/(s(s+1)(0.5s+1))
    # gives PM 40.35°, GM 5.10 (14.15 dB), type 2, zero ramp error; the slow pole near the
    # zero (−0.126) remains.
    d, loop, _, _ = setup(OGATA_TOML)
    alt = integral_loop(loop, d.controller, 2)
    m = compute_margins(alt)
    assert m.phase_margin_deg == pytest.approx(40.35, abs=0.005)
    assert m.gain_margin_db == pytest.approx(14.15, abs=0.005)
    pm, gm = pc_margins(alt)                      # python-control, same loop
    assert m.phase_margin_deg == pytest.approx(pm, abs=1e-4)
    assert m.gain_margin_db == pytest.approx(gm, abs=1e-4)
    tr = compute_tracking(alt)
    assert tr.system_type == 2 and tr.ramp_error == 0.0
    (pair,) = slow_tail(alt, step_response(alt, BAND), BAND).pairs
    assert pair.pole.real == pytest.approx(-0.126, abs=5e-4)
    assert pair.zero == pytest.approx(-0.1)


def test_pi_limit_phase_at_ten_times_zero():
    # REFERENCE_VALUES.md lag network, β = 10: −5.71° at 10z in the integral limit [derived]
    pi = integral_stage(Zpk([-1.0], [-0.1], 1.0))
    assert math.degrees(pi.phase_rad(np.array([10.0]))[0]) == pytest.approx(-5.71, abs=0.005)
    assert list(pi.poles) == [0.0] and list(pi.zeros) == [-1.0] and pi.gain == 1.0


def test_ogata_retuned_keeps_phase_margin_with_highest_gain():
    d, loop, margins, boosts = setup(OGATA_TOML)
    (alt,) = integral_alternatives(loop, d.controller, boosts, margins,
                                   min_phase_margin_deg=None, settling_band=BAND)
    target = margins.phase_margin_deg                     # 41.61° (no rule-set minimum)
    assert alt.target_phase_margin_deg == pytest.approx(41.61, abs=0.005)
    assert alt.meets_target is True
    assert alt.closed_loop_stable
    assert 0 < alt.gain_factor < 1
    tuned = integral_loop(loop, d.controller, 2).scaled(alt.gain_factor)
    pm, gm = pc_margins(tuned)                            # python-control, same loop
    assert alt.margins.phase_margin_deg == pytest.approx(pm, abs=1e-4)
    assert alt.margins.gain_margin_db == pytest.approx(gm, abs=1e-4)
    assert pm >= target - 1e-6
    # the highest such gain: slightly more gain misses the target (python-control)
    pm_up, _ = pc_margins(integral_loop(loop, d.controller, 2).scaled(alt.gain_factor * 1.001))
    assert pm_up < target
    assert alt.tracking.system_type == 2
    assert alt.tracking.kv == math.inf and alt.tracking.ramp_error == 0.0
    assert alt.step.settling_time_s == pytest.approx(step_response(tuned, BAND)
                                                     .metrics.settling_time_s, rel=1e-12)
    assert len(alt.slow_pairs) == 1 and alt.slow_pairs[0].zero == pytest.approx(-0.1)
    assert alt.stage == 2


def test_rule_set_minimum_raises_the_target():
    d, loop, margins, boosts = setup(OGATA_TOML)
    (alt,) = integral_alternatives(loop, d.controller, boosts, margins,
                                   min_phase_margin_deg=45.0, settling_band=BAND)
    assert alt.target_phase_margin_deg == 45.0 and alt.meets_target
    tuned = integral_loop(loop, d.controller, 2).scaled(alt.gain_factor)
    pm, _ = pc_margins(tuned)
    assert pm == pytest.approx(45.0, abs=1e-3)            # on the boundary: highest gain
    assert pm >= 45.0 - 1e-6


def test_unreachable_target_reports_best_reachable():
    # 89° is out of reach for (s+0.1)/s on this plant: its phase margin is at most
    # max over ω of atan(10ω) − atan(ω) − atan(ω/2) = 47.05° [derived]; the best stable
    # gain of the search grid is reported.
    d, loop, margins, boosts = setup(OGATA_TOML)
    (alt,) = integral_alternatives(loop, d.controller, boosts, margins,
                                   min_phase_margin_deg=89.0, settling_band=BAND)
    assert alt.meets_target is False
    assert alt.closed_loop_stable
    assert alt.margins.phase_margin_deg <= 47.05
    # no gain on a fine independent scan does much better (python-control margins)
    base = integral_loop(loop, d.controller, 2)
    best = max(pc_margins(base.scaled(k))[0] for k in np.logspace(-3, 0, 301))
    assert alt.margins.phase_margin_deg >= best - 1.0


@pytest.mark.parametrize("text", [OGATA_TOML, FPE_TOML], ids=["ogata", "fpe"])
def test_snippet_pastes_into_the_design(text):
    d, loop, margins, boosts = setup(text)
    (alt,) = integral_alternatives(loop, d.controller, boosts, margins,
                                   min_phase_margin_deg=None, settling_band=BAND)
    assert 'type = "pi"' in alt.snippet_toml
    head, _, _ = text.partition("[[controller]]\ntype = \"lag\"")
    new = parse_design(head + alt.snippet_toml, "alt.toml")
    new_loop = new.loop(new.variants[0])
    m = compute_margins(new_loop)
    assert m.phase_margin_deg == pytest.approx(alt.margins.phase_margin_deg, abs=1e-6)
    assert m.gain_margin_db == pytest.approx(alt.margins.gain_margin_db, abs=1e-6)
    pi = new.controller[-1]
    assert pi.params["ti"] == pytest.approx(10.0)         # 1/zero of the lag


def test_tf_boost_stage_gives_tf_snippet():
    text = """
[design]
name = "spindle speed"
[plant]
zpk = { poles = [-2.0, -8.0], gain = 64.0 }
[[controller]]
type = "tf"
num = [1.0, 0.4]
den = [1.0, 0.08]
"""
    d, loop, margins, boosts = setup(text)
    (alt,) = integral_alternatives(loop, d.controller, boosts, margins,
                                   min_phase_margin_deg=45.0, settling_band=BAND)
    assert 'type = "tf"' in alt.snippet_toml
    assert compute_tracking(loop).system_type == 0 and alt.tracking.system_type == 1
    head = text[:text.index("[[controller]]")]
    new = parse_design(head + alt.snippet_toml, "alt.toml")
    m = compute_margins(new.loop(new.variants[0]))
    assert m.phase_margin_deg == pytest.approx(alt.margins.phase_margin_deg, abs=1e-6)
    assert alt.margins.phase_margin_deg >= max(margins.phase_margin_deg, 45.0) - 1e-6


def test_delay_loop_alternative():
    # tank level: 0.5/(s(4s+1)) with a 0.3 s transport delay under a lag
    text = """
[design]
name = "tank level"
[plant]
zpk = { poles = [0.0, -0.25], gain = 0.125 }
delay = 0.3
[[controller]]
type = "gain"
k = 1.2
[[controller]]
type = "lag"
zero = 0.05
pole = 0.01
"""
    d, loop, margins, boosts = setup(text)
    (alt,) = integral_alternatives(loop, d.controller, boosts, margins,
                                   min_phase_margin_deg=None, settling_band=BAND)
    assert alt.meets_target and alt.closed_loop_stable
    # The integral stage k(s + 0.05)/s leaves a slow root near its zero; it solves
    # 1 + L = 0 with L = k·1.2·(s + 0.05)/s · 0.125/(s(s + 0.25))·e^{−0.3 s} [derived],
    # and its residue equals L/(s·L') with L' by mpmath's numerical derivative.
    import mpmath as mp

    (pair,) = alt.slow_pairs
    assert pair.zero == -0.05
    k = alt.gain_factor

    def lf(s):
        return k * 1.2 * (s + 0.05) / s * 0.125 / (s * (s + 0.25)) * mp.exp(-0.3 * s)

    p_ref = mp.findroot(lambda s: 1 + lf(s), pair.pole.real)
    assert pair.pole.real == pytest.approx(float(p_ref), rel=1e-10)
    r_ref = lf(p_ref) / (p_ref * mp.diff(lf, p_ref))
    assert pair.residue == pytest.approx(float(r_ref), rel=1e-8)
    assert alt.step.exact_delay is True
    assert alt.tracking.system_type == 2
    # independent check of the phase margin with the exact delay (brentq on |L| = 1)
    tuned = integral_loop(loop, d.controller, 2).scaled(alt.gain_factor)
    lo = tuned.rational
    sys = control.zpk(lo.zeros, lo.poles, lo.gain)
    wc = optimize.brentq(lambda w: abs(sys(1j * w)) - 1.0, 1e-3, 10.0)
    pm = 180.0 + math.degrees(np.angle(sys(1j * wc)) - wc * 0.3)
    assert alt.margins.phase_margin_deg == pytest.approx(pm, abs=1e-4)
    assert pm >= margins.phase_margin_deg - 1e-6


# The lag loops that are not in the repository (our own scenarios), those without delay.
@pytest.mark.parametrize("text", [p for p in NEW_LAG_DESIGNS if p.id != "pump-with-delay"])
def test_new_lag_loops_alternative(text):
    # issue: an integral alternative one system type higher, with its phase margin.
    # Independent: python-control margins of the same loop, and a python-control scan of
    # the phase margin over gain factors 1e-3…1 to know whether the target is reachable.
    d, loop, margins, boosts = setup(text)
    (alt,) = integral_alternatives(loop, d.controller, boosts, margins,
                                   min_phase_margin_deg=30.0, settling_band=BAND)
    assert alt.tracking.system_type == compute_tracking(loop).system_type + 1
    base = integral_loop(loop, d.controller, 2)
    tuned = base.scaled(alt.gain_factor)
    pm, gm = pc_margins(tuned)
    assert alt.margins.phase_margin_deg == pytest.approx(pm, abs=1e-4)
    assert alt.margins.gain_margin_db == pytest.approx(gm, abs=1e-4)
    target = max(margins.phase_margin_deg, 30.0)
    scan = []
    for k in np.logspace(-3, 0, 601):
        lo = base.scaled(k).rational
        cl = control.feedback(control.zpk(lo.zeros, lo.poles, lo.gain), 1)
        if np.max(np.real(control.poles(cl))) < 0:
            scan.append(pc_margins(base.scaled(k))[0])
    best = max(scan)
    if best >= target:
        assert alt.meets_target and pm >= target - 1e-6
        if alt.gain_factor < 1:
            assert pc_margins(base.scaled(alt.gain_factor * 1.001))[0] < target
    else:
        # e.g. the resonant gimbal: 78.29° now, at most ≈ 77.8° with integral action
        assert not alt.meets_target
        assert pm >= best - 1e-3
    lo = tuned.rational
    cl = control.feedback(control.zpk(lo.zeros, lo.poles, lo.gain), 1)
    assert np.max(np.real(control.poles(cl))) < 0
    assert alt.closed_loop_stable
