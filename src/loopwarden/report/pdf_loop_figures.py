"""Section 2 of the PDF evidence: the stability text and certificate, the key-figure
table (margins, tracking), every crossing, the slow pairs and the boost bands.
"""

from __future__ import annotations

import math
from typing import Any

from reportlab.lib.units import mm
from reportlab.platypus import (
    Paragraph,
    Spacer,
)

from ..analysis.results import LoopAnalysis, Margins, Stability
from .pdf_flowables import _freq, _pairs_table, grid_table
from .pdf_style import (
    cplx,
    num,
    text,
)
from .plots import FrequencyUnit


# --------------------------------------------------------------------------- section 2
def _stability_text(a: LoopAnalysis) -> str:
    s = a.stability
    word = "<b>stable</b>" if s.closed_loop_stable else "<font color='#9b0019'><b>UNSTABLE" \
                                                        "</b></font>"
    if a.coverage is not None and "closed_loop_stability" in a.coverage.uncovered:
        return (f"<font color='#5b1a87'><b>not decided</b></font> by the measured range "
                f"(P = {s.open_loop_rhp_poles} declared open-loop RHP poles): "
                f"{text(s.note.removeprefix('not decided: '))}")
    if s.method == "nyquist":
        how = (f"Nyquist count: N = {s.clockwise_encirclements} clockwise encirclements, "
               f"P = {s.open_loop_rhp_poles} open-loop RHP poles, "
               f"Z = {s.rhp_closed_loop_poles}")
    elif s.domain == "z":
        how = (f"{len(s.closed_loop_poles)} closed-loop poles in z, "
               f"{s.rhp_closed_loop_poles} on or outside the unit circle")
    else:
        how = (f"{len(s.closed_loop_poles)} closed-loop poles, "
               f"{s.rhp_closed_loop_poles} in the closed right half-plane")
    extra = " (a pole on the stability boundary)" if s.marginal else ""
    note = f" {text(s.note[:1].upper() + s.note[1:])}" if s.note else ""
    return f"{word}: {how}{extra}. {text(certificate_text(s))}{note}"


def certificate_text(s: Stability) -> str:
    """One sentence on how far the closed-loop roots are certified."""
    if not s.certified:
        return ("NOT CERTIFIED: the roots found and the argument principle's count "
                "disagree, so the verdict cannot be trusted.")
    if a_measured(s):
        return ""
    parts = []
    if s.search_abscissa_rad_s is not None:
        parts.append(f"{len(s.closed_loop_poles)} roots right of the search line Re s = "
                     f"{-s.search_abscissa_rad_s:.4g}, as many as the argument principle "
                     "counts there")
    elif s.unstable_roots_counted is not None:
        region = "outside the unit circle" if s.domain == "z" else "in the right half-plane"
        parts.append(f"roots polished on the exact characteristic function; "
                     f"{s.unstable_roots_counted} {region} by the argument principle, as found")
    if s.slow_roots_counted is not None:
        parts.append(f"{s.slow_roots_counted} root(s) in the slow region, counted and found")
    return ("Certified: " + "; ".join(parts) + ".") if parts else ""


def a_measured(s: Stability) -> bool:
    """A measured plant's stability comes from the Nyquist count alone (no roots)."""
    return s.method == "nyquist" and s.search_abscissa_rad_s is None


#: The checks a measured range may leave undecided → the key-figure labels they decide.
_UNDECIDED_LABELS = {
    "gain_margin": ("Gain margin", "Gain-reduction margin"),
    "phase_margin": ("Phase margin",),
    "delay_margin": ("Delay margin",),
    "peak_sensitivity": ("Peak sensitivity Ms",),
    "peak_complementary": ("Peak compl. Mt",),
    "disk_margin": ("Disk margin α",),
}
UNDECIDED = "<font color='#5b1a87'><b>not decided</b></font> by the measured range (below)"


#: Tracking fields a measured plant leaves unknown → the label shown instead of a number.
UNKNOWN = "unknown (needs the plant's low-frequency gain)"


def _delay_text(delay_s: float, period_s: float | None) -> str:
    """A delay margin in seconds and, for a sampled loop, in samples of the period."""
    shown = f"{num(delay_s)} s"
    if period_s is not None and math.isfinite(delay_s):
        shown += f" = {num(delay_s / period_s)} samples"
    return shown


def _margin_items(m: Margins, unit: FrequencyUnit,
                  period_s: float | None = None) -> list[tuple[str, str]]:
    gm = f"{num(m.gain_margin_db)} dB"
    if m.phase_crossover_rad_s is not None:
        gm += f" @ {_freq(m.phase_crossover_rad_s, unit)}"
    pm = f"{num(m.phase_margin_deg)}°"
    if m.gain_crossover_rad_s is not None:
        pm += f" @ {_freq(m.gain_crossover_rad_s, unit)}"
    lower = "—" if m.gain_margin_lower_db is None else f"{num(m.gain_margin_lower_db)} dB"
    delay = f"{num(m.delay_margin_s)} s"
    if m.delay_margin_samples is not None:
        delay += f" = {num(m.delay_margin_samples)} samples"
    elif period_s is not None:
        delay = _delay_text(m.delay_margin_s, period_s)
    return [("Gain margin", gm), ("Gain-reduction margin", lower), ("Phase margin", pm),
            ("Delay margin", delay),
            ("Crossings", f"{len(m.gain_crossings)} gain, {len(m.phase_crossings)} phase")]


