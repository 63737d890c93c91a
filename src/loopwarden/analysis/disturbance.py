"""Response of the plant output to a step load disturbance, exact as the reference step.

A disturbance d enters at the plant input (added to the delayed actuator signal, so the
loop's transport delay does not delay it) or at the plant output (added to y, which the
sensor then sees).  Its response is computed like the reference step
(:mod:`.time_response`):

* rational loops from the closed-loop state space d → [y, u] (every mode kept), exactly
  on a fine grid with peaks and crossings refined on the exact response;
* delay loops by the exact delay simulation, the disturbance driving the first input of
  the cut loop (:func:`.time_response.simulate_delay_runs`); its ramp run is ∫y dt;
* sampled loops at the sampling instants; the plant-input disturbance enters through the
  hold (ahead of any transport delay inside the sampled plant: the response is shifted by
  that delay, which leaves the peak and the integrals unchanged); an output disturbance
  reaches the measurement through a held copy of the sensor (exact for a step).

Integrated error [derived; Åström & Hägglund, *Advanced PID Control*, memory]: with
integral action y(∞) = 0 and ``IE = ∫y dt = C A⁻¹ x∞`` for x∞ = −A⁻¹B (continuous), or
``T·Σ y[k] = −T·C (I − A)⁻¹ x∞`` (sampled).  For a unit load at the plant input under any
stabilising controller with integral gain ki (C ≈ ki/s near s = 0), P·S ≈ 1/C ≈ s/ki and
so IE = 1/ki (the error e = −y integrates to −1/ki).  In z, Σ y[k] = (P_d·S)(z)·z/(z − 1)
at z = 1, so ``T·Σ y[k] = T/lim_{z→1}(z − 1)C(z)``: 1/ki for every discretisation whose
integrator has residue ki·T at z = 1 (zoh, Tustin, forward and backward Euler).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from ..errors import AnalysisError, IllPosedLoopError
from ..lti import FloatArray, Loop, Zpk
from ..lti_discrete import DiscreteLoop, lti_series
from .closed_loop import (
    StateSpace,
    _controller_blocks,
    _realise_chain,
    close_split,
    closed_loop_poles,
    delay_split,
)
from .results import DisturbanceResponse
from .time_response import (
    MAX_EXTENSIONS,
    PADE_ORDER,
    RationalResponse,
    _horizon,
    _mode_amplitudes,
    _pade,
    _peak,
    crossing_time,
    delay_step,
    grid_segments,
    output_of_powers,
    simulate_delay_runs,
)

__all__ = ["AT_INPUT", "AT_OUTPUT", "disturbance_split", "disturbance_transfer",
           "gain_peak", "load_response", "sampled_disturbance_loop", "sampled_load_response"]

AT_INPUT = "plant_input"
AT_OUTPUT = "plant_output"
MAX_SAMPLES = 2_000_000
MIN_SAMPLES = 200
HORIZON_TAIL_FRACTION = 0.01
#: The horizon runs until every mode is below this fraction of the band's own floor.
INTEGRAL_TAIL = 1e-3

Matrix = NDArray[np.float64]


# --------------------------------------------------------------------------- continuous
def disturbance_split(loop: Loop, at: str) -> StateSpace:
    """The loop cut at the delayed plant input with a disturbance as first input.

    Inputs ``[d, w]`` (w the delayed actuator signal, as in
    :func:`.closed_loop.delay_split`), outputs ``[y, u]`` with y the disturbed plant
    output (for ``at = "plant_output"``: the plant's own output plus d).
    """
    sp = delay_split(loop)
    b, d = sp.b.copy(), sp.d.copy()
    if at == AT_INPUT:
        # d adds to w: the same column.
        b[:, 0:1] = sp.b[:, 1:2]
        d[:, 0:1] = sp.d[:, 1:2]
        return StateSpace(sp.a, b, sp.c, d)
    if at != AT_OUTPUT:
        raise ValueError(f"unknown disturbance entry {at!r}")
    # d adds to y before the sensor: ym gains Dh·d, the sensor state Bh·d, e loses Dh·d.
    ctrl = _realise_chain(_controller_blocks(loop))
    sensor = _realise_chain((loop.sensor,))
    nc, n = ctrl.order, sp.order
    nh = sensor.order
    ih = slice(n - nh, n)
    dh = float(sensor.d[0, 0])
    b[:, 0] = 0.0
    b[:nc, 0] = -dh * ctrl.b[:, 0]
    b[ih, 0] += sensor.b[:, 0]
    d[0, 0] = 1.0
    d[1, 0] = -dh * float(ctrl.d[0, 0])
    return StateSpace(sp.a, b, sp.c, d)


def disturbance_transfer(loop: Loop, at: str) -> Zpk:
    """``P·S`` (plant input) or ``S`` (plant output), delay-free, in zpk form.

    Poles: the closed-loop poles (every mode); zeros: those of P with the poles of C and H
    (input), or the poles of C, P and H (output); the gain matched off every root.
    """
    poles = closed_loop_poles(loop)
    ctrl_poles = np.concatenate([z.poles for z in _controller_blocks(loop)])
    if at == AT_INPUT:
        zeros = np.concatenate([loop.plant.zeros, ctrl_poles, loop.sensor.poles])
    else:
        zeros = np.concatenate([ctrl_poles, loop.plant.poles, loop.sensor.poles])
    probe = 1.0 + 2.0 * float(np.max(np.abs(np.concatenate([poles, zeros, [1.0]]))))
    s0 = 0.31 * probe + 1j * probe
    value = (loop.plant(s0) if at == AT_INPUT else 1.0) / (1.0 + loop.rational(s0))
    monic = np.prod(s0 - zeros) / np.prod(s0 - poles)
    return Zpk(zeros, poles, float((value / monic).real))


def static_effect(plant: Zpk, at: str, size: float) -> float | None:
    """|size·P(0)| (|size| at the output); None when P(0) is not finite or is zero."""
    if at == AT_OUTPUT:
        return abs(size)
    if plant.origin_poles != 0:
        return None
    value = abs(size * plant.low_frequency_coefficient())
    return value if math.isfinite(value) and value > 0 else None


def load_response(loop: Loop, at: str, size: float, band: float, band_rad_s: float | None
                  ) -> DisturbanceResponse:
    """Response of y (and u) to the step disturbance ``size`` at ``at``.

    Parameters
    ----------
    loop : Loop
        A closed-loop stable continuous loop (delay allowed).
    band : float
        Recovery band as a fraction of the disturbance's static effect.
    band_rad_s : float, optional
        Highest disturbance frequency for the |P·S| (|S|) peak.
    """
    if not band > 0:
        raise AnalysisError(f"settling band must be positive, got {band}")
    if not loop.has_delay and np.max(closed_loop_poles(loop).real, initial=-1.0) >= 0:
        raise AnalysisError("the closed loop is not stable: no disturbance response")
    cl = close_split(disturbance_split(loop, at))
    y_resp = RationalResponse(cl.a, cl.b, cl.c[0:1], float(cl.d[0, 0]))
    u_resp = RationalResponse(cl.a, cl.b, cl.c[1:2], float(cl.d[1, 0]))
    try:
        y_inf = y_resp.final_value                     # the delay does not change it
    except np.linalg.LinAlgError as exc:
        raise AnalysisError("the closed loop has a pole at s = 0") from exc
    if loop.has_delay:
        padded = Loop(plant=loop.plant * _pade(loop.delay_s, PADE_ORDER),
                      controller=loop.controller, sensor=loop.sensor, stages=loop.stages)
        g = disturbance_transfer(padded, at)
    else:
        g = disturbance_transfer(loop, at)
    poles, amp = _mode_amplitudes(g)
    scale = max(abs(y_inf), float(np.max(amp, initial=0.0)), 1e-300)
    # Long enough that the integrals' tails are negligible, not only the band's.
    horizon = _horizon(poles, amp, scale, band * INTEGRAL_TAIL, None)
    static = static_effect(loop.plant, at, 1.0)
    for _ in range(MAX_EXTENSIONS + 1):
        if loop.has_delay:
            h, steps = delay_step(loop, horizon, poles, amp, scale, band)
            t, y2, up, um = simulate_delay_runs(disturbance_split(loop, at), loop.delay_s,
                                                h, steps)
            y, ramp = y2[:, 0], y2[:, 1]
            u_peak = float(max(np.max(np.abs(up[:, 0])), np.max(np.abs(um[:, 0]))))
            exact = slope = None
        else:
            t, y, _ = y_resp.on_segments(grid_segments(g, horizon, scale, band))
            _, u, _ = u_resp.on_segments(grid_segments(g, horizon, scale, band))
            u_peak = float(np.max(np.abs(u)))
            ramp = None
            exact, slope = y_resp.step_at, y_resp.step_slope_at
        peak, peak_t = _signed_peak(t, y, exact, slope)
        level = band * (static if static is not None else peak)
        recovery = _recovery(t, y, y_inf, level, exact)
        tail = np.abs(y[t >= 0.8 * t[-1]] - y_inf)
        if recovery <= 0.75 * t[-1] and tail.max(initial=0.0) <= 0.5 * level:
            break
        horizon *= 2.0
    else:
        raise AnalysisError(f"the disturbance response has not settled within "
                            f"{horizon / 2:.4g} s")
    if abs(y_inf) > 1e-9 * max(peak, 1e-300):
        ie = math.copysign(math.inf, y_inf)
        iae = math.inf
    elif ramp is not None:
        ie = float(ramp[-1])                           # the ramp run is ∫y dt, exactly
        iae = _integral_abs(t, y)
    else:
        ie = float((cl.c[0:1] @ np.linalg.solve(cl.a, y_resp._x_inf))[0, 0]) if cl.order \
            else 0.0
        iae = _integral_abs(t, y)
    if peak_t is not None and abs(y_inf) > 0 and peak <= abs(y_inf) * (1.0 + 1e-9):
        peak, peak_t = abs(y_inf), None                # approached only as t → ∞
    gpk, gw = gain_peak(loop, at, band_rad_s)
    k = abs(size)
    return DisturbanceResponse(
        at=at, size=size, peak=k * peak, peak_time_s=peak_t, static_deviation=size * y_inf,
        ie=size * ie, iae=k * iae, recovery_time_s=recovery, recovery_level=k * level,
        settling_band=band, gain_peak=gpk, gain_peak_rad_s=gw, band_rad_s=band_rad_s,
        horizon_s=float(t[-1]), u_peak=k * u_peak, exact_delay=loop.has_delay)


def _signed_peak(t: FloatArray, y: FloatArray, exact, slope  # type: ignore[no-untyped-def]
                 ) -> tuple[float, float | None]:
    """max |y| and its instant, refined on the exact response when given."""
    k = int(np.argmax(np.abs(y)))
    sign = 1.0 if y[k] >= 0 else -1.0
    ex = (lambda s: sign * exact(s)) if exact is not None else None
    sl = (lambda s: sign * slope(s)) if slope is not None else None
    value, when = _peak(t, sign * y, sl, ex)
    return abs(float(value)), float(when)


def _recovery(t: FloatArray, y: FloatArray, y_inf: float, level: float, exact) -> float:  # type: ignore[no-untyped-def]
    """Last exit of y from ``|y − y∞| ≤ level``, refined on ``exact`` when given."""
    outside = np.flatnonzero(np.abs(y - y_inf) > level)
    if outside.size == 0:
        return 0.0
    k = int(outside[-1])
    if k == y.size - 1:
        return math.inf
    target = y_inf + level if y[k] > y_inf else y_inf - level
    return crossing_time(t, y, target, k, exact)


def _integral_abs(t: FloatArray, y: FloatArray) -> float:
    """∫|y| dt by trapezoids, split exactly where the linear piece changes sign."""
    dt = np.diff(t)
    y0, y1 = y[:-1], y[1:]
    same = y0 * y1 >= 0
    with np.errstate(divide="ignore", invalid="ignore"):
        cross = (y0 ** 2 + y1 ** 2) / (2.0 * np.abs(y0 - y1))
    part = np.where(same, 0.5 * np.abs(y0 + y1), cross)
    return float(np.sum(part * dt))


def gain_peak(loop: Loop | DiscreteLoop, at: str, band_rad_s: float | None
              ) -> tuple[float, float]:
    """max |P·S| (``at = "plant_input"``) or |S| for ω ≤ ``band_rad_s``, and where (rad/s).

    Continuous loops on the loop's analysis grid, sampled loops on the unit circle up to
    the Nyquist frequency (P the sampled plant, hold to output); the largest grid maxima
    are refined by bounded scalar maximisation, the band edge is included exactly.
    """
    from .discrete_margins import refined_peak, unit_circle_grid
    from .frequency_grid import loop_grid

    if isinstance(loop, DiscreteLoop):
        T = loop.period_s
        plant = loop.sampled.transfer(output=1)
        w = unit_circle_grid(loop.rational) / T
        top = math.pi / T

        def value(x: FloatArray) -> FloatArray:
            z = np.exp(1j * x * T)
            num = plant(z) if at == AT_INPUT else 1.0
            return num / (1.0 + loop.rational(z))
    else:
        w = loop_grid(loop)
        top = math.inf

        def value(x: FloatArray) -> FloatArray:
            num = loop.plant.freqresp(x) if at == AT_INPUT else 1.0
            return num / (1.0 + loop.open_loop(x))
    hi = min(top, band_rad_s) if band_rad_s is not None else top
    w = w[(w > 0) & (w <= hi)]
    ends: list[tuple[float, float]] = []
    if math.isfinite(hi):
        ends.append((hi, float(np.abs(value(np.array([hi])))[0])))
    if w.size < 2:
        w = np.geomspace(hi * 1e-6, hi, 200) if math.isfinite(hi) else np.geomspace(
            1e-6, 1e6, 241)
    # ω = 0 (a finite limit, or 0 / inf): taken six decades below the grid.
    ends.append((0.0, float(np.abs(value(np.array([w[0] * 1e-6])))[0])))
    with np.errstate(all="ignore"):
        return refined_peak(np.abs, w, value, tuple(ends))


# --------------------------------------------------------------------------- sampled
def sampled_disturbance_loop(loop: DiscreteLoop, at: str, sensor: Zpk | None = None
                             ) -> StateSpace:
    """The sampled closed loop d → [y, u] at the sampling instants, every mode kept.

    The plant-input disturbance is held like u (``u + d`` enters the sampled plant).  The
    output disturbance adds to y and reaches the measurement through the (continuous)
    ``sensor``: a copy of the sensor driven by d, sampled through a zero-order hold, which
    is exact for a step (d is constant over every period).  As in the continuous model,
    the sensor's transport delay is part of the loop delay at the plant input.
    """
    ac, bc, cc, dc = lti_series(loop.stages or (loop.controller,))
    sp = loop.sampled
    ap, bp, cp, dp = sp.a, sp.b, sp.c, sp.d
    if at == AT_OUTPUT:
        a_s, b_s, c_s, d_s = _held_sensor(sensor, loop.period_s)
    else:
        a_s, b_s, c_s, d_s = np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), 0.0
    nc, npl, ns = ac.shape[0], ap.shape[0], a_s.shape[0]
    dc0, dm, dy = float(dc[0, 0]), float(dp[0, 0]), float(dp[1, 0])
    q = 1.0 + dc0 * dm
    if abs(q) < 1e-12:
        raise IllPosedLoopError("the sampled loop is not well posed: 1 + L(∞) = 0")
    # ym = Cym xp + Dym u + Cs xs + Ds d (Cs, Ds: the sensor copy; zero for a load at the
    # plant input);  u = Cc xc − Dc ym  →  u = ku·x + kd·d.
    ku = np.hstack([cc, -dc0 * cp[0:1], -dc0 * c_s]) / q
    kd = -dc0 * (dm + d_s) / q if at == AT_INPUT else -dc0 * d_s / q
    into_plant = kd + 1.0 if at == AT_INPUT else kd
    e_x = np.hstack([np.zeros((1, nc)), -cp[0:1], -c_s]) - dm * ku
    e_d = -dm * into_plant - d_s
    n = nc + npl + ns
    a = np.zeros((n, n))
    b = np.zeros((n, 1))
    a[:nc, :nc] = ac
    a[:nc, :] += bc @ e_x
    b[:nc] = bc * e_d
    a[nc:nc + npl, nc:nc + npl] = ap
    a[nc:nc + npl, :] += bp @ ku
    b[nc:nc + npl] = bp * into_plant
    a[nc + npl:, nc + npl:] = a_s
    b[nc + npl:] = b_s
    c_y = np.hstack([np.zeros((1, nc)), cp[1:2], np.zeros((1, ns))]) + dy * ku
    d_y = dy * into_plant + (0.0 if at == AT_INPUT else 1.0)
    return StateSpace(a, b, np.vstack([c_y, ku]), np.array([[d_y], [kd]]))


def _held_sensor(sensor: Zpk | None, period_s: float
                 ) -> tuple[Matrix, Matrix, Matrix, float]:
    """The sensor sampled through a zero-order hold: (Φ, Γ, C, D); unity when None."""
    if sensor is None:
        return np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), 1.0
    from scipy import linalg

    a, b, c, d = sensor.to_ss()
    n = a.shape[0]
    big = np.zeros((n + 1, n + 1))
    big[:n, :n] = a * period_s
    big[:n, n:] = b * period_s
    e = linalg.expm(big)
    return e[:n, :n], e[:n, n:], np.asarray(c, dtype=float), float(np.asarray(d)[0, 0])


def sampled_load_response(loop: DiscreteLoop, plant: Zpk, at: str, size: float, band: float,
                          band_rad_s: float | None, sensor: Zpk | None = None
                          ) -> DisturbanceResponse:
    """As :func:`load_response` at the sampling instants of a stable sampled loop.

    ``plant`` is the continuous plant (its P(0) scales the recovery band), ``sensor`` the
    continuous sensor (None: unity) that an output load reaches the measurement through.  Peak and
    recovery are read at the instants (recovery: the first instant after the last sample
    outside the band); ``ie = T·Σ y[k]`` exactly, ``iae = T·Σ |y[k]|`` over the horizon.
    """
    cl = sampled_disturbance_loop(loop, at, sensor)
    n = cl.order
    T = loop.period_s
    eye = np.eye(n)
    eig = np.linalg.eigvals(cl.a) if n else np.zeros(0)
    rho = float(np.max(np.abs(eig))) if n else 0.0
    if rho >= 1.0:
        raise AnalysisError("the sampled closed loop is not stable: no disturbance response")
    x_inf = np.linalg.solve(eye - cl.a, cl.b) if n else np.zeros((0, 1))
    c_y, d_y = cl.c[0:1], float(cl.d[0, 0])
    c_u, d_u = cl.c[1:2], float(cl.d[1, 0])
    y_inf = float((c_y @ x_inf)[0, 0]) + d_y if n else d_y
    u_inf = float((c_u @ x_inf)[0, 0]) + d_u if n else d_u
    static = static_effect(plant, at, 1.0)
    samples = MIN_SAMPLES
    if rho > 0:
        samples = max(samples, math.ceil(math.log(HORIZON_TAIL_FRACTION * INTEGRAL_TAIL
                                                  * band / 10.0) / math.log(rho)))
    for _ in range(MAX_EXTENSIONS + 1):
        samples = min(samples, MAX_SAMPLES)
        t = np.arange(samples + 1) * T
        # x[k] = (I − A^k) x∞ from x[0] = 0: y[k] = y∞ − C A^k x∞ (the step at k = 0 included)
        y = y_inf - _rows(cl.a, x_inf, c_y, samples + 1) if n else np.full(t.shape, d_y)
        u = u_inf - _rows(cl.a, x_inf, c_u, samples + 1) if n else np.full(t.shape, d_u)
        k_peak = int(np.argmax(np.abs(y)))
        peak = float(abs(y[k_peak]))
        level = band * (static if static is not None else peak)
        outside = np.flatnonzero(np.abs(y - y_inf) > level)
        if outside.size == 0:
            recovery = 0.0
        elif outside[-1] == y.size - 1:
            recovery = math.inf
        else:
            recovery = float(t[outside[-1] + 1])
        tail = np.abs(y[t >= 0.8 * t[-1]] - y_inf)
        if recovery <= 0.75 * t[-1] and tail.max(initial=0.0) <= 0.5 * level:
            break
        if samples >= MAX_SAMPLES:
            raise AnalysisError("the sampled disturbance response has not settled within "
                                f"{samples * T:.4g} s")
        samples *= 2
    else:
        raise AnalysisError("the sampled disturbance response has not settled within "
                            f"{samples * T:.4g} s")
    peak_t: float | None = float(t[k_peak])
    if abs(y_inf) > 1e-9 * max(peak, 1e-300):
        ie, iae = math.copysign(math.inf, y_inf), math.inf
        if peak <= abs(y_inf) * (1.0 + 1e-9):
            peak, peak_t = abs(y_inf), None
    else:
        # Σ_k y[k] = Σ_k (y∞ − C A^k x∞) = −C (I − A)⁻¹ x∞ when y∞ = 0.
        ie = -T * float((c_y @ np.linalg.solve(eye - cl.a, x_inf))[0, 0]) if n else 0.0
        # The samples after the horizon sum to IE − T·Σ y[k ≤ N] exactly; their |·| is that
        # (exact when they keep one sign, as a decayed tail does).
        iae = T * float(np.sum(np.abs(y))) + abs(ie - T * float(np.sum(y)))
    gpk, gw = gain_peak(loop, at, band_rad_s)
    k = abs(size)
    return DisturbanceResponse(
        at=at, size=size, peak=k * peak, peak_time_s=peak_t, static_deviation=size * y_inf,
        ie=size * ie, iae=k * iae, recovery_time_s=recovery, recovery_level=k * level,
        settling_band=band, gain_peak=gpk, gain_peak_rad_s=gw, band_rad_s=band_rad_s,
        horizon_s=float(t[-1]), u_peak=k * float(np.max(np.abs(u))), exact_delay=True,
        sampled=True)


def _rows(a: Matrix, x: Matrix, c: Matrix, count: int) -> FloatArray:
    """``c A^k x`` for k = 0 … count − 1."""
    return output_of_powers(a, x, c, count)[:, 0]
