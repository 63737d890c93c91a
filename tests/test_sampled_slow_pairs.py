"""Slow pole-zero pairs of sampled lag loops (issue 10): poles in z, residues of the
sampled step response and tail lengths in samples.

Loops: plant 1/((2s + 1)(0.5s + 1)) behind a zero-order hold, period 0.1 s, gain 6 and a
lag either written in z (zero e^{−0.02T}, pole e^{−0.002T}) or written in s
((s + 0.02)/(s + 0.002)) and discretised by the design's ZOH method with one sample of
compute delay.

References, independent of loopwarden:

* the ZOH plant exactly from its partial fractions, P_d(z) = P(0) + Σ Res[P, p_i]/p_i ·
  (z − 1)/(z − e^{p_i T}), in mpmath at 50 digits and checked against
  scipy.signal.cont2discrete; closed-loop roots of the z polynomial by polyroots and
  companion eigenvalues; residues r = Res[T(z)/(z − 1), p] by formula and by contour
  integral (``tests/data/make_reference_roots.py``) [derived];
* in the tests: scipy.signal.cont2discrete + numpy polynomial algebra for T(z), and a
  scipy.signal.dlsim step response whose tail y[k] − y∞ must equal r·p^k once the faster
  terms have died out [derived: y[k] = y∞ + Σ r_i p_i^k].
"""

from __future__ import annotations

import math
from functools import cache

import numpy as np
import pytest
from scipy import signal

import loopwarden
import reference_loops as rl

KEYS = list(rl.SAMPLED_DESIGNS)
T = rl.SAMPLED_PERIOD


@cache
def sampled_analysis(key: str):
    return loopwarden.analyze(rl.design(rl.SAMPLED_DESIGNS[key](), f"{key}.toml"))[0]


def scipy_loop(key: str) -> tuple[np.ndarray, np.ndarray]:
    """T(z) = num/den from scipy's ZOH of the plant and the controller in z (numpy)."""
    b, a, _ = signal.cont2discrete((list(rl.SAMPLED_NUM), list(rl.SAMPLED_DEN)), T,
                                   method="zoh")
    bp, ap = np.trim_zeros(np.ravel(b), "f"), np.ravel(a)
    if key == "sampled_z_lag":
        zq, pq = rl.SAMPLED_Z_LAG
        bc, ac = rl.SAMPLED_Z_GAIN * np.array([1.0, -zq]), np.array([1.0, -pq])
    else:
        z, p = rl.SAMPLED_S_LAG
        bl, al, _ = signal.cont2discrete(([1.0, z], [1.0, p]), T, method="zoh")
        bc = rl.SAMPLED_S_GAIN * np.ravel(bl)
        ac = np.polymul(np.ravel(al), [1.0, 0.0])           # one sample of compute delay
    num = np.polymul(bc, bp)
    den = np.polyadd(np.polymul(ac, ap), num)
    return num, den


def dc_loop_gain(key: str) -> float:
    """L(z = 1) = C(1)·P(0) [derived]: the ZOH plant keeps the DC gain P(0) = 1."""
    plant_dc = rl.SAMPLED_NUM[-1] / rl.SAMPLED_DEN[-1]
    if key == "sampled_z_lag":
        zq, pq = rl.SAMPLED_Z_LAG
        return rl.SAMPLED_Z_GAIN * (1 - zq) / (1 - pq) * plant_dc
    z, p = rl.SAMPLED_S_LAG
    return rl.SAMPLED_S_GAIN * z / p * plant_dc


@pytest.mark.parametrize("key", KEYS)
def test_reference_matches_scipy_discretisation(key):
    # Two discretisations (exact partial fractions in mpmath vs scipy's matrix exponential)
    # give the same closed loop.
    ref = rl.reference_data()[key]
    num, den = scipy_loop(key)
    scale = den[0] / ref["char_poly"][0]
    assert np.allclose(den / scale, ref["char_poly"], rtol=1e-10, atol=1e-13)
    assert np.allclose(np.trim_zeros(num / scale, "f"), np.trim_zeros(np.array(ref["num"]), "f"),
                       rtol=1e-10, atol=1e-13)
    roots = np.roots(den)
    for item in ref["roots"]:
        r = complex(*item["root"])
        assert np.min(np.abs(roots - r)) <= 1e-9
    # Residues of T(z)/(z − 1) by scipy.signal.residue (partial fractions in z); scipy's
    # are good to ~1e-8 here (cancellation in the lag coefficients), hence 1e-6.
    res, poles, _ = signal.residue(num, np.polymul(den, [1.0, -1.0]))
    for item in ref["roots"]:
        r = complex(*item["root"])
        i = int(np.argmin(np.abs(poles - r)))
        assert res[i] == pytest.approx(complex(*item["residue"]), rel=1e-6)


