"""Margins, sensitivity peaks and closed-loop poles against python-control.

python-control (``stability_margins(sys, returnall=True)``, ``feedback(...).poles()``) is a
reference library, not an oracle.  Known gaps, each tested against the formula instead:
it never checks closed-loop stability (it returns margins for an unstable loop as if they
meant something); it has no transport delay; its stability margin (min |1 + L|) misses a
minimum at ω = 0 or ω = ∞; it reports phase margins in [−180°, 180°) where we use
(−180°, 180°].
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from loopwarden.analysis.margins import compute_margins
from loopwarden.analysis.sensitivity import compute_sensitivity
from loopwarden.analysis.stability import closed_loop_stability
from loopwarden.lti import Loop, Zpk

control = pytest.importorskip("control")

RTOL = 1e-6
ONE = Zpk.constant(1.0)


def random_loop(rng: np.random.Generator) -> Loop:
    """A random rational loop of order 1–6: real and complex poles (some lightly damped),
    an integrator now and then, minimum- and non-minimum-phase zeros."""
    poles: list[complex] = []
    for _ in range(int(rng.integers(1, 4))):
        w = 10 ** rng.uniform(-1, 1)
        if rng.random() < 0.5:
            poles.append(-w)
        else:
            z = rng.choice([rng.uniform(0.02, 0.1), rng.uniform(0.1, 0.9)])
            r = complex(-z * w, w * math.sqrt(1 - z * z))
            poles += [r, r.conjugate()]
    if rng.random() < 0.4:
        poles.append(0.0)
    zeros = [(-1 if rng.random() < 0.85 else 1) * 10 ** rng.uniform(-1, 1)
             for _ in range(int(rng.integers(0, len(poles))))]
    # Scale so that |L| = g at a random frequency in the band of the roots: the crossover
    # and the sensitivity peak then fall inside the band more often than not.
    shape = Zpk(zeros, poles, 1.0)
    w_c = 10 ** rng.uniform(-1, 1)
    gain = 10 ** rng.uniform(-0.5, 0.5) / abs(complex(shape.freqresp(np.array([w_c]))[0]))
    return Loop(plant=shape.scaled(gain), controller=ONE, sensor=ONE)


def to_control(lp: Loop):
    r = lp.rational
    return control.zpk(r.zeros, r.poles, r.gain)


def stable_random_loops(n: int, seed: int) -> list[Loop]:
    """Seeded loops whose closed loop is stable by python-control's own poles."""
    rng = np.random.default_rng(seed)
    out: list[Loop] = []
    while len(out) < n:
        lp = random_loop(rng)
        cl = control.feedback(control.tf(to_control(lp)), 1)
        if np.all(np.real(cl.poles()) < -1e-6):
            out.append(lp)
    return out


def hard_loops() -> list[Loop]:
    """Stable loops with several crossings: a conditionally stable loop (two phase
    crossings) and an integrator with an anti-resonance/resonance pair (three gain
    crossings)."""
    zeta = 0.02

    def pair(wn):
        r = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
        return [r, r.conjugate()]

    return [Loop(plant=Zpk([-1, -1], [0, 0, 0, -10, -10], 500.0), controller=ONE, sensor=ONE),
            Loop(plant=Zpk(pair(8.0), [0.0, *pair(10.0)], 100.0 / 64.0), controller=ONE,
                 sensor=ONE)]


LOOPS = stable_random_loops(24, seed=3) + hard_loops()


@pytest.mark.parametrize("index", range(len(LOOPS)), ids=lambda i: f"loop{i}")
def test_every_crossing_matches_python_control(index):
    """All gain crossings (with their phase margins) and all phase crossings (with their
    gain margins) agree with stability_margins(returnall=True) to 1e-6."""
    lp = LOOPS[index]
    gm, pm, _sm, wpc, wgc, _wms = control.stability_margins(to_control(lp), returnall=True)
    ours = compute_margins(lp)

    order = np.argsort(wgc)
    assert [c.frequency_rad_s for c in ours.gain_crossings] == pytest.approx(
        list(np.asarray(wgc)[order]), rel=RTOL)
    ref_pm = np.asarray(pm)[order]
    ref_pm = np.where(ref_pm == -180.0, 180.0, ref_pm)      # their [−180, 180) convention
    assert [c.phase_margin_deg for c in ours.gain_crossings] == pytest.approx(
        list(ref_pm), rel=RTOL, abs=1e-9)

    # python-control lists ω = 0 when L(0) < 0, as we do; it drops nothing else.
    keep = np.isfinite(np.asarray(gm))
    order = np.argsort(np.asarray(wpc)[keep])
    ref_w = np.asarray(wpc)[keep][order]
    ref_gm = np.asarray(gm)[keep][order]
    finite = [c for c in ours.phase_crossings if math.isfinite(c.frequency_rad_s)]
    assert [c.frequency_rad_s for c in finite] == pytest.approx(list(ref_w), rel=RTOL,
                                                                abs=1e-12)
    assert [10 ** (c.gain_margin_db / 20) for c in finite] == pytest.approx(list(ref_gm),
                                                                          rel=RTOL)
    if ours.gain_crossings:
        smallest = min(ours.gain_crossings, key=lambda c: abs(c.phase_margin_deg))
        assert ours.phase_margin_deg == smallest.phase_margin_deg
        assert ours.delay_margin_s == pytest.approx(
            min(c.delay_margin_s for c in ours.gain_crossings))


