"""Held-out loops of bench/crosscheck_roots.py (seed 2026, 3 per family) against stored
independent references (tests/data/crosscheck_roots.json).

The references were computed by the bench script's own code, not loopwarden's [derived]:
rational and sampled loops from the characteristic polynomial formed in mpmath from the
design's exact doubles (``mpmath.polyroots``, 50 digits; the ZOH plant from the partial
fractions of G(s)/s, not a matrix exponential); delay loops from F(s) = D(s) + N(s)·e^{−sT}
by an argument-principle winding count on a rectangle and Newton from a dense start grid,
polished by ``mpmath.findroot``; residues by a trapezoid contour integral of T(s)/s (or
T(z)/(z − 1)) on a small circle around the pole; tails ln(|r|/(0.02·|y∞|))/σ.

Tolerances are the issue's acceptance limits (poles 0.1 %, residues 2 %, tails 3 %); the
bench run measured agreement to about 1e-12 or better.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import pytest

from loopwarden.analysis import analyze
from loopwarden.design.loader import parse_design

POLE_RTOL, RESIDUE_RTOL, TAIL_RTOL = 1e-3, 2e-2, 3e-2


DATA = Path(__file__).resolve().parent / "data" / "crosscheck_roots.json"


@dataclass(frozen=True)
class Case:
    name: str
    family: str
    toml: str
    stable: bool
    pairs: tuple[tuple[float, float, float, float], ...]


CASES = tuple(Case(c["name"], c["family"], c["toml"], c["stable"],
                   tuple(tuple(p) for p in c["pairs"]))
              for c in json.loads(DATA.read_text(encoding="utf-8"))["cases"])


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_crosscheck_loop(case: Case) -> None:
    a = analyze(parse_design(case.toml, "crosscheck.toml"))[0]
    st = a.stability
    assert st.certified, st.note
    assert st.closed_loop_stable is case.stable
    if not case.stable:
        assert st.unstable_roots_counted is None or st.unstable_roots_counted > 0
        return
    assert a.slow_tail is not None
    if 'type = "lag"' in case.toml or 'domain = "z"' in case.toml:
        assert a.boosts, "a lag stage must be recognised as a boost (no n/a boost checks)"
    got = sorted(a.slow_tail.pairs, key=lambda p: -p.pole.real if p.domain == "s"
                 else -abs(p.pole))
    assert len(got) == len(case.pairs)
    sampled = "[sampling]" in case.toml
    for ref in case.pairs:
        pole = complex(ref[0], ref[1])
        pr = min(got, key=lambda p: abs(p.pole - pole))
        assert abs(pr.pole - pole) <= POLE_RTOL * abs(pole)
        assert pr.residue == pytest.approx(ref[2], rel=RESIDUE_RTOL)
        tail = pr.tail_time_s
        if sampled:
            assert pr.tail_samples is not None
        if ref[3] == 0.0:
            assert tail == 0.0
        else:
            assert tail == pytest.approx(ref[3], rel=TAIL_RTOL)
            assert math.isfinite(tail)


#: bench seed 2026, "sampled 38": a stable sampled lag loop whose current phase margin
#: (about 129°) no integral re-tune can keep, so the alternative's gain goes to its floor
#: (×0.001) and its slowest pole to about −1e-4 rad/s.  The continuous twin of the same
#: loop settles in about 3.45e4 s [derived: the same analysis without [sampling]]; the
#: sampled step response stops at its 2·10⁶-sample cap (6.58e4 s) because the ramp error's
#: transient must fall to 1e-2·band of its value, about 8.5 time constants.
SAMPLED_SLOW_ALTERNATIVE = """
[design]
name = "sampled 38"
[sampling]
period = 0.0329
method = "zoh"
compute_delay = 0
[plant]
zpk = { zeros = [], poles = [-0.3333333333333333, -0.7299270072992701, -16.69449081803005], \
gain = 5.942588824033567 }
[[controller]]
type = "gain"
k = 0.3216
[[controller]]
type = "lag"
zero = 0.241
pole = 0.0756
"""


@pytest.mark.xfail(strict=True, reason="known limit: the sampled step response of a very "
                   "slow integral alternative is capped at 2e6 samples (discrete_response)")
def test_sampled_slow_integral_alternative_is_decided() -> None:
    a = analyze(parse_design(SAMPLED_SLOW_ALTERNATIVE, "crosscheck.toml"))[0]
    assert a.stability.closed_loop_stable
    assert "integral_alternative" not in a.errors
    assert a.integral_alternatives


@pytest.mark.xfail(strict=True, reason="open: the delay root search stops at the generator's "
                   "size limit with 263 of 363 roots; a retreating search line fixed it but "
                   "slowed the suite and was reverted")
def test_long_delay_lag_loop_certified_after_search_line_retreat() -> None:
    """bench "delay lag 3" at 1.03× its critical gain (a 22 s delay over a 1.1 s lag):
    right of the first search line (σT = 4) the argument principle counts 363 roots
    [derived: the bench's own winding count agrees], more than the generator's size limit
    resolves, so the loop was "not certified".  The line now retreats to σ = 0.0907 rad/s,
    where the bench's independent winding counts 51 roots [derived].  Reference verdict: 2
    roots right of the axis, 0.0012845493274 ± 0.1350452345257j (winding count and
    mpmath.findroot on F(s) = D(s) + N(s)·e^{−sT}) [derived]."""
    import numpy as np

    from loopwarden.analysis.stability import closed_loop_stability
    from loopwarden.lti import Loop, Zpk

    one = Zpk(np.zeros(0), np.zeros(0), 1.0)
    loop = Loop(plant=Zpk(np.zeros(0), np.array([-0.9066183136899365]), 0.4771532184950136),
                controller=Zpk(np.array([-0.002419]), np.array([-0.0002326]), 1.97833),
                sensor=one, delay_s=22.05)
    st = closed_loop_stability(loop)
    assert st.certified, st.note
    assert not st.closed_loop_stable
    assert st.unstable_roots_counted == 2
    poles = np.asarray(st.closed_loop_poles)
    assert poles.size == st.roots_right_of_search_counted
    if st.search_abscissa_rad_s == pytest.approx(0.09070294784580499, rel=1e-12):
        assert st.roots_right_of_search_counted == 51
    rhp = poles[poles.real > 0]
    ref = complex(0.001284549327427845, 0.13504523452572603)
    assert rhp.size == 2
    assert np.min(np.abs(rhp - ref)) <= 1e-6 * abs(ref)