@pytest.mark.parametrize("key", KEYS)
def test_reference_tail_matches_dlsim(key):
    # [derived] y[k] − y∞ = Σ r_i p_i^k: at k = 3000 the fast terms are below 1e-90, so the
    # simulated y[k] − y∞ is the slow term r·p^k alone (about −6e-4).
    ref = rl.reference_data()[key]
    num, den = scipy_loop(key)
    k = 3000
    _, y = signal.dlsim((num, den, T), np.ones(k + 1))
    y = np.ravel(y)
    yinf = np.polyval(num, 1.0) / np.polyval(den, 1.0)
    # [derived] a ZOH keeps DC gains: y∞ = L(1)/(1 + L(1)) with L(1) = C(1)·P(0).  scipy's
    # coefficients lose ~4 digits to 1 − e^{−pT} ≈ 2e-4 in the lag, hence 1e-9 there; the
    # mpmath reference holds the exact value to 1e-15.
    loop_dc = dc_loop_gain(key)
    assert ref["y_inf"] == pytest.approx(loop_dc / (1 + loop_dc), rel=1e-15)
    assert yinf == pytest.approx(loop_dc / (1 + loop_dc), rel=1e-9)
    slow = ref["slow"][0]
    p, r = complex(*slow["pole"]), slow["residue"]
    others = [complex(*x["root"]) for x in ref["roots"] if complex(*x["root"]) != p]
    assert max(abs(q) for q in others) ** k < 1e-90
    assert y[k] - yinf == pytest.approx(r * p.real ** k, rel=1e-6)


@pytest.mark.parametrize("key", KEYS)
def test_sampled_closed_loop_roots(key):
    ref = rl.reference_data()[key]
    st = sampled_analysis(key).stability
    assert st.domain == "z"
    assert st.closed_loop_stable is True
    assert st.rhp_closed_loop_poles == 0
    listed = np.asarray(st.closed_loop_poles, dtype=complex)
    want = np.array([complex(*x["root"]) for x in ref["roots"]])
    assert listed.size == want.size
    for r in want:
        assert np.min(np.abs(listed - r)) <= 1e-9 * max(abs(r), 1e-3)


@pytest.mark.parametrize("key", KEYS)
def test_sampled_slow_pair(key):
    # Reference (mpmath, 50 digits) [derived]:
    #   lag in z: pole z = 0.99824903374 (s = −0.017525 rad/s), zero 0.99800200, residue
    #     r = −0.1223873, tail 1043.08 samples = 104.308 s;
    #   lag in s (ZOH, compute delay 1): pole 0.99824709733, zero 0.99800020, residue
    #     −0.1222403, tail 1041.24 samples = 104.124 s.
    want = rl.reference_data()[key]["slow"][0]
    tail = sampled_analysis(key).slow_tail
    assert tail is not None
    assert len(tail.pairs) == 1
    pair = tail.pairs[0]
    pole = complex(*want["pole"])
    assert abs(pair.pole - pole) <= 1e-9
    assert abs(pair.zero - complex(*want["zero"])) <= 1e-9
    assert pair.residue == pytest.approx(want["residue"], rel=1e-6)
    assert pair.tail_samples == pytest.approx(want["tail_samples"], rel=1e-6)
    assert pair.tail_time_s == pytest.approx(want["tail_time_s"], rel=1e-6)
    assert pair.tail_time_s == pytest.approx(pair.tail_samples * T, rel=1e-12)


@pytest.mark.parametrize("key", KEYS)
def test_sampled_slow_pair_term_matches_simulation(key):
    # The reported term r·p^k is the simulated tail (scipy.signal.dlsim) at k = 3000.
    tail = sampled_analysis(key).slow_tail
    assert tail is not None and len(tail.pairs) == 1
    pair = tail.pairs[0]
    num, den = scipy_loop(key)
    k = 3000
    _, y = signal.dlsim((num, den, T), np.ones(k + 1))
    yinf = np.polyval(num, 1.0) / np.polyval(den, 1.0)
    term = pair.residue * abs(pair.pole) ** k * math.copysign(1.0, pair.pole.real) ** k
    assert float(np.ravel(y)[k]) - yinf == pytest.approx(term, rel=1e-6)
