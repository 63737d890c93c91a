"""Loops around a measured plant: margins, peaks and the Nyquist count on the data.

``L(jω) = C(jω)·P_meas(ω)·H(jω)·e^{−jωτ}`` is known on the measured range only, with
``P_meas`` interpolated between the measured points (linear in ln ω, magnitude in dB and
unwrapped phase; :class:`~loopwarden.design.frd.MeasuredPlant`).  Crossings and peaks
are found on the measured points subdivided 16 times (more where the delay turns the
phase fast) and refined on the interpolated response.

Nothing is extrapolated.  What lies outside the range is decided only under the
assumptions stated in :data:`ASSUMPTIONS`; a figure that they do not decide (a gain
crossover above the highest measured frequency, a phase crossover that could lie beyond
it, a stability count whose contour cannot be closed) is listed in
``FrequencyCoverage.uncovered`` and its check reports ``error``: extend the sweep.

Nyquist count (``Z = N + P``, P the declared right-half-plane poles of the plant plus
those of the controller and sensor): the winding of ``1 + L`` is summed along the
measured range and its mirror image, and the contour is closed (a) above the range, where
``|L| < 1`` keeps ``1 + L`` in the right half-plane, and (b) below it by the loop's
low-frequency asymptote ``c/s^m`` (m = controller integrators + declared plant
integrators), its phase joining the measured one the short way with ``|L|`` staying on the
side of 1 it has at the lowest frequency.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

from ..design.frd import MeasuredPlant
from ..design.model import Design, PlantVariant
from ..errors import AnalysisError
from ..lti import ComplexArray, FloatArray, Zpk
from .internal import internal_stability
from .pipeline import not_applicable
from .results import (
    FrequencyCoverage,
    InternalStability,
    Margins,
    Sensitivity,
    Stability,
    Tracking,
)
from .sensitivity import sensitivity_from_peaks
from .stability import open_loop_pole_counts

__all__ = ["ASSUMPTIONS", "MODEL_ONLY", "MeasuredFigures", "MeasuredLoop", "measured_figures",
           "measured_loop"]

ASSUMPTIONS = (
    "Outside the measured range nothing is extrapolated. Above the highest measured "
    "frequency |L| is assumed to stay below its value there (no unmeasured resonance), so "
    "1 + L stays in the right half-plane; below the lowest, the loop is assumed to follow "
    "its low-frequency asymptote c/s^m (m = controller integrators + declared plant "
    "integrators), its phase joining the measured one the short way and |L| staying on the "
    "side of 1 it has at the lowest measured frequency. The declared unstable poles are "
    "taken as the plant's open-loop right-half-plane poles.")

#: Checks that need a model of the plant, with the reason they do not apply (derived from
#: the pipeline's table of parts: what each needs, the measured loop offering no model).
MODEL_ONLY = not_applicable(frozenset(), "measured plant")
#: Checks decided by the Nyquist count or the crossings (see :func:`_coverage`).
_MARGIN_CHECKS = ("gain_margin", "phase_margin", "delay_margin", "crossover_band",
                  "peak_sensitivity", "peak_complementary", "disk_margin")
SUBDIVISIONS = 16
DELAY_STEP_RAD = 0.1
MAX_POINTS = 200_000
#: |L| at the top of the range at or below this (−60 dB): a phase crossover beyond it could
#: not matter unless an unmeasured resonance rose by 60 dB; the margin is then bounded.
NEGLIGIBLE_GAIN = 1e-3
#: |d ln|L| / d ln ω| below this over the lowest points: the low-frequency plateau.
PLATEAU_SLOPE = 0.1
_STEP_RTOL = 0.25


@dataclass(frozen=True, eq=False)
class MeasuredLoop:
    """``L = C·P_meas·H·e^{−sτ}`` on the measured range of ``plant``."""

    controller: Zpk
    sensor: Zpk
    delay_s: float
    plant: MeasuredPlant

    @property
    def known(self) -> Zpk:
        """The modelled part ``C·H`` (no delay)."""
        return self.controller * self.sensor

    def log_magnitude(self, w: FloatArray) -> FloatArray:
        lm, _ = self.plant.interpolate(w)
        known = self.known
        return lm + np.log(np.abs(known.freqresp(w)))

    def phase_rad(self, w: FloatArray) -> FloatArray:
        """Continuous phase: the controller's and sensor's factor phases, the unwrapped
        measured phase and ``−ωτ``."""
        _, ph = self.plant.interpolate(w)
        return self.known.phase_rad(w) + ph - np.asarray(w) * self.delay_s

    def value(self, w: FloatArray) -> ComplexArray:
        return np.exp(self.log_magnitude(w) + 1j * self.phase_rad(w))

    @property
    def integrators(self) -> int:
        return self.known.origin_poles + self.plant.integrators


def measured_loop(design: Design, variant: PlantVariant) -> MeasuredLoop:
    if variant.measured is None:
        raise ValueError(f"plant variant {variant.name!r} is not measured")
    ctrl = Zpk.constant(1.0)
    for st in design.controller:
        ctrl = ctrl * st.model
    sensor = design.sensor if design.sensor is not None else Zpk.constant(1.0)
    return MeasuredLoop(controller=ctrl, sensor=sensor,
                        delay_s=variant.delay_s + design.sensor_delay_s,
                        plant=variant.measured)


def analysis_grid(loop: MeasuredLoop) -> FloatArray:
    """The measured frequencies, each interval subdivided in ln ω (rad/s)."""
    w = loop.plant.frequency_rad_s
    lo, hi = w[:-1], w[1:]
    per = np.full(lo.size, SUBDIVISIONS)
    if loop.delay_s > 0:
        per = np.maximum(per, np.ceil((hi - lo) * loop.delay_s / DELAY_STEP_RAD)).astype(int)
    per = np.minimum(per, max(SUBDIVISIONS, MAX_POINTS // max(lo.size, 1)))
    parts = [np.exp(np.linspace(math.log(a), math.log(b), int(k) + 1)[:-1])
             for a, b, k in zip(lo, hi, per, strict=True)]
    parts.append(w[-1:])
    return np.unique(np.concatenate(parts))


# --------------------------------------------------------------------------- margins
def measured_margins(loop: MeasuredLoop, w: FloatArray) -> Margins:
    """Margins from the crossings inside the measured range (see the module notes)."""
    from .loop_figures import loop_margins
    from .loop_response import MeasuredResponse

    return loop_margins(MeasuredResponse(loop), w)


# --------------------------------------------------------------------------- peaks
def _edge_bounds(a: float, below_one: bool) -> tuple[float, float, float]:
    """Bounds of (|S|, |T|, |S − 1/2|) where |L| stays ≤ a < 1 (or ≥ a > 1)."""
    if below_one:
        return 1.0 / (1.0 - a), a / (1.0 - a), (1.0 + a) / (2.0 * (1.0 - a))
    return 1.0 / (a - 1.0), a / (a - 1.0), (a + 1.0) / (2.0 * (a - 1.0))


def measured_sensitivity(loop: MeasuredLoop, w: FloatArray, low_side_below_one: bool
                         ) -> tuple[Sensitivity, tuple[str, ...]]:
    """Peaks on the data, each raised to the bound that holds outside the range.

    Outside the range (under the module's assumptions) ``|L| ≤ a`` above it and ``|L|``
    stays beyond ``b`` below it, which bounds |S|, |T| and |S − 1/2| there; a reported
    peak is the larger of the in-range peak and those bounds, so it is never optimistic.
    Returns the figures and the names of those set by a bound, not by the data.
    """
    from .loop_figures import loop_peaks
    from .loop_response import MeasuredResponse

    lv = loop.value(w[[0, -1]])
    a = float(np.abs(lv[-1]))
    b = float(np.abs(lv[0]))
    high = _edge_bounds(a, True)
    low = _edge_bounds(b, low_side_below_one)
    out: list[tuple[float, float]] = []
    bounded: list[str] = []
    names = ("peak_sensitivity", "peak_complementary", "disk_margin")
    peaks = loop_peaks(MeasuredResponse(loop), w)
    for i, (name, (peak, at)) in enumerate(zip(names, peaks, strict=True)):
        edge = max(low[i], high[i])
        if edge > peak:
            peak, at = edge, (float(w[0]) if low[i] >= high[i] else float(w[-1]))
            bounded.append(name)
        out.append((peak, at))
    s_peak, t_peak, (d_max, _) = out
    return sensitivity_from_peaks(s_peak, t_peak, d_max), tuple(bounded)


# --------------------------------------------------------------------------- Nyquist
def _wrap(x: float) -> float:
    """To (−π, π]."""
    return x - 2.0 * math.pi * math.ceil((x - math.pi) / (2.0 * math.pi))


def _winding_along(loop: MeasuredLoop, w: FloatArray) -> tuple[float, float]:
    """Angle change of 1 + L along the measured range, refined; and min |1 + L|."""
    t = np.log(w)
    f = 1.0 + loop.value(w)
    for _ in range(40):
        af = np.abs(f)
        near = np.minimum(af[:-1], af[1:])
        bad = (np.abs(np.diff(f)) > _STEP_RTOL * near) & (near > 1e-8) & (np.diff(t) > 1e-13)
        if not bad.any():
            break
        mid = 0.5 * (t[:-1][bad] + t[1:][bad])
        t = np.concatenate([t, mid])
        f = np.concatenate([f, 1.0 + loop.value(np.exp(mid))])
        order = np.argsort(t, kind="stable")
        t, f = t[order], f[order]
    else:
        raise AnalysisError("the Nyquist curve of the measured loop could not be resolved")
    return float(np.sum(np.angle(f[1:] / f[:-1]))), float(np.min(np.abs(f)))


def measured_stability(loop: MeasuredLoop, w: FloatArray, open_rhp: int) -> Stability:
    """Nyquist count ``Z = N + P`` with the contour closed as the module describes.

    The caller has checked that the closures hold (``|L| < 1`` at the top of the range,
    and ``|L| > 1`` at the bottom when the loop has integrators).
    """
    m = loop.integrators
    l_min, l_max = complex(loop.value(w[:1])[0]), complex(loop.value(w[-1:])[0])
    along, min_rd = _winding_along(loop, w)
    high = -2.0 * math.atan2((1 + l_max).imag, (1 + l_max).real)
    if abs(l_min) > 1.0:
        phi = math.atan2(l_min.imag, l_min.real)
        delta = _wrap(phi + m * math.pi / 2.0)
        if abs(delta) > math.pi / 2.0:                   # negative low-frequency gain
            delta = _wrap(phi + m * math.pi / 2.0 - math.pi)
        corr = 1.0 + 1.0 / l_min
        low = 2.0 * delta - m * math.pi + 2.0 * math.atan2(corr.imag, corr.real)
    else:
        f = 1.0 + l_min
        low = 2.0 * math.atan2(f.imag, f.real)
    winding = (2.0 * along + high + low) / (2.0 * math.pi)
    marginal = min_rd <= 1e-8
    if not marginal and abs(winding - round(winding)) > 1e-6:
        raise AnalysisError(f"Nyquist winding number {winding:.6f} is not an integer")
    n_cw = -int(round(winding))
    z = n_cw + open_rhp
    if z < 0:
        raise AnalysisError(f"the Nyquist count gives N = {n_cw} with P = {open_rhp}, so "
                            f"Z = N + P = {z} < 0: the open loop must have at least {-n_cw} "
                            "right-half-plane pole(s); check the plant's declared "
                            "unstable_poles and integrators")
    note = (f"Nyquist count on the measured range {w[0]:.4g}–{w[-1]:.4g} rad/s closed "
            f"under the stated assumptions: N = {n_cw} clockwise encirclements of −1, "
            f"P = {open_rhp} (declared and modelled right-half-plane poles), Z = N + P = {z}; "
            f"{m} integrator(s) at the low-frequency end")
    if marginal:
        note += "; 1 + L vanishes on the measured range: a closed-loop root on the axis"
    return Stability(closed_loop_stable=z == 0 and not marginal, method="nyquist",
                     closed_loop_poles=(), open_loop_rhp_poles=open_rhp,
                     open_loop_imag_axis_poles=m, rhp_closed_loop_poles=z,
                     clockwise_encirclements=n_cw, marginal=marginal, note=note)


# --------------------------------------------------------------------------- coverage
def _low_slope(loop: MeasuredLoop) -> float:
    """``d ln|L| / d ln ω`` over the lowest measured points (up to 2× the lowest)."""
    w = loop.plant.frequency_rad_s
    upto = w <= 2.0 * w[0]
    k = max(int(np.sum(upto)), 2)
    x, y = np.log(w[:k]), loop.log_magnitude(w[:k])
    return float(np.polyfit(x, y, 1)[0])


def _coverage(loop: MeasuredLoop, margins: Margins, l_min: float, l_max: float,
              slope: float) -> dict[str, str]:
    """Check name → why the measured range leaves it undecided."""
    lo, hi = loop.plant.frequency_min_rad_s, loop.plant.frequency_max_rad_s
    m = loop.integrators
    out: dict[str, str] = {}
    top = (f"|L| = {l_max:.4g} ≥ 1 at the highest measured frequency {hi:.4g} rad/s: a gain "
           "crossover lies above the measured range; extend the sweep to higher frequencies")
    if l_max >= 1.0:
        for name in ("closed_loop_stability", *_MARGIN_CHECKS):
            out[name] = top
        return out
    bottom = None
    if l_min <= 1.0 and m > 0:
        bottom = (f"|L| = {l_min:.4g} ≤ 1 at the lowest measured frequency {lo:.4g} rad/s "
                  f"with {m} integrator(s): a gain crossover lies below the measured range; "
                  "extend the sweep to lower frequencies")
    elif l_min < 1.0 and abs(slope) > PLATEAU_SLOPE:
        bottom = (f"|L| = {l_min:.4g} < 1 at the lowest measured frequency {lo:.4g} rad/s and "
                  f"still changing ({20 * slope:.3g} dB/decade): a gain crossover below the "
                  "measured range cannot be excluded; extend the sweep to lower frequencies")
    if bottom is not None:
        for name in ("closed_loop_stability", *_MARGIN_CHECKS):
            out[name] = bottom
        return out
    upper = [c for c in margins.phase_crossings if c.magnitude <= 1.0]
    bound_db = -20.0 * math.log10(l_max)
    if not upper and l_max <= NEGLIGIBLE_GAIN:
        pass        # reported as "at least bound_db" (see analyze_measured)
    elif not upper:
        out["gain_margin"] = (f"no phase crossover with |L| ≤ 1 in the measured range "
                              f"{lo:.4g}–{hi:.4g} rad/s; one above it would have a gain margin "
                              f"of at least {bound_db:.3g} dB, but where it lies is not "
                              "measured: extend the sweep to higher frequencies")
    elif margins.gain_margin_db > bound_db:
        out["gain_margin"] = (f"the gain margin in the measured range is "
                              f"{margins.gain_margin_db:.3g} dB, but above the range |L| may "
                              f"still be {20 * math.log10(l_max):.3g} dB: a phase crossover "
                              "there could set a smaller margin; extend the sweep until |L| "
                              "is below −(gain margin) dB")
    return out


#: Spline and straight lines differing by more than this at a crossing: the sweep is coarse.
COARSE_DB = 0.1
COARSE_DEG = 1.0


def _coarse_sweep_notes(plant: MeasuredPlant, margins: Margins) -> list[str]:
    """Cautions where the interpolation between measured points matters at a crossing."""
    points = sorted({c.frequency_rad_s for c in margins.gain_crossings}
                    | {c.frequency_rad_s for c in margins.phase_crossings
                       if c.magnitude <= 1.0})
    if not points:
        return []
    w = np.array(points)
    lm_s, ph_s = plant.interpolate(w)
    lm_l, ph_l = plant.interpolate(w, linear=True)
    d_db = np.abs(lm_s - lm_l) * 20.0 / math.log(10.0)
    d_deg = np.degrees(np.abs(ph_s - ph_l))
    coarse = (d_db > COARSE_DB) | (d_deg > COARSE_DEG)
    return [f"Near {x:.4g} rad/s the sweep is coarse for the response there: interpolating "
            f"with a spline or with straight lines between the points differs by {db:.2g} dB "
            f"and {deg:.2g}°; measure more points there." for x, db, deg, c in
            zip(w, d_db, d_deg, coarse, strict=True) if c]


def _tracking(m: int) -> Tracking:
    """What the integrators alone decide; the constant of order m needs the plant's gain."""
    which = ("kp", "kv", "ka")
    errors = ("step_error", "ramp_error", "parabola_error")
    unknown = (which[m], errors[m]) if m < 3 else ()
    values: dict[str, float | None] = {k: (math.inf if i < m else 0.0)
                                       for i, k in enumerate(which)}
    errs: dict[str, float | None] = {e: (0.0 if i < m else math.inf)
                                     for i, e in enumerate(errors)}
    for name in unknown:
        values.pop(name, None)
        errs.pop(name, None)
    return Tracking(system_type=m, kp=values.get("kp"), kv=values.get("kv"),
                    ka=values.get("ka"), step_error=errs.get("step_error"),
                    ramp_error=errs.get("ramp_error"),
                    parabola_error=errs.get("parabola_error"), unknown=unknown)


@dataclass(frozen=True)
class MeasuredFigures:
    """What the data decide about a loop around a measured plant (see the module notes)."""

    stability: Stability
    internal: InternalStability
    margins: Margins
    sensitivity: Sensitivity
    tracking: Tracking
    coverage: FrequencyCoverage


def measured_figures(design: Design, loop: MeasuredLoop) -> MeasuredFigures:
    """Margins, peaks, the Nyquist count and the coverage of ``loop`` on its data."""
    mp = loop.plant
    kp = loop.known.poles
    if np.any((np.abs(kp.real) <= 1e-9 * np.abs(kp)) & (kp != 0)):
        raise AnalysisError("controller or sensor poles on the imaginary axis away from "
                            "s = 0 are not supported with a measured plant")
    w = analysis_grid(loop)
    l_min = float(np.exp(loop.log_magnitude(w[:1]))[0])
    l_max = float(np.exp(loop.log_magnitude(w[-1:]))[0])
    slope = _low_slope(loop)
    marg = measured_margins(loop, w)
    low_below_one = l_min < 1.0
    sens, bounded = measured_sensitivity(loop, w, low_below_one)
    uncovered = _coverage(loop, marg, l_min, l_max, slope)
    if (not any(c.magnitude <= 1.0 for c in marg.phase_crossings) and l_max <= NEGLIGIBLE_GAIN
            and "gain_margin" not in uncovered):
        # No phase crossover in range and |L| ≤ −60 dB at its top: GM ≥ −20·log10|L(ωmax)|.
        marg = dataclasses.replace(marg, gain_margin_db=-20.0 * math.log10(l_max))
        bounded = (*bounded, "gain_margin")
    rhp_known, _ = open_loop_pole_counts(loop.known)
    open_rhp = rhp_known + mp.unstable_poles
    m = loop.integrators
    stab = None
    if "closed_loop_stability" not in uncovered:
        try:
            stab = measured_stability(loop, w, open_rhp)
        except AnalysisError as exc:
            uncovered["closed_loop_stability"] = str(exc)
            for name in _MARGIN_CHECKS:
                # Margins of a loop whose stability is undecided mean nothing.
                uncovered.setdefault(name, "closed-loop stability is not decided (see "
                                           "closed_loop_stability)")
    if stab is None:
        stab = Stability(closed_loop_stable=False, method="nyquist", closed_loop_poles=(),
                         open_loop_rhp_poles=open_rhp, open_loop_imag_axis_poles=m,
                         rhp_closed_loop_poles=None, clockwise_encirclements=None,
                         note="not decided: " + uncovered["closed_loop_stability"])
    notes = [ASSUMPTIONS, *_coarse_sweep_notes(mp, marg)]
    if bounded:
        notes.append("Set by a bound that holds outside the measured range, not by a measured "
                     "crossing or peak: " + ", ".join(sorted(bounded)) + ".")
    coverage = FrequencyCoverage(
        file=mp.file, sha256=mp.sha256, frequency_min_rad_s=mp.frequency_min_rad_s,
        frequency_max_rad_s=mp.frequency_max_rad_s, points=mp.points,
        unstable_poles=mp.unstable_poles, integrators=m, loop_gain_at_min=l_min,
        loop_gain_at_max=l_max, assumptions=" ".join(notes),
        uncovered=MappingProxyType(dict(sorted(uncovered.items()))),
        bounded=tuple(sorted(bounded)),
    )
    blocks = [(st.name, st.model) for st in design.controller]
    if design.sensor is not None:
        blocks.append(("sensor", design.sensor))
    partial = internal_stability(blocks)
    intern = InternalStability(internally_stable=partial.internally_stable,
                               cancellations=partial.cancellations,
                               note="plant not checked (measured); between controller and "
                                    "sensor: " + partial.note)
    return MeasuredFigures(stability=stab, internal=intern, margins=marg, sensitivity=sens,
                           tracking=_tracking(m), coverage=coverage)
