"""Actuator saturation and anti-windup: the saturated reference and load steps.

References are simulations written here, independently of analysis/saturation.py: scipy's
``solve_ivp`` (adaptive, tight tolerances, short maximum step) on the loop's own equations
[derived: the stated loop equations], the delay by the method of steps (one ``solve_ivp``
per delay interval, the delayed input read from the previous interval's dense output), the
sampled loop with the plant integrated by ``solve_ivp`` over each period.  Settling times
must agree within 2 % and overshoots within 0.5 percentage points.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from loopwarden.analysis import analyze_variant
from loopwarden.cli import main
from loopwarden.design.loader import parse_design
from loopwarden.errors import DesignError

BAND = 0.02
# Plant K/(τs + 1), PI kp (1 + 1/(ti s)): the demand kp·r = 4 at the step against a limit
# of 1.5, so the loop saturates and the integral winds up.
K, TAU, KP, TI = 1.0, 1.0, 4.0, 0.5


def design(actuator: str, *, plant: str = f"tf = {{ num = [{K}], den = [{TAU}, 1.0] }}",
           extra: str = "") -> str:
    return (f'[design]\nname = "t"\n\n[plant]\n{plant}\n\n[[controller]]\ntype = "pi"\n'
            f"kp = {KP}\nti = {TI}\n\n[actuator]\n{actuator}\n{extra}\n")


def saturation(text: str):  # type: ignore[no-untyped-def]
    d = parse_design(text, "t.toml")
    a = analyze_variant(d, d.variants[0])
    assert a.saturation is not None, a.errors
    return a


def figures(t: np.ndarray, y: np.ndarray, final: float) -> tuple[float, float]:
    """Settling time (last exit from the 2 % band, interpolated) and overshoot in %."""
    yn = y / final
    out = np.flatnonzero(np.abs(yn - 1.0) > BAND)
    k = int(out[-1])
    level = 1.0 + BAND if yn[k] > 1.0 else 1.0 - BAND
    ts = t[k] + (t[k + 1] - t[k]) * (yn[k] - level) / (yn[k] - yn[k + 1])
    return float(ts), max(0.0, 100.0 * (float(yn.max()) - 1.0))


def pi_rhs(scheme: str, limit: float, tt: float, rate: float | None = None):  # type: ignore[no-untyped-def]
    """x = [∫e, y, (u_a with a rate limit)]; r = 1."""
    ki = KP / TI

    def rhs(t: float, x: np.ndarray) -> list[float]:
        e = 1.0 - x[1]
        u = KP * e + ki * x[0]
        us = min(max(u, -limit), limit)
        if rate is not None:
            # An ideal rate limiter as the limit of a fast tracking loop (1e-4 s lag).
            dua = min(max(1e4 * (us - x[2]), -rate), rate)
            ua = x[2]
        else:
            ua = us
        di = e
        if scheme == "clamping" and u != ua and e * (u - ua) > 0:
            di = 0.0
        elif scheme == "back_calculation":
            di = e + (ua - u) / (tt * ki)
        dx = [di, (K * ua - x[1]) / TAU]
        if rate is not None:
            dx.append(dua)
        return dx
    return rhs


def reference(rhs, n: int, horizon: float, method: str = "RK45"):  # type: ignore[no-untyped-def]
    t = np.linspace(0.0, horizon, 200001)
    sol = solve_ivp(rhs, (0.0, horizon), np.zeros(n), t_eval=t, rtol=1e-10, atol=1e-12,
                    max_step=1e-3, method=method)
    ts, os = figures(t, sol.y[1], 1.0)
    u_peak = float(np.max(np.abs(KP * (1.0 - sol.y[1]) + KP / TI * sol.y[0])))
    return ts, os, u_peak


@pytest.mark.parametrize("scheme,tt", [("none", 1.0), ("clamping", 1.0),
                                        ("back_calculation", 0.3)])
def test_pi_first_order_against_solve_ivp(scheme: str, tt: float) -> None:
    tt_key = f"tracking_time = {tt}\n" if scheme == "back_calculation" else ""
    a = saturation(design(f'limit = 1.5\nanti_windup = "{scheme}"\n{tt_key}'))
    got = a.saturation.reference
    ts, os, u_peak = reference(pi_rhs(scheme, 1.5, tt), 2, 12.0)
    assert got.settling_time_s == pytest.approx(ts, rel=0.02)
    assert got.overshoot_pct == pytest.approx(os, abs=0.5)
    assert got.linear_settling_time_s == a.step.settling_time_s
    assert got.windup_cost_s == pytest.approx(got.settling_time_s - a.step.settling_time_s)
    assert got.u_peak == pytest.approx(u_peak, rel=1e-3)
    assert got.saturated_time_s > 0


def test_windup_ordering() -> None:
    """No anti-windup overshoots more than clamping or back-calculation [practice:
    Åström & Hägglund 1995, §3.5]."""
    os = {s: saturation(design(f'limit = 1.5\nanti_windup = "{s}"\n'
                               + ("tracking_time = 0.3\n" if s == "back_calculation" else "")
                               )).saturation.reference.overshoot_pct
          for s in ("none", "clamping", "back_calculation")}
    assert os["none"] > os["clamping"] and os["none"] > os["back_calculation"]


def test_rate_limit_against_solve_ivp() -> None:
    a = saturation(design("limit = 1.5\nrate_limit = 2.0\n"))
    ts, os, _ = reference(pi_rhs("none", 1.5, 1.0, rate=2.0), 3, 12.0, method="LSODA")
    got = a.saturation.reference
    assert got.settling_time_s == pytest.approx(ts, rel=0.02)
    assert got.overshoot_pct == pytest.approx(os, abs=0.5)


def test_dead_time_pi_against_method_of_steps() -> None:
    """PI on e^{−Ls}/(τs + 1), L = 0.4 s, limit ±1.2, no anti-windup."""
    delay, kp, ti, limit = 0.4, 1.2, 1.0, 1.2
    text = (f'[design]\nname = "t"\n\n[plant]\ntf = {{ num = [1.0], den = [1.0, 1.0] }}\n'
            f'delay = {delay}\n\n[[controller]]\ntype = "pi"\nkp = {kp}\nti = {ti}\n\n'
            f"[actuator]\nlimit = {limit}\n")
    a = saturation(text)

    def u_sat(x: np.ndarray) -> float:
        return min(max(kp * (1.0 - x[1]) + kp / ti * x[0], -limit), limit)

    pieces = []
    horizon = 30.0
    x0 = np.zeros(2)
    prev = None
    for j in range(int(round(horizon / delay))):
        t0, t1 = j * delay, (j + 1) * delay

        def rhs(t: float, x: np.ndarray, prev=prev) -> list[float]:  # type: ignore[no-untyped-def]
            w = 0.0 if prev is None else u_sat(prev.sol(t - delay))
            return [1.0 - x[1], w - x[1]]

        sol = solve_ivp(rhs, (t0, t1), x0, dense_output=True, rtol=1e-10, atol=1e-12,
                        max_step=2e-3)
        x0 = sol.y[:, -1]
        prev = sol
        tt = np.linspace(t0, t1, 401)[:-1]
        pieces.append((tt, sol.sol(tt)[1]))
    t = np.concatenate([p[0] for p in pieces])
    y = np.concatenate([p[1] for p in pieces])
    ts, os = figures(t, y, 1.0)
    got = a.saturation.reference
    assert got.settling_time_s == pytest.approx(ts, rel=0.02)
    assert got.overshoot_pct == pytest.approx(os, abs=0.5)


def test_sampled_pi_against_per_period_solve_ivp() -> None:
    """Tustin PI at T = 0.1 s with clamping on its digital integral."""
    T, limit = 0.1, 1.5
    a = saturation(design(f'limit = {limit}\nanti_windup = "clamping"\n',
                          extra=f"[sampling]\nperiod = {T}\nmethod = \"tustin\"\n"))
    # Tustin: C(z) = kp + kp·T/(2ti) + (kp·T/ti)/(z − 1) [derived]; the digital integral
    # s[k+1] = s[k] + e[k] enters u with kp·T/ti.
    d0, r = KP + KP * T / (2 * TI), KP * T / TI
    s, y, ys = 0.0, 0.0, []
    for _ in range(200):
        e = 1.0 - y
        u = d0 * e + r * s
        ua = min(max(u, -limit), limit)
        ys.append(y)
        if not (u != ua and r * e * (u - ua) > 0):
            s += e
        sol = solve_ivp(lambda t, x, ua=ua: [(K * ua - x[0]) / TAU], (0.0, T), [y],
                        rtol=1e-11, atol=1e-13)
        y = float(sol.y[0, -1])
    t, yn = np.arange(len(ys)) * T, np.array(ys)
    # Read at the sampling instants: the first sample after the last one outside the band.
    ts = float(t[np.flatnonzero(np.abs(yn - 1.0) > BAND)[-1] + 1])
    os = max(0.0, 100.0 * (float(yn.max()) - 1.0))
    got = a.saturation.reference
    assert a.saturation.method == "sampled"
    assert got.settling_time_s == pytest.approx(ts, rel=0.02)
    assert got.overshoot_pct == pytest.approx(os, abs=0.5)


@pytest.mark.parametrize("extra", ["", "[sampling]\nperiod = 0.05\n"])
def test_limits_never_reached_give_the_linear_figures(extra: str) -> None:
    """Limits far beyond the demand: the loop is linear, so the saturated figures are the
    linear step's [derived]."""
    a = saturation(design("limit = 1e6\n", extra=extra))
    got = a.saturation.reference
    assert got.saturated_time_s == 0.0
    assert got.settling_time_s == pytest.approx(a.step.settling_time_s, rel=1e-4)
    assert got.overshoot_pct == pytest.approx(a.step.overshoot_pct, abs=1e-4)
    assert abs(got.windup_cost_s) < 1e-4 * a.step.settling_time_s


