"""Checks on stability, stability margins, sensitivity peaks and the sample rate.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..analysis.results import LoopAnalysis
from ..errors import AnalysisError
from ..report.numbers import fmt, root_text
from .model import Rule

if TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load the design stack
    from ..design.model import Design
from .check_catalog import (
    LOWER,
    UPPER,
    Measurement,
    NotApplicable,
    Option,
    _check,
    _db,
    _deg,
    _freq,
)


# --------------------------------------------------------------------------- stability
@_check("closed_loop_stability", unit="", predicate=True, waivable=False,
        summary="every closed-loop pole in the open left half-plane (Nyquist count for "
                "delay loops)")
def closed_loop_stability(a: LoopAnalysis, rule: Rule, design: Design, *,
                          baseline: LoopAnalysis | None = None) -> Measurement:
    st = a.stability
    if not st.certified:
        # Roots and the argument principle disagree: neither verdict can be trusted.
        raise AnalysisError(f"the closed-loop roots of variant '{a.variant}' are not "
                            f"certified: {st.note}")
    sampled = st.domain == "z"
    how = ("closed-loop poles in z" if sampled else "closed-loop poles" if st.method == "poles"
           else f"Nyquist count, {st.open_loop_rhp_poles} open-loop RHP poles")
    region = "outside the unit circle" if sampled else "right-half-plane"
    if st.closed_loop_stable:
        value, text = "stable", f"closed loop stable ({how})"
    elif st.marginal:
        value, text = "marginal", f"closed-loop pole on the stability boundary ({how})"
    else:
        value = "unstable"
        text = f"closed loop unstable: {st.rhp_closed_loop_poles} {region} pole(s) ({how})"
    if st.note:
        text += f"; {st.note}"
    return Measurement(value=value, text=text, ok=st.closed_loop_stable, details={
        "method": st.method, "rhp_closed_loop_poles": float(st.rhp_closed_loop_poles),
        "open_loop_rhp_poles": float(st.open_loop_rhp_poles)})


@_check("internal_stability", unit="", predicate=True, waivable=False,
        summary="no unstable or imaginary-axis pole of one block cancelled by a zero of "
                "another")
def internal_stability(a: LoopAnalysis, rule: Rule, design: Design, *,
                       baseline: LoopAnalysis | None = None) -> Measurement:
    it = a.internal
    if it.internally_stable:
        text = "no unstable pole-zero cancellation between blocks"
    else:
        parts = [f"pole {root_text(c.pole)} of {c.pole_block} cancelled by zero "
                 f"{root_text(c.zero)} of {c.zero_block}" for c in it.cancellations]
        text = "internally unstable: " + ("; ".join(parts) or it.note)
    return Measurement(value="stable" if it.internally_stable else "unstable", text=text,
                       ok=it.internally_stable,
                       details={"cancellations": float(len(it.cancellations))})


# --------------------------------------------------------------------------- margins
@_check("gain_margin", needs_stable=True, unit="dB", limits=(*LOWER, "max_lower", "warn_max_lower"),
        summary="smallest gain increase to instability; gain-reduction margin of a "
                "conditionally stable loop (max_lower)")
def gain_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    m = a.margins
    gm = m.gain_margin_db
    text = (f"gain margin {fmt(gm, 'dB')} at {_freq(m.phase_crossover_rad_s)}"
            if math.isfinite(gm) else "gain margin infinite (no phase crossover above 0 dB)")
    if a.coverage is not None and "gain_margin" in a.coverage.bounded:
        text = (f"gain margin at least {fmt(gm, 'dB')}: no phase crossover in the measured "
                f"range, and |L| is {fmt(-gm, 'dB')} at its top (see the stated assumptions)")
    compare = dict.fromkeys(LOWER, gm)
    if m.gain_margin_lower_db is not None:
        compare |= {"max_lower": m.gain_margin_lower_db,
                    "warn_max_lower": m.gain_margin_lower_db}
        text += f"; gain-reduction margin {fmt(m.gain_margin_lower_db, 'dB')}"
    return Measurement(value=gm, text=text, compare=compare, details={
        "gain_margin_lower_db": m.gain_margin_lower_db,
        "phase_crossover_rad_s": m.phase_crossover_rad_s,
        "phase_crossings": float(len(m.phase_crossings))})


@_check("phase_margin", needs_stable=True, unit="deg", limits=LOWER,
        summary="smallest phase margin over all gain crossovers")
def phase_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                 baseline: LoopAnalysis | None = None) -> Measurement:
    m = a.margins
    n = len(m.gain_crossings)
    if n == 0:
        text = "no gain crossover: phase margin infinite"
    else:
        text = f"phase margin {_deg(m.phase_margin_deg)} at {_freq(m.gain_crossover_rad_s)}"
        if n > 1:
            text += f" (smallest of {n} gain crossovers)"
    return Measurement(value=m.phase_margin_deg, text=text,
                       compare=dict.fromkeys(LOWER, m.phase_margin_deg),
                       details={"gain_crossover_rad_s": m.gain_crossover_rad_s,
                                "gain_crossings": float(n)})


def _loop_delay_s(a: LoopAnalysis, design: Design) -> float:
    variant = next((v for v in design.variants if v.name == a.variant), None)
    if variant is None:
        raise AnalysisError(f"the design has no plant variant named {a.variant!r}")
    if variant.measured is not None:
        raise NotApplicable("measured plant: its dead time is part of the measured response "
                            "and not known on its own")
    delay = variant.delay_s + design.sensor_delay_s
    if design.sampling is not None:
        # The computer's own delay is dead time of the loop like any transport delay.
        delay += design.sampling.compute_delay_samples * design.sampling.period_s
    return delay


@_check("delay_margin", needs_stable=True, unit="s", limits=LOWER,
        options={"relative": Option(kind=bool, help="compare delay margin / loop delay "
                                                     "(the factor by which the dead time may "
                                                     "grow) instead of seconds")},
        summary="smallest extra transport delay to instability over all crossovers")
def delay_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                 baseline: LoopAnalysis | None = None) -> Measurement:
    dm = a.margins.delay_margin_s
    details: dict[str, float | str | None] = {"delay_margin_s": dm}
    text = f"delay margin {fmt(dm, 's')}"
    if a.margins.delay_margin_samples is not None:
        details["delay_margin_samples"] = a.margins.delay_margin_samples
        text += f" ({fmt(a.margins.delay_margin_samples)} samples)"
    value = dm
    if rule.options.get("relative"):
        delay = _loop_delay_s(a, design)
        if delay <= 0.0:
            raise NotApplicable("the loop has no transport delay to compare the delay "
                                "margin with")
        value = dm / delay
        details["loop_delay_s"] = delay
        text += f" = {fmt(value, 'x')} the loop's dead time of {fmt(delay, 's')}"
    return Measurement(value=value, text=text, compare=dict.fromkeys(LOWER, value),
                       details=details)


@_check("peak_sensitivity", needs_stable=True, unit="", limits=UPPER,
        summary="Ms = max |S(jω)|, the inverse of the smallest distance from L to −1")
def peak_sensitivity(a: LoopAnalysis, rule: Rule, design: Design, *,
                     baseline: LoopAnalysis | None = None) -> Measurement:
    s = a.sensitivity
    ms = s.peak_sensitivity
    text = f"Ms {fmt(ms)} ({fmt(_db(ms), 'dB')}) at {_freq(s.peak_sensitivity_rad_s)}"
    details: dict[str, float | str | None] = {"frequency_rad_s": s.peak_sensitivity_rad_s}
    if ms > 1.0 and math.isfinite(ms):
        # Modulus-margin bounds (Åström & Murray): what Ms alone guarantees.
        details["guaranteed_gain_margin"] = ms / (ms - 1.0)
        details["guaranteed_phase_margin_deg"] = math.degrees(2.0 * math.asin(0.5 / ms))
    return Measurement(value=ms, text=text, compare=dict.fromkeys(UPPER, ms),
                       details=details)


@_check("peak_complementary", needs_stable=True, unit="", limits=UPPER,
        summary="Mt = max |T(jω)|, the resonance peak of the closed loop")
def peak_complementary(a: LoopAnalysis, rule: Rule, design: Design, *,
                       baseline: LoopAnalysis | None = None) -> Measurement:
    s = a.sensitivity
    mt = s.peak_complementary
    text = f"Mt {fmt(mt)} ({fmt(_db(mt), 'dB')}) at {_freq(s.peak_complementary_rad_s)}"
    return Measurement(value=mt, text=text, compare=dict.fromkeys(UPPER, mt),
                       details={"frequency_rad_s": s.peak_complementary_rad_s})


@_check("disk_margin", needs_stable=True, unit="", limits=LOWER,
        summary="balanced disk margin α and the simultaneous gain/phase variation it "
                "guarantees")
def disk_margin(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    s = a.sensitivity
    text = (f"disk margin α {fmt(s.disk_margin)}: gain ×{fmt(s.disk_gain_low)} to "
            f"×{fmt(s.disk_gain_high)} or phase ±{_deg(s.disk_phase_deg)}")
    return Measurement(value=s.disk_margin, text=text,
                       compare=dict.fromkeys(LOWER, s.disk_margin),
                       details={"disk_gain_low": s.disk_gain_low,
                                "disk_gain_high": s.disk_gain_high,
                                "disk_phase_deg": s.disk_phase_deg})


# --------------------------------------------------------------------------- sampling
@_check("sample_rate", needs_stable=True, unit="x", limits=(*LOWER, *UPPER),
        summary="sample rate of a digital controller as a multiple of the closed-loop "
                "bandwidth (|T| 3 dB below its DC value)")
def sample_rate(a: LoopAnalysis, rule: Rule, design: Design, *,
                baseline: LoopAnalysis | None = None) -> Measurement:
    info = a.sampling
    if info is None:
        raise NotApplicable("continuous-time controller: no sample rate")
    ratio = info.sample_rate_ratio
    rate_hz = info.sample_rate_rad_s / (2.0 * math.pi)
    bw = info.closed_loop_bandwidth_rad_s
    if bw is None:
        text = (f"sample rate {fmt(rate_hz, 'Hz')} (period {fmt(info.period_s, 's')}): the "
                "closed-loop bandwidth reaches the Nyquist frequency, so the rate is at most "
                f"{fmt(ratio, 'x')} the bandwidth")
    else:
        text = (f"sample rate {fmt(rate_hz, 'Hz')} (period {fmt(info.period_s, 's')}) is "
                f"{fmt(ratio, 'x')} the closed-loop bandwidth {_freq(bw)}")
    text += ("; 10-30x is common practice. The review is exact at the sampling instants "
             "only: the plant output may ripple between them")
    return Measurement(value=ratio, text=text, compare=dict.fromkeys((*LOWER, *UPPER), ratio),
                       details={"period_s": info.period_s,
                                "closed_loop_bandwidth_rad_s": bw,
                                "sample_rate_rad_s": info.sample_rate_rad_s,
                                "nyquist_rad_s": info.nyquist_rad_s,
                                "compute_delay_samples": float(info.compute_delay_samples),
                                "inter_sample_note": info.note})