@pytest.mark.parametrize("index", range(len(LOOPS)), ids=lambda i: f"loop{i}")
def test_closed_loop_poles_match_python_control(index):
    """Eigenvalues of the interconnection = poles of control.feedback(L, 1)."""
    lp = LOOPS[index]
    ref = np.asarray(control.feedback(control.tf(to_control(lp)), 1).poles(), dtype=complex)
    st = closed_loop_stability(lp)
    assert st.closed_loop_stable
    got = np.asarray(st.closed_loop_poles)
    assert got.size == ref.size
    # Match each reference pole to its nearest (poles may be computed in another order).
    for p in ref:
        assert np.min(np.abs(got - p)) <= 1e-6 * max(1.0, abs(p))


@pytest.mark.parametrize("index", range(len(LOOPS)), ids=lambda i: f"loop{i}")
def test_peak_sensitivity_matches_stability_margin(index):
    """Ms = 1/min|1 + L| where python-control's stability margin finds an interior
    minimum; when our peak is at ω = 0 or ∞ python-control has no value to compare."""
    lp = LOOPS[index]
    _gm, _pm, sm, _wpc, _wgc, wms = control.stability_margins(to_control(lp), returnall=True)
    s = compute_sensitivity(lp)
    sys_ = to_control(lp)
    interior = [1.0 / float(m) for m in np.atleast_1d(sm) if m > 0]
    if not (0 < s.peak_sensitivity_rad_s < math.inf):
        # Peak at an end of the axis: python-control gives no Ms there, so compare with
        # |S| at that end from python-control's own evaluation of L [python-control], and
        # check that no interior minimum of |1 + L| it finds beats ours.
        end = (complex(sys_(0j)) if s.peak_sensitivity_rad_s == 0
               else complex(sys_(1j * 1e12)))
        assert s.peak_sensitivity == pytest.approx(1.0 / abs(1.0 + end), rel=1e-6)
        assert all(m <= s.peak_sensitivity * (1 + 1e-9) for m in interior)
        return
    assert s.peak_sensitivity == pytest.approx(1.0 / float(np.min(sm)), rel=1e-5)
    assert s.peak_sensitivity_rad_s == pytest.approx(float(np.asarray(wms)[np.argmin(sm)]),
                                                     rel=1e-4)


def test_python_control_margins_ignore_instability():
    """10/(s(s+1)(s+2)): python-control reports GM 0.6 and PM −13° without a word on
    stability; ours agree on the numbers and the stability check says unstable
    (two right-half-plane poles, Routh [derived])."""
    lp = Loop(plant=Zpk([], [0, -1, -2], 10.0), controller=ONE, sensor=ONE)
    gm, pm, *_ = control.stability_margins(to_control(lp))
    ours = compute_margins(lp)
    assert 10 ** (ours.gain_margin_lower_db / 20) == pytest.approx(gm, rel=RTOL)
    assert ours.phase_margin_deg == pytest.approx(pm, rel=RTOL)
    assert not closed_loop_stability(lp).closed_loop_stable


def test_python_control_misses_peak_at_zero_frequency():
    """L = −0.5/(s+1): min|1 + L| = 0.5 at ω = 0 [derived]; stability_margins returns no
    stability margin at all, ours gives Ms = 2 at ω = 0."""
    lp = Loop(plant=Zpk([], [-1], -0.5), controller=ONE, sensor=ONE)
    _gm, _pm, sm, *_ = control.stability_margins(to_control(lp), returnall=True)
    assert np.size(sm) == 0
    s = compute_sensitivity(lp)
    assert (s.peak_sensitivity, s.peak_sensitivity_rad_s) == (2.0, 0.0)


def test_lightly_damped_loops_are_among_the_references():
    """The seeded set exercises several crossings and lightly damped modes."""
    margins = [compute_margins(lp) for lp in LOOPS]
    assert sum(len(m.gain_crossings) > 1 for m in margins) >= 5
    assert sum(len(m.phase_crossings) > 1 for m in margins) >= 2
    light = sum(any(abs(p.real) < 0.1 * abs(p) for p in lp.rational.poles if p.imag)
                for lp in LOOPS)
    assert light >= 5
    interior = sum(0 < compute_sensitivity(lp).peak_sensitivity_rad_s < math.inf
                   for lp in LOOPS)
    assert interior >= 12