def test_load_step_saturates_and_recovers_later() -> None:
    """First-order plant: while the actuator is clipped it opposes the load less than the
    linear loop does, so the output deviates further [derived: comparison of
    y' = −y + u + d under |u| ≤ 1.5]."""
    a = saturation(design("limit = 1.5\n", extra="[disturbance]\nsize = -1.45\n"))
    ld = a.saturation.load
    assert ld is not None and ld.saturated_time_s > 0
    assert ld.peak >= ld.linear_peak * (1.0 - 1e-6)
    assert ld.recovery_time_s > ld.linear_recovery_time_s
    assert ld.linear_peak == pytest.approx(a.disturbance.peak, rel=1e-3)


def test_no_actuator_is_not_applicable(tmp_path: Path) -> None:
    text = design("limit = 1.5\n").split("[actuator]")[0]
    d = parse_design(text, "t.toml")
    a = analyze_variant(d, d.variants[0])
    assert a.saturation is None
    assert "saturated_response" in a.not_applicable


def test_json_keys(tmp_path: Path) -> None:
    path = tmp_path / "d.toml"
    path.write_text(design("limit = 1.5\n", extra="[requirements]\nwindup_cost_max = 5.0\n"),
                    encoding="utf-8")
    out = tmp_path / "r.json"
    main(["review", str(path), "--rules", "process-control", "--json", str(out)])
    data = json.loads(out.read_text(encoding="utf-8"))
    v = data["variants"][0]
    for key in ("settling_time_s", "overshoot_pct", "linear_settling_time_s",
                "windup_cost_s", "u_peak", "saturated_time_s"):
        assert key in v["saturation"], key
    assert data["design"]["actuator"]["max"] == 1.5
    rule = next(f for f in data["findings"] if f["rule"] == "actuator.windup")
    # No anti-windup on this loop costs about 1.54 s (test_pi_first_order...): within 5 s.
    assert rule["status"] == "pass"
    cost = v["saturation"]["windup_cost_s"]
    assert v["saturation"]["settling_time_s"] == pytest.approx(
        v["saturation"]["linear_settling_time_s"] + cost)