def _tracking_items(a: LoopAnalysis) -> list[tuple[str, str]]:
    tr = a.tracking

    def value(name: str, unit_text: str = "") -> str:
        if name in tr.unknown:
            return "unknown"
        return f"{num(getattr(tr, name))}{unit_text}"

    items = [("System type", str(tr.system_type)),
             ("Kp / Kv / Ka", f"{value('kp')} / {value('kv', ' 1/s')} / "
                              f"{value('ka', ' 1/s²')}"),
             ("Steady-state errors", f"step {value('step_error')}, ramp "
                                     f"{value('ramp_error')}, parabola "
                                     f"{value('parabola_error')}")]
    if tr.unknown:
        items.append(("Unknown constants", f"{', '.join(tr.unknown)}: {UNKNOWN}"))
    return items


def _measured_marks(items: list[tuple[str, str]], a: LoopAnalysis) -> list[tuple[str, str]]:
    """Key figures of a measured loop: undecided ones replaced, bounded ones marked."""
    assert a.coverage is not None
    undecided = {label for check in a.coverage.uncovered
                 for label in _UNDECIDED_LABELS.get(check, ())}
    bounded = {label: check for check in a.coverage.bounded
               for label in _UNDECIDED_LABELS.get(check, ())[:1]}
    out = []
    for label, value in items:
        if label in undecided:
            value = UNDECIDED
        elif label == "Gain margin" and label in bounded:
            value = (f"at least {value} (no phase crossover in the sweep and |L| ≤ −60 dB at "
                     "its top: a bound, not a crossing)")
        elif label in bounded:
            value += " (set at an end of the sweep: a bound, not a measured peak)"
        out.append((label, value))
    return out


def _key_figures(a: LoopAnalysis, st: dict[str, Any], unit: FrequencyUnit) -> list[Any]:
    sens = a.sensitivity
    period = a.sampling.period_s if a.sampling is not None else None
    items = _margin_items(a.margins, unit, period)
    items += [
        ("Peak sensitivity Ms", f"{num(sens.peak_sensitivity)} "
                                f"({num(20 * math.log10(sens.peak_sensitivity))} dB) @ "
                                f"{_freq(sens.peak_sensitivity_rad_s, unit)}"),
        ("Peak compl. Mt", f"{num(sens.peak_complementary)} @ "
                           f"{_freq(sens.peak_complementary_rad_s, unit)}"),
        ("Disk margin α", f"{num(sens.disk_margin)}: gain {num(sens.disk_gain_low, 3)}–"
                          f"{num(sens.disk_gain_high, 3)}×, phase ±{num(sens.disk_phase_deg, 3)}°"),
    ]
    items += _tracking_items(a)
    if a.coverage is not None:
        items = _measured_marks(items, a)
    if a.step is not None:
        sm = a.step
        items += [
            ("Step overshoot", f"{num(sm.overshoot_pct)} %"
                               + (f" @ {num(sm.peak_time_s)} s" if sm.peak_time_s else "")),
            ("Rise time 10–90 %", "—" if sm.rise_time_s is None else f"{num(sm.rise_time_s)} s"),
            ("Settling time", f"{num(sm.settling_time_s)} s ({100 * sm.settling_band:g} % band, "
                              f"{num(sm.horizon_s)} s simulated"
                              + (", delay exact" if sm.exact_delay else "")
                              + (", at t = kT" if a.sampling is not None else "") + ")"),
        ]
    if a.slow_tail is not None:
        items.append(("Settling without tail",
                      f"{num(a.slow_tail.settling_time_without_tail_s)} s (with: "
                      f"{num(a.slow_tail.settling_time_s)} s)"))
    out: list[Any] = [Paragraph(f"Closed loop: {_stability_text(a)}", st["body"])]
    intern = a.internal
    if not intern.internally_stable:
        canc = "; ".join(f"pole {cplx(c.pole)} of {text(c.pole_block)} against zero "
                         f"{cplx(c.zero)} of {text(c.zero_block)}" for c in intern.cancellations)
        out.append(Paragraph(f"<font color='#9b0019'><b>Not internally stable</b></font>: "
                             f"{canc}.", st["body"]))
    out.append(_pairs_table(items, st))
    return out


#: Phase crossings listed in full up to this many; beyond, the smallest margins only.
MAX_LISTED_PHASE = 8


