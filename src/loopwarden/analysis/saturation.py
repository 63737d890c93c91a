"""The reference step and the load step with the actuator's limits: windup and its cost.

The loop of DESIGN.md (e = r − ym, u = C·e, y = P·e^{−sT}·u, ym = H·y, the transport delay
at the plant input) with the ``[actuator]`` table between the controller and the delay:

* the controller's demand u is clipped to ``[min, max]``; a rate limit then lets the
  actuator output u_a follow the clipped demand with |du_a/dt| ≤ ``rate_limit``;
* anti-windup acts on the controller's integrating states (below).  **Clamping**
  (conditional integration): the state's derivative is set to zero while u_a ≠ u and its
  input drives u further beyond u_a (same sign as u − u_a through the state's gain to u).
  **Back-calculation**: the state gets the extra input (u_a − u)/(Tt·g), g its DC gain to
  u, so that the integral term in u units tracks u_a − u with time constant Tt
  [memory: Åström & Hägglund, *PID Controllers: Theory, Design and Tuning*, 1995, §3.5].

Integrating states, continuous controllers: pi and pid, the integral of the error; an
integrator stage, its state; a lag stage g(s+z)/(s+p) = g(1 + (z−p)/(s+p)), its pole
state (a leaky integrator, gain g(z−p)); every other stage none.  g multiplies the state's
output coefficient by the DC gain of the stages after it.  A pid stage in first place sees
r and ym separately and applies its setpoint weights b and c (``Stage.params``, default 1):
u = kp(b·r − ym) + (kp/ti)∫(r − ym) + kp·td·s/((td/n)s + 1)(c·r − ym).

Sampled controllers: the digital controller C(z) (continuous stages discretised together,
z stages, as the linear analysis has it; the compute delay after the limits) is split as
C(z) = R/(z − 1) + C₀(z) when it has one pole at z = 1; anti-windup acts on the state of
R/(z − 1), the digital integral, with g = R.

Continuous loops are integrated by the classical Runge–Kutta method at a fixed step h =
delay/N (N whole), h ≤ 1/ρ for every block's and the closed loop's fastest mode ρ; the
delayed actuator output comes from the stored history (exact delay, the value inside a
step interpolated linearly).  Sampled loops are exact between samples: the controller
updates at kT, the clipped and rate-limited output is held, and the plant, sensor and
delay are integrated over each period (and the delay's fraction of it) with the matrix
exponential.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import AnalysisError
from .saturation_controller import (  # noqa: F401  (re-exported: the old import path stays valid)
    Controller,
    Matrix,
    _dc_gain,
    _stage_ss,
    _tf_ss,
    check_anti_windup,
    controller_ss,
    digital_controller,
)
from .saturation_sim import (  # noqa: F401  (re-exported: the old import path stays valid)
    ACTIVE_TOL,
    MAX_STEPS,
    STEPS,
    Simulation,
    _anti_windup,
    _assemble,
    _Limits,
    _limits,
    _Plant,
    _step_size,
    simulate_continuous,
    simulate_sampled,
    tracking_time,
)
from .time_response import settling_time

__all__ = ["Simulation", "simulate_continuous", "simulate_sampled", "step_metrics",
           "tracking_time"]


# --------------------------------------------------------------------------- figures
def step_metrics(sim: Simulation, final: float, band: float, sampled: bool = False
                 ) -> tuple[float, float]:
    """(settling time in the band, overshoot in % of |final|) of a run.

    Continuous runs interpolate the last exit from the band; sampled runs read the first
    sampling instant after it, as the linear sampled step does.
    """
    yn = sim.y / final
    ts = settling_time(sim.time_s, yn, 1.0, band)
    if sampled and 0.0 < ts < math.inf:
        outside = np.flatnonzero(np.abs(yn - 1.0) > band)
        ts = float(sim.time_s[outside[-1] + 1])
    quiet = np.abs(yn[sim.time_s >= 0.8 * sim.time_s[-1]] - 1.0).max() <= band
    if not (ts <= 0.75 * sim.time_s[-1] and quiet):
        ts = math.inf
    return ts, max(0.0, 100.0 * (float(np.max(yn)) - 1.0))


def _saturated_time(sim: Simulation) -> float:
    scale = max(1.0, float(np.max(np.abs(sim.u))))
    active = np.abs(sim.u - sim.u_actuator) > ACTIVE_TOL * scale
    dt = np.diff(sim.time_s)
    return float(np.sum(dt[active[:-1]]))


def _runner(design, variant):  # type: ignore[no-untyped-def]
    """(run(act, horizon, r, d_in, d_out) -> Simulation, method, step)."""
    from ..design.sampling import controller_blocks

    stages = design.controller
    if design.sampling is None:
        loop = design.continuous_loop(variant)

        def run(act, horizon, **kw):  # type: ignore[no-untyped-def]
            return simulate_continuous(loop, stages, act, horizon, **kw)
        return run, "rk4"
    dloop = design.sampled_loop(variant)
    smp = design.sampling
    blocks = controller_blocks(
        smp, [st.model for st in stages],
        [st.domain for st in stages])
    if smp.compute_delay_samples:
        blocks = blocks[:-1]
    ctrl = digital_controller(stages, dloop, blocks)
    delay = variant.delay_s + design.sensor_delay_s

    def run_z(act, horizon, **kw):  # type: ignore[no-untyped-def]
        return simulate_sampled(dloop, ctrl, variant.model, design.sensor, delay,
                                smp.compute_delay_samples, stages, act, horizon, **kw)
    return run_z, "sampled"


def saturation_response(design, variant, step_metrics_linear, step_curve, disturbance,
                        band: float):  # type: ignore[no-untyped-def]
    """The :class:`~.results.Saturation` of one variant (design with ``[actuator]``).

    ``step_curve`` is the linear unit step's series (plotted beside, scaled by ``step``).
    """
    from .results import SaturatedStep, Saturation, SaturationCurves, TimeSeries
    from .time_response import plot_series

    act = design.actuator
    run, method = _runner(design, variant)
    lin = step_metrics_linear
    final = lin.final_value * act.step
    horizon = max(lin.horizon_s, 3.0 * lin.settling_time_s)
    for _ in range(3):
        sim = run(act, horizon, r=act.step)
        ts, os = step_metrics(sim, final, band, sampled=method == "sampled")
        if math.isfinite(ts):
            break
        horizon *= 2.0
    ref = SaturatedStep(step=act.step, settling_time_s=ts, overshoot_pct=os,
                        linear_settling_time_s=lin.settling_time_s,
                        linear_overshoot_pct=lin.overshoot_pct,
                        windup_cost_s=ts - lin.settling_time_s,
                        u_peak=float(np.max(np.abs(sim.u))),
                        saturated_time_s=_saturated_time(sim), horizon_s=horizon)
    curves = dict(step=plot_series(sim.time_s, sim.y),
                  step_linear=TimeSeries(time_s=step_curve.time_s,
                                         value=step_curve.value * act.step),
                  step_u=plot_series(sim.time_s, sim.u),
                  step_u_actuator=plot_series(sim.time_s, sim.u_actuator))
    load = None
    if disturbance is not None:
        load, more = _load(run, act, design.disturbance, disturbance, horizon,
                           method == "sampled")
        curves.update(more)
    dt = float(sim.time_s[1] - sim.time_s[0])
    tt = (tracking_time(design.controller, act.tracking_time_s)
          if act.anti_windup == "back_calculation" else None)
    return Saturation(min_value=act.min_value, max_value=act.max_value,
                      rate_limit_per_s=act.rate_limit_per_s, anti_windup=act.anti_windup,
                      tracking_time_s=tt, method=method, step_s=dt, reference=ref,
                      load=load, curves=SaturationCurves(**curves))


def _load(run, act, dist, lin, horizon, sampled):  # type: ignore[no-untyped-def]
    from .results import SaturatedLoad
    from .time_response import plot_series

    kw = {"d_in": dist.size} if dist.at == "plant_input" else {"d_out": dist.size}
    horizon = max(horizon, 2.0 * lin.recovery_time_s if math.isfinite(lin.recovery_time_s)
                  else horizon, lin.horizon_s)
    for _ in range(3):
        sim = run(act, horizon, **kw)
        rec = _recovery(sim, lin.static_deviation, lin.recovery_level, sampled)
        if math.isfinite(rec):
            break
        horizon *= 2.0
    # The linear figures from the same simulation without limits: for a sampled loop the
    # linear load analysis feeds the load through the hold (shifted by the delay), here
    # it enters the plant at t = 0 exactly.
    linear = run(None, horizon, **kw)
    out = SaturatedLoad(peak=float(np.max(np.abs(sim.y))),
                        linear_peak=float(np.max(np.abs(linear.y))), recovery_time_s=rec,
                        linear_recovery_time_s=_recovery(linear, lin.static_deviation,
                                                         lin.recovery_level, sampled),
                        u_peak=float(np.max(np.abs(sim.u))),
                        saturated_time_s=_saturated_time(sim))
    return out, dict(load=plot_series(sim.time_s, sim.y),
                     load_linear=plot_series(linear.time_s, linear.y),
                     load_u_actuator=plot_series(sim.time_s, sim.u_actuator))


def _recovery(sim: Simulation, y_inf: float, level: float, sampled: bool) -> float:
    """Last exit of |y − y∞| > level (inf: outside at the end or in the last fifth);
    sampled runs: the first sampling instant after it."""
    dev = np.abs(sim.y - y_inf)
    out = np.flatnonzero(dev > level)
    if out.size == 0:
        return 0.0
    k = int(out[-1])
    if k == dev.size - 1 or sim.time_s[k] > 0.8 * sim.time_s[-1]:
        return math.inf
    if sampled:
        return float(sim.time_s[k + 1])
    t0, t1, d0, d1 = sim.time_s[k], sim.time_s[k + 1], dev[k], dev[k + 1]
    return float(t0 + (t1 - t0) * (d0 - level) / (d0 - d1)) if d0 != d1 else float(t0)


CHECKS = ("saturated_response",)


def with_saturation(design, variant, a, band: float):  # type: ignore[no-untyped-def]
    """``a`` with its saturated responses, or why they are missing (n/a or undecided)."""
    import dataclasses
    from types import MappingProxyType

    from .undecided import NUMERIC_ERRORS, has_nan

    na, undecided, errors = dict(a.not_applicable), dict(a.undecided), dict(a.errors)
    why = None
    if design.actuator is None:
        na["saturated_response"] = "the design has no [actuator] table"
    elif variant.measured is not None:
        na["saturated_response"] = ("a measured plant has no model to simulate the "
                                    "saturated loop with")
    elif a.step is None or a.curves is None:
        why = ("no linear step response to compare with: "
               + a.errors.get("step", "the closed loop is not stable"))
    else:
        try:
            with np.errstate(all="ignore"):
                sat = saturation_response(design, variant, a.step, a.curves.step,
                                          a.disturbance, band)
            if has_nan(sat.reference) or (sat.load is not None and has_nan(sat.load)):
                raise AnalysisError("the saturated simulation gave NaN (not a number)")
            return dataclasses.replace(a, saturation=sat)
        except (*NUMERIC_ERRORS, AnalysisError) as exc:
            errors["saturation"] = f"{type(exc).__name__}: {exc}"
            why = f"the saturated response could not be computed: {exc}"
    if why is not None:
        undecided["saturated_response"] = why
    return dataclasses.replace(a, not_applicable=MappingProxyType(na),
                               undecided=MappingProxyType(undecided), errors=errors)