def test_rule_not_applicable_without_actuator(tmp_path: Path) -> None:
    path = tmp_path / "d.toml"
    path.write_text(design("limit = 1.5\n").split("[actuator]")[0]
                    + "[requirements]\nwindup_cost_max = 5.0\n", encoding="utf-8")
    out = tmp_path / "r.json"
    main(["review", str(path), "--rules", "process-control", "--json", str(out)])
    data = json.loads(out.read_text(encoding="utf-8"))
    rule = next(f for f in data["findings"] if f["rule"] == "actuator.windup")
    assert rule["status"] == "n/a"
    assert data["variants"][0]["saturation"] is None


# --------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("table,key,pattern", [
    ("limit = 1.0\nmax = 2.0\n", "actuator.max", "both"),
    ("min = -1.0\n", "actuator.max", "missing"),
    ("min = 1.0\nmax = 2.0\n", "actuator.min", "≤ 0"),
    ("min = -1.0\nmax = -0.5\n", "actuator.max", "≥ 0"),
    ("min = 0.0\nmax = 0.0\n", "actuator.max", "above min"),
    ("limit = -1.0\n", "actuator.limit", "positive"),
    ("limit = nan\n", "actuator.limit", "finite"),
    ("limit = 1.0\nrate_limit = 0.0\n", "actuator.rate_limit", "positive"),
    ('limit = 1.0\nanti_windup = "clamp"\n', "actuator.anti_windup", "unknown"),
    ('limit = 1.0\ntracking_time = 1.0\n', "actuator.tracking_time", "back_calculation"),
    ('limit = 1.0\nanti_windup = "back_calculation"\ntracking_time = -1.0\n',
     "actuator.tracking_time", "positive"),
    ("limit = 1.0\nlimt = 2.0\n", "actuator.limt", "unknown"),
])
def test_bad_actuator_table_names_file_table_and_key(table: str, key: str,
                                                     pattern: str) -> None:
    with pytest.raises(DesignError) as err:
        parse_design(design(table), "bad.toml")
    msg = str(err.value)
    assert "bad.toml" in msg and key in msg and pattern in msg.lower()


