"""Certified closed-loop roots of badly scaled and high-order rational loops (issue 10).

Everything goes through the public API (a design file → ``loopwarden.analyze``) and is
checked against references that do not use loopwarden:

* furnace-like loops (plant poles 1e-3 … 1e4 rad/s, tf coefficients 1 … 3.15e13, a lag):
  roots and step residues at 50 digits in mpmath from the exact coefficients of the design
  file, cross-checked by companion-matrix eigenvalues and contour integrals [derived]
  (``tests/data/make_reference_roots.py``);
* the same plant with a slow right-half-plane zero: unstable because the characteristic
  polynomial's constant term is negative while its leading coefficient is 1 [derived];
* K/(s + 1)^60 at 100× its critical gain: closed-form roots [derived];
* 400 distinct stable plant poles under a small gain: stable by the small-gain bound
  |L(jω)| ≤ 0.5 < 1 [derived]; roots from Aberth iteration polished in mpmath.
"""

from __future__ import annotations

import math
from functools import cache
from pathlib import Path

import numpy as np
import pytest

import loopwarden
import reference_loops as rl

ROOT = Path(__file__).resolve().parents[1]
BAND = 0.02


@cache
def analysis(key: str):
    """Nominal LoopAnalysis of one reference design (analysed once per test session)."""
    builders = {
        "furnace_tf": rl.furnace_tf,
        "furnace_zpk": rl.furnace_zpk,
        "furnace_rhp": lambda: rl.furnace_tf(rl.FURNACE_RHP_NUM, name="furnace, RHP zero"),
        "furnace_rhp_zpk": lambda: rl.furnace_zpk(rhp_zero=True, name="furnace, RHP zero"),
        "chain60": lambda: rl.chain_design(rl.CHAIN_N, rl.CHAIN_K),
        "cluster": rl.cluster_design,
    }
    return loopwarden.analyze(rl.design(builders[key](), f"{key}.toml"))[0]


def assert_roots_match(listed, reference, rel: float, scale=None) -> None:
    """One-to-one: every reference root has its own listed root within ``rel·|root|``
    (or ``rel·scale`` when a scale is given), and nothing else is listed."""
    listed = np.asarray(listed, dtype=complex)
    reference = np.asarray(reference, dtype=complex)
    assert listed.size == reference.size, (listed.size, reference.size)
    free = np.ones(listed.size, dtype=bool)
    for r in reference:
        gaps = np.where(free, np.abs(listed - r), np.inf)
        i = int(np.argmin(gaps))
        tol = rel * (abs(r) if scale is None else scale)
        assert gaps[i] <= tol, f"root {r} not found: nearest {listed[i]} (|Δ| = {gaps[i]:.3g})"
        free[i] = False


# --------------------------------------------------------------------------- furnace
FURNACE = ["furnace_tf", "furnace_zpk"]


def test_furnace_design_states_the_reference_coefficients():
    # The tf design spans the coefficient range the issue reports (1 … ~3e13), and its
    # denominator is Π(s + p_i) of the stated poles to double rounding [derived].
    den = np.array(rl.FURNACE_DEN)
    assert den[0] == 1.0 and 3e13 < den.max() < 3.2e13
    assert np.allclose(den, np.poly([-p for p in rl.FURNACE_POLES]).real, rtol=1e-14)
    ref = rl.reference_data()["furnace_tf"]
    stated = np.polyadd(np.polymul([1.0, rl.FURNACE_LAG[1]], den),
                        rl.FURNACE_GAIN * rl.FURNACE_NUM[0] * np.array([1.0, rl.FURNACE_LAG[0]]))
    assert np.allclose(ref["char_poly"], stated, rtol=1e-15)


@pytest.mark.parametrize("key", FURNACE)
def test_furnace_closed_loop_roots(key):
    # [derived] mpmath at 50 digits (polyroots and companion eigenvalues agree to 1e-35):
    # slow root −0.00332786823731568, pair −0.0234596 ± 0.0188329j, −1.00105, −300, −2000,
    # −5000, −10000.
    ref = rl.reference_data()[key]
    st = analysis(key).stability
    assert st.closed_loop_stable is True
    assert st.rhp_closed_loop_poles == 0
    assert_roots_match(st.closed_loop_poles, rl.as_complex(ref["roots"]), rel=1e-9)


@pytest.mark.parametrize("key", FURNACE)
def test_furnace_slow_pair(key):
    # [derived] Res[T(s)/s, p] = N(p)/(p·χ'(p)) at the mpmath root, confirmed by a contour
    # integral; y∞ = T(0) = 0.99502; tail ln(|r|/(0.02·y∞))/|p|.
    # Reference: pole −0.0033278682373157, zero −0.003, residue +0.129937, tail 563.82 s.
    ref = rl.reference_data()[key]["slow"]
    assert len(ref) == 1
    want = ref[0]
    tail = analysis(key).slow_tail
    assert tail is not None
    assert len(tail.pairs) == 1
    pair = tail.pairs[0]
    pole = complex(*want["pole"])
    assert abs(pair.pole - pole) <= 1e-9 * abs(pole)
    assert pair.zero == pytest.approx(complex(*want["zero"]), rel=1e-12)
    assert pair.residue == pytest.approx(want["residue"], rel=1e-6)
    assert pair.tail_time_s == pytest.approx(want["tail_time_s"], rel=1e-6)


