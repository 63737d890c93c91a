"""The stability certificate and the gain margin of unstable loops.

Sources are named beside each check; the closed forms are [derived] from the stated loops.
"""

from __future__ import annotations

import datetime as dt
import json
import math

import numpy as np
import pytest

from loopwarden.analysis import analyze
from loopwarden.analysis import stability as stability_module
from loopwarden.design.loader import parse_design
from loopwarden.report.json_out import render
from loopwarden.review_run import run_review
from loopwarden.ruleset.model import Status


def design(plant: str, extra: str = "", k: float = 1.0) -> str:
    return f"""
[design]
name = "certificate"
[plant]
{plant}
[[controller]]
type = "gain"
k = {k!r}
{extra}
"""


def test_sixty_equal_poles_unstable_and_gain_margin_to_stability():
    # L = K/(s + 1)^60, K = 100·K_crit, K_crit = 1/cos(π/60)^60 [derived]: the roots are
    # −1 + K^(1/60)·e^{j(2m+1)π/60}; those with cos((2m+1)π/60) > 1/K^(1/60) are unstable
    # (8 of them); the loop is stable for gains below K_crit, i.e. after a cut of 40 dB,
    # first reached at the phase crossover tan(π/60).
    kc = 1.0 / math.cos(math.pi / 60) ** 60
    k = 100.0 * kc
    poles = ", ".join(["-1.0"] * 60)
    (a,) = analyze(parse_design(design(f"zpk = {{ zeros = [], poles = [{poles}], gain = {k!r} }}"),
                                "sixty.toml"))
    st = a.stability
    exact = -1.0 + k ** (1 / 60) * np.exp(1j * (2 * np.arange(60) + 1) * np.pi / 60)
    assert not st.closed_loop_stable and st.certified
    assert st.rhp_closed_loop_poles == int(np.sum(exact.real > 0)) == 8
    assert st.unstable_roots_counted == 8
    got = np.asarray(st.closed_loop_poles)
    assert np.max(np.min(np.abs(got[:, None] - exact[None, :]), axis=1)) < 1e-12
    m = a.margins
    assert m.gain_margin_db == pytest.approx(-40.0, abs=1e-9)
    assert m.phase_crossover_rad_s == pytest.approx(math.tan(math.pi / 60), rel=1e-9)
    assert m.stable_gain_found is True
    assert m.stable_gain_range_db == (-math.inf, pytest.approx(-40.0, abs=1e-9))


def test_open_loop_unstable_plant_needs_more_gain():
    # K/(s − 1) is closed-loop stable for K > 1 [derived: root at 1 − K]; at K = 0.5 the
    # gain must be doubled: +6.02 dB, reached at ω = 0, and every larger gain stays stable.
    (a,) = analyze(parse_design(design("zpk = { zeros = [], poles = [1.0], gain = 0.5 }"),
                                "up.toml"))
    assert not a.stability.closed_loop_stable and a.stability.certified
    assert a.stability.closed_loop_poles == pytest.approx((0.5,), abs=1e-15)
    m = a.margins
    assert m.gain_margin_db == pytest.approx(20 * math.log10(2.0), abs=1e-9)
    assert m.stable_gain_range_db == (pytest.approx(20 * math.log10(2.0)), math.inf)


def test_sampled_integrator_with_too_much_gain():
    # The plant 1/s behind a hold, sampled at T = 0.1 s, is T/(z − 1); under a gain k the
    # loop kT/(z − 1) is stable for 0 < kT < 2 [derived: closed-loop root 1 − kT].  With
    # k = 40 (kT = 4) the root is −3 and the gain must be halved: −6.02 dB, met at the
    # Nyquist frequency π/T where L = −kT/2.
    text = design("zpk = { zeros = [], poles = [0.0], gain = 1.0 }",
                  extra="[sampling]\nperiod = 0.1\n", k=40.0)
    (a,) = analyze(parse_design(text, "z.toml"))
    st = a.stability
    assert st.domain == "z" and not st.closed_loop_stable and st.certified
    assert st.closed_loop_poles == pytest.approx((-3.0,), abs=1e-12)
    assert st.unstable_roots_counted == 1
    m = a.margins
    assert m.gain_margin_db == pytest.approx(-20 * math.log10(2.0), abs=1e-9)
    assert m.phase_crossover_rad_s == pytest.approx(math.pi / 0.1, rel=1e-9)
    assert m.stable_gain_range_db == (-math.inf, pytest.approx(-20 * math.log10(2.0)))


def test_disagreeing_count_is_an_error_finding(monkeypatch):
    # A certificate that fails must never pass: make the argument principle disagree with
    # the roots (a count of one unstable root for a stable loop) and expect an error.
    real = stability_module.nyquist_count

    def lying(loop):  # type: ignore[no-untyped-def]
        nc = real(loop)
        return type(nc)(**{**{f: getattr(nc, f) for f in nc.__slots__},
                           "rhp_closed_loop_poles": nc.rhp_closed_loop_poles + 1})

    monkeypatch.setattr(stability_module, "nyquist_count", lying)
    d = parse_design(design("zpk = { zeros = [], poles = [-1.0, -2.0], gain = 1.0 }"),
                     "lie.toml")
    (a,) = analyze(d)
    assert not a.stability.certified and not a.stability.closed_loop_stable
    assert "argument principle counts 1" in a.stability.note
    review = run_review(d, "general", today=dt.date(2026, 12, 2), tool_version="test")
    (f,) = [f for f in review.findings if f.check == "closed_loop_stability"]
    assert f.status is Status.ERROR and "not certified" in f.message
    assert review.verdict == "fail"


def test_certificate_keys_in_the_json():
    d = parse_design(design("zpk = { zeros = [], poles = [0.0], gain = 1.0 }\ndelay = 0.5"),
                     "delay.toml")
    review = run_review(d, "general", today=dt.date(2026, 12, 2), tool_version="test")
    doc = json.loads(render(review))
    st = doc["variants"][0]["stability"]
    # e^{−0.5 s}/s: roots s = W_n(−0.5)/0.5 (Lambert W) [derived]; the rightmost pair
    assert st["certified"] is True
    assert st["search_abscissa_rad_s"] > 0
    assert st["roots_right_of_search_counted"] == len(st["closed_loop_poles"])
    from scipy.special import lambertw

    w0 = complex(lambertw(-0.5, 0)) / 0.5
    poles = [complex(p["re"], p["im"]) for p in st["closed_loop_poles"]]
    assert min(abs(p - w0) for p in poles) < 1e-12 * abs(w0)