def _beyond_the_sweep(a: LoopAnalysis, unit: FrequencyUnit) -> list[list[str]]:
    """Rows for crossings a measured range leaves open, flagged in the crossings table."""
    from .plots import uncovered_sides

    cov = a.coverage
    if cov is None:
        return []
    rows = []
    for side in ("above", "below"):
        checks = sorted(c for c, where in uncovered_sides(a).items() if where == side)
        if not checks:
            continue
        edge = cov.frequency_max_rad_s if side == "above" else cov.frequency_min_rad_s
        kind = ("phase" if checks == ["gain_margin"] else "gain")
        rows.append([f"<font color='#9b0019'><b>{kind} crossing {side} the sweep?"
                     "</b></font>",
                     f"{'&gt;' if side == 'above' else '&lt;'} {num(unit.show(edge))}",
                     "not measured: " + text(", ".join(checks)) + " not decided", "—",
                     "unknown"])
    return rows


def _crossings(a: LoopAnalysis, st: dict[str, Any], unit: FrequencyUnit) -> list[Any]:
    m = a.margins
    rows = [["Crossing", f"Frequency ({text(unit.label)})", "Margin", "Delay margin",
             "Sets the figure"]]
    phases = list(m.phase_crossings)
    note = None
    if len(phases) > MAX_LISTED_PHASE:
        # A delay makes the phase cross −180° without end; the far ones have huge margins.
        keep = sorted(phases, key=lambda p: (p.frequency_rad_s != m.phase_crossover_rad_s,
                                             abs(p.gain_margin_db)))[:MAX_LISTED_PHASE]
        rest = [p for p in phases if p not in keep]
        phases = sorted(keep, key=lambda p: p.frequency_rad_s)
        note = (f"{len(rest)} further phase crossings not listed, between "
                f"{_freq(min(p.frequency_rad_s for p in rest), unit)} and "
                f"{_freq(max(p.frequency_rad_s for p in rest), unit)}; their gain margins "
                f"are all at least {num(min(abs(p.gain_margin_db) for p in rest), 3)} dB.")
    period = a.sampling.period_s if a.sampling is not None else None
    for g in m.gain_crossings:
        rows.append(["gain, |L| = 1", num(unit.show(g.frequency_rad_s)),
                     f"PM {num(g.phase_margin_deg)}°", _delay_text(g.delay_margin_s, period),
                     "yes" if g.frequency_rad_s == m.gain_crossover_rad_s else ""])
    for p in phases:
        rows.append(["phase, ∠L = −180°", num(unit.show(p.frequency_rad_s)),
                     f"GM {num(p.gain_margin_db)} dB (|L| = {num(p.magnitude)})", "",
                     "yes" if p.frequency_rad_s == m.phase_crossover_rad_s else ""])
    rows += _beyond_the_sweep(a, unit)
    if len(rows) == 1:
        return []
    out: list[Any] = [Paragraph("Every crossing", st["h3"]),
                      grid_table(rows, st, (28, 22, 32, 18, 14))]
    if note:
        out.append(Paragraph(text(note), st["small"]))
    return out


def _slow_pairs(a: LoopAnalysis, st: dict[str, Any]) -> list[Any]:
    if a.slow_tail is None or not a.slow_tail.pairs:
        return []
    rows = [["Slow pole", "Nearby zero", "Step residue", "Time constant", "Tail time",
             "Ramp residue", "Ramp tail"]]
    for p in a.slow_tail.pairs:
        rows.append([cplx(p.pole), cplx(p.zero), num(p.residue), f"{num(p.time_constant_s)} s",
                     f"{num(p.tail_time_s)} s", num(p.ramp_residue),
                     f"{num(p.ramp_tail_time_s)} s"])
    return [Paragraph("Slow pole-zero pairs", st["h3"]),
            Paragraph(text(a.slow_tail.criteria), st["small"]), Spacer(1, 1.5 * mm),
            grid_table(rows, st, (16, 16, 13, 14, 12, 13, 12))]


def _boosts(a: LoopAnalysis, st: dict[str, Any], unit: FrequencyUnit) -> list[Any]:
    if not a.boosts:
        return []
    rows = [["Stage", "Zero / pole", "DC boost", "≥ 2× below", "≥ 3 dB below",
             "At reference band", "Phase cost at crossover"]]
    for b in a.boosts:
        cost = "; ".join(f"{num(c.phase_cost_deg, 3)}° @ {_freq(c.crossover_rad_s, unit)} "
                         f"(zero at {num(c.zero_ratio, 3)}× ωc)" for c in b.costs) or "—"
        at_ref = ("—" if b.improvement_at_reference_band is None
                  else f"{num(b.improvement_at_reference_band, 3)}× smaller error")
        rows.append([text(b.stage_name), f"{_freq(b.zero_rad_s, unit)} / "
                                         f"{_freq(b.pole_rad_s, unit)}",
                     f"{num(b.dc_boost, 3)}×", _freq(b.band_2x_rad_s, unit),
                     _freq(b.band_3db_rad_s, unit), at_ref, cost])
    return [Paragraph("Low-frequency boost stages", st["h3"]),
            grid_table(rows, st, (18, 20, 10, 13, 13, 14, 26))]