@pytest.mark.parametrize("key", ["furnace_rhp", "furnace_rhp_zpk"])
def test_furnace_rhp_zero_loop_is_unstable(key):
    # [derived] χ(s) = (s + 0.0003)·D(s) + 10·3e13·(s − 1e-4)(s + 0.003): leading
    # coefficient 1, constant 0.0003·1.5e9 − 10·3e9·0.003 = −8.955e7 < 0, so χ has a real
    # root in (0, ∞). mpmath: exactly one unstable root, +9.92903995138778e-5 rad/s
    # (also found by bisection of χ on the positive real axis).
    const = rl.FURNACE_LAG[1] * rl.FURNACE_DEN[-1] + \
        rl.FURNACE_GAIN * rl.FURNACE_RHP_NUM[1] * rl.FURNACE_LAG[0]
    assert const < 0 < 1.0
    ref = rl.reference_data()[key]
    assert ref["char_poly_signs"] == [1, -1]
    assert ref["rhp"] == 1
    st = analysis(key).stability
    assert st.closed_loop_stable is False
    assert st.rhp_closed_loop_poles >= 1
    assert st.rhp_closed_loop_poles == ref["rhp"]
    root = max(complex(*r).real for r in ref["roots"])
    assert root == pytest.approx(9.929039951e-5, rel=1e-9)
    if "positive_real_root" in ref:                     # bisection of χ on (0, 1e-3)
        assert ref["positive_real_root"] == pytest.approx(root, rel=1e-12)
    listed = np.asarray(st.closed_loop_poles, dtype=complex)
    assert np.min(np.abs(listed - root)) <= 1e-9 * root
    assert_roots_match(listed, rl.as_complex(ref["roots"]), rel=1e-9)


# --------------------------------------------------------------------------- 60 equal poles
def test_sixty_equal_poles_at_100x_critical_gain_is_unstable():
    # [derived] (s + 1)^60 + K = 0 with K = 100/cos(π/60)^60: roots
    # −1 + K^{1/60}e^{j(2m+1)π/60}; K^{1/60} = 1.081190, so Re > 0 for (2m+1)π/60 <
    # acos(1/K^{1/60}), i.e. 2m + 1 ∈ {±1, ±3, ±5, ±7}: 8 unstable roots, the rightmost at
    # +0.0797752 ± 0.0566j.
    exact = rl.chain_roots(rl.CHAIN_N, rl.CHAIN_K)
    assert int(np.sum(exact.real > 0)) == 8
    a = analysis("chain60")
    st = a.stability
    assert st.closed_loop_stable is False
    assert st.rhp_closed_loop_poles == 8
    radius = rl.CHAIN_K ** (1 / rl.CHAIN_N)
    assert_roots_match(st.closed_loop_poles, exact, rel=1e-9, scale=radius)


def test_sixty_equal_poles_gain_margin_is_minus_40_db():
    # [derived] ∠L = −60·atan ω = −180° at ω = tan(π/60) = 0.052408, where
    # |L| = K·cos(π/60)^60 = 100: the loop needs its gain cut by 40 dB.
    m = analysis("chain60").margins
    w180 = math.tan(math.pi / rl.CHAIN_N)
    first = min((c for c in m.phase_crossings if c.frequency_rad_s > 0),
                key=lambda c: c.frequency_rad_s)
    assert first.frequency_rad_s == pytest.approx(w180, rel=1e-6)
    assert first.gain_margin_db == pytest.approx(-40.0, abs=1e-6)


# --------------------------------------------------------------------------- 400-pole cluster
def test_400_pole_cluster_is_stable():
    # [derived] small gain: |L(jω)| = 0.5/Π|jω − p_i| ≤ 0.5/Π|p_i| < 0.5 for poles in
    # [−1.2, −1.0], and L is open-loop stable, so the closed loop is stable.  Reference
    # roots: 400 distinct roots of Π(s − p_i) + 0.5 (Aberth, polished at 50 digits);
    # the rightmost real part is stored with them (−0.10008).
    ref = rl.reference_data()["cluster"]
    assert 0.5 / np.prod(np.abs(rl.CLUSTER_POLES)) < 1
    assert ref["max_real_part"] < 0
    st = analysis("cluster").stability
    assert st.closed_loop_stable is True
    assert st.rhp_closed_loop_poles == 0
    assert_roots_match(st.closed_loop_poles, rl.as_complex(ref["roots"]), rel=1e-9, scale=1.0)


# --------------------------------------------------------------------------- sample designs
#: Verdicts per variant as the analysis gave them before the root-finding rewrite (read
#: from the code on 2026-12-02); the rewrite must not change any of them.
SAMPLE_VERDICTS = {
    "conveyor_axis.toml": {"nominal": True, "heavy load": True, "light load": True},
    # added with the parameter sweep (its nominal loop, reviewed without --sweep)
    "dancer_tension.toml": {"nominal": True},
    "gimbal_rate.toml": {"nominal": True, "stiff mount": True},
    "hoist_lag_tail.toml": {"nominal": True},
    "levitation_lead.toml": {"nominal": True, "light ball": True},
    "pump_pressure.toml": {"nominal": True, "long delivery line": True, "two pumps": True},
    "spindle_sweep.toml": {"nominal": True, "identified model": True},
    "tank_level.toml": {"nominal": True, "slow valve": True, "high level": True},
}


def test_every_sample_design_is_listed():
    assert sorted(p.name for p in (ROOT / "sample_designs").glob("*.toml")) == \
        sorted(SAMPLE_VERDICTS)


@pytest.mark.parametrize("name", sorted(SAMPLE_VERDICTS))
def test_sample_design_verdicts_unchanged(name):
    results = loopwarden.analyze(loopwarden.load_design(str(ROOT / "sample_designs" / name)))
    got = {a.variant: a.stability.closed_loop_stable for a in results}
    assert got == SAMPLE_VERDICTS[name]
    assert all(a.stability.rhp_closed_loop_poles == 0 for a in results)