def test_back_calculation_without_pi_needs_tracking_time() -> None:
    text = ('[design]\nname = "t"\n[plant]\ntf = { num = [1.0], den = [1.0, 1.0] }\n'
            '[[controller]]\ntype = "integrator"\nk = 2.0\n'
            '[actuator]\nlimit = 1.0\nanti_windup = "back_calculation"\n')
    with pytest.raises(DesignError, match="tracking_time"):
        parse_design(text, "bad.toml")


def test_default_tracking_time() -> None:
    """Tt = ti for a PI [practice: Åström & Hägglund 1995, §3.5]."""
    a = saturation(design('limit = 1.5\nanti_windup = "back_calculation"\n'))
    assert a.saturation.tracking_time_s == TI


def test_bad_actuator_table_is_exit_2(tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(design("limit = 0.0\n"), encoding="utf-8")
    assert main(["review", str(path), "--json", str(tmp_path / "r.json")]) == 2
    assert not (tmp_path / "r.json").exists()


# --------------------------------------------------------------------------- realisations
def _transfer(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: float, s: complex) -> complex:
    n = a.shape[0]
    if n == 0:
        return complex(d)
    return complex(c @ np.linalg.solve(s * np.eye(n) - a, b) + d)


def test_controller_realisation_is_the_stage_product() -> None:
    """The controller state space from e (inputs [r, ym] = [e, 0]) equals the product of
    the stage models [derived: series connection]."""
    from loopwarden.analysis.saturation import controller_ss

    text = ('[design]\nname = "t"\n[plant]\ntf = { num = [1.0], den = [1.0, 1.0] }\n'
            '[[controller]]\ntype = "pid"\nkp = 2.0\nti = 0.7\ntd = 0.1\nn = 8.0\n'
            '[[controller]]\ntype = "lag"\nzero = 0.5\npole = 0.05\n'
            '[[controller]]\ntype = "lowpass"\nfreq = 30.0\n'
            '[[controller]]\ntype = "integrator"\nk = 0.5\n'
            '[[controller]]\ntype = "lead"\nzero = 2.0\npole = 20.0\n')
    d = parse_design(text, "t.toml")
    ctrl = controller_ss(d.controller)
    for s in (0.3j, 1.0 + 2.0j, 15.0j):
        want = np.prod([st.model(np.array([s]))[0] for st in d.controller])
        got = _transfer(ctrl.a, ctrl.b[:, 0], ctrl.c, ctrl.d[0], s)
        assert got == pytest.approx(want, rel=1e-9)
        # ym enters with the opposite sign of r (e = r − ym).
        got_y = _transfer(ctrl.a, ctrl.b[:, 1], ctrl.c, ctrl.d[1], s)
        assert got_y == pytest.approx(-want, rel=1e-9)
    # pid, lag and integrator have an integrating state each; lowpass and lead none.
    assert len(ctrl.aw) == 3


def test_pid_setpoint_weights() -> None:
    """u = kp(b·r − ym) + (kp/ti)∫(r − ym) + kp·td·s/((td/n)s + 1)(c·r − ym) [derived]:
    the reference path is kp(b + 1/(ti s) + c·td s/((td/n)s + 1))."""
    import dataclasses
    from types import MappingProxyType

    from loopwarden.analysis.saturation import controller_ss

    text = ('[design]\nname = "t"\n[plant]\ntf = { num = [1.0], den = [1.0, 1.0] }\n'
            '[[controller]]\ntype = "pid"\nkp = 2.0\nti = 0.7\ntd = 0.1\nn = 8.0\n')
    st = parse_design(text, "t.toml").controller[0]
    kp, ti, td, n, b, c = 2.0, 0.7, 0.1, 8.0, 0.4, 0.0
    weighted = dataclasses.replace(st, params=MappingProxyType({**st.params, "b": b, "c": c}))
    ctrl = controller_ss((weighted,))
    for s in (0.3j, 1.0 + 2.0j, 15.0j):
        want_r = kp * (b + 1.0 / (ti * s) + c * td * s / (td / n * s + 1.0))
        want_y = -kp * (1.0 + 1.0 / (ti * s) + td * s / (td / n * s + 1.0))
        assert _transfer(ctrl.a, ctrl.b[:, 0], ctrl.c, ctrl.d[0], s) == pytest.approx(want_r)
        assert _transfer(ctrl.a, ctrl.b[:, 1], ctrl.c, ctrl.d[1], s) == pytest.approx(want_y)


@pytest.mark.parametrize("extra", ["", "[sampling]\nperiod = 0.05\n"])
@pytest.mark.parametrize("at", ["plant_input", "plant_output"])
def test_unreached_limits_give_the_linear_load_response(at: str, extra: str) -> None:
    """Limits never reached: the load figures are the linear ones, and for continuous
    loops (and a sampled output load, exact for a step) they equal the exact linear load
    response of analysis/disturbance.py [derived]."""
    text = design("limit = 1e6\n", plant="tf = { num = [1.0], den = [1.0, 1.0] }\n"
                  "delay = 0.12", extra=extra + f'[disturbance]\nat = "{at}"\nsize = 0.7\n'
                  "[sensor]\ntf = { num = [1.0], den = [0.05, 1.0] }\n")
    a = saturation(text)
    ld = a.saturation.load
    assert ld.saturated_time_s == 0.0
    assert ld.peak == pytest.approx(ld.linear_peak, rel=1e-12)
    assert ld.recovery_time_s == pytest.approx(ld.linear_recovery_time_s, rel=1e-12)
    if extra and at == "plant_input":
        return          # the linear sampled analysis feeds this load through the hold
    assert ld.linear_peak == pytest.approx(a.disturbance.peak, rel=1e-5)
    assert ld.linear_recovery_time_s == pytest.approx(a.disturbance.recovery_time_s, rel=1e-4)
