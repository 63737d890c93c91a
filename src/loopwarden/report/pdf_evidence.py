"""PDF review sections 2 and 3: the evidence of each plant variant and the integral-action
alternative beside the current design.  Every number is read from the LoopAnalysis."""

from __future__ import annotations

import math
from typing import Any

from reportlab.lib import colors
from reportlab.lib.units import inch, mm
from reportlab.platypus import (
    Flowable,
    KeepTogether,
    Paragraph,
    Preformatted,
    Spacer,
    Table,
    TableStyle,
)

from ..analysis.results import IntegralAlternative, LoopAnalysis, Margins, Stability
from .pdf_style import (
    FRAME_W,
    HEAD_BG,
    RULE,
    ZEBRA,
    cplx,
    fit_widths,
    grid_style,
    num,
    text,
    widths,
    zpk_text,
)
from .plots import FrequencyUnit, Plot, variant_plots
from .review import Review

__all__ = ["evidence_section", "alternative_section", "grid_table", "method_text",
           "measured_plant_text"]


def grid_table(rows: list[list[str]], st: dict[str, Any], parts: tuple[float, ...],
               *, head: bool = True, fit: list[list[str]] | None = None,
               fonts: tuple[str, ...] | None = None) -> Table:
    """A data table from rows of paragraph markup (first row is the header).

    ``fit`` gives each column's plain words that must not be broken (see
    :func:`~loopwarden.report.pdf_style.fit_widths`).
    """
    data = [[Paragraph(c, st["cell_head"] if head and i == 0 else st["cell"]) for c in row]
            for i, row in enumerate(rows)]
    col_w = fit_widths(fit, parts, fonts=fonts) if fit else widths(*parts)
    table = Table(data, colWidths=col_w, repeatRows=1 if head else 0)
    style = grid_style()
    if not head:
        style.add("BACKGROUND", (0, 0), (-1, 0), None)
    table.setStyle(style)
    return table


def _pairs_table(items: list[tuple[str, str]], st: dict[str, Any]) -> Table:
    """Label/value pairs laid out in two column pairs (reads down, then across)."""
    half = math.ceil(len(items) / 2)
    left, right = items[:half], items[half:]
    data = []
    for i in range(half):
        row = [Paragraph(text(left[i][0]), st["cell_head"]), Paragraph(left[i][1], st["cell"])]
        if i < len(right):
            row += [Paragraph(text(right[i][0]), st["cell_head"]),
                    Paragraph(right[i][1], st["cell"])]
        else:
            row += ["", ""]
        data.append(row)
    table = Table(data, colWidths=widths(23, 27, 23, 27))
    style = TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.35, RULE),
        ("TOPPADDING", (0, 0), (-1, -1), 2.2),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.2),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
    ])
    for i in range(0, half, 2):
        style.add("BACKGROUND", (0, i), (-1, i), ZEBRA)
    table.setStyle(style)
    return table


def _freq(w_rad_s: float | None, unit: FrequencyUnit) -> str:
    if w_rad_s is None:
        return "—"
    return f"{num(unit.show(w_rad_s))} {unit.label}"


class Picture(Flowable):
    """A figure's raster drawn at its print size (no PNG round trip)."""

    def __init__(self, plot: Plot) -> None:
        super().__init__()
        self.plot = plot
        self.width = plot.width_in * inch
        self.height = plot.height_in * inch

    def wrap(self, avail_width: float, avail_height: float) -> tuple[float, float]:
        return self.width, self.height

    def draw(self) -> None:
        try:
            name = _image_xobject(self.canv, self.plot.pixels)
        except AttributeError:                  # a reportlab without these internals
            from reportlab.lib.utils import ImageReader

            self.canv.drawImage(ImageReader(self.plot.pixels.image()), 0, 0,
                                width=self.width, height=self.height)
            return
        # As canvas.drawImage places an image XObject: unit square scaled to the size.
        self.canv.saveState()
        self.canv.scale(self.width, self.height)
        self.canv._code.append(f"/{name} Do")  # noqa: SLF001 - see _image_xobject
        self.canv.restoreState()


def _image_xobject(canv: Any, raster: Any) -> str:
    """Register ``raster`` as an RGB image XObject of the document once; its PDF name.

    What ``canvas.drawImage`` does for an ImageReader, with the FlateDecode stream the
    figure's drawing already made (reportlab would compress the raster again here, in the
    one process that lays out the pages, and hash it with MD5 to name it).  Uses
    reportlab's document internals (``_doc``, ``_setXObjects``, ``_formsinuse``); an
    AttributeError makes the caller fall back to ``drawImage``.
    """
    import hashlib

    from reportlab.pdfbase import pdfdoc

    stream = raster.flate_stream()
    key = "lwimg" + hashlib.sha256(stream).hexdigest()[:32]
    doc = canv._doc  # noqa: SLF001
    reg = doc.getXObjectName(key)
    if doc.idToObject.get(reg) is None:
        img = pdfdoc.PDFImageXObject(key)
        img.width, img.height = raster.width_px, raster.height_px
        img.bitsPerComponent = 8
        img.colorSpace = "DeviceRGB"
        img._filters = ("FlateDecode",)  # noqa: SLF001
        img.streamContent = stream
        img.mask = None
        canv._setXObjects(img)  # noqa: SLF001
        doc.Reference(img, reg)
        doc.addForm(key, img)
    canv._currentPageHasImages = 1  # noqa: SLF001
    canv._formsinuse.append(key)  # noqa: SLF001
    return reg


def _figure(plot: Plot, st: dict[str, Any]) -> KeepTogether:
    return KeepTogether([Picture(plot), Paragraph(text(plot.caption), st["caption"])])


def _side_by_side(a: Plot, b: Plot, st: dict[str, Any]) -> Table:
    cells = []
    for p in (a, b):
        cells.append([Picture(p), Paragraph(text(p.caption), st["caption"])])
    table = Table([cells], colWidths=[FRAME_W / 2, FRAME_W / 2])
    table.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                               ("LEFTPADDING", (0, 0), (-1, -1), 2),
                               ("RIGHTPADDING", (0, 0), (-1, -1), 2)]))
    return table


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


def measured_plant_text(measured: Any, unit: FrequencyUnit) -> str:
    """"measured frequency response: FILE (sha256 …, N points, range, declarations)"."""
    return (f"measured frequency response: <b>{text(measured.file)}</b> (sha256 "
            f"<font name='LW-Mono' size='7'>{measured.sha256}</font>, {measured.points} "
            f"points, {_freq(measured.frequency_min_rad_s, unit)} to "
            f"{_freq(measured.frequency_max_rad_s, unit)}, declared unstable poles "
            f"{measured.unstable_poles}, declared integrators {measured.integrators})")


def _plant_text(variant: Any, unit: FrequencyUnit) -> str:
    """One line saying which plant this variant is: its model, or its measured response."""
    delay = f", transport delay {num(variant.delay_s)} s" if variant.delay_s else ""
    where = "" if variant.where == "plant" else f" ({text(variant.where)})"
    if variant.measured is not None:
        return f"Plant{where}: {measured_plant_text(variant.measured, unit)}{delay}."
    model = variant.model
    plant = zpk_text(model.zeros, model.poles, model.gain)
    return (f"Plant{where}: P(s) = <font name='LW-Mono' size='7.6'>{text(plant)}</font>"
            f"{delay}.")


_METHOD_NAMES = {"tustin": "Tustin (bilinear)", "zoh": "zero-order hold (step invariant)",
                 "matched": "matched pole-zero"}


def method_text(sampling: Any, unit: FrequencyUnit) -> str:
    """How continuous stages are discretised, with the period: "Tustin …, T = 0.05 s"."""
    name = _METHOD_NAMES.get(sampling.method, sampling.method)
    if sampling.prewarp_rad_s:
        name += f" prewarped at {_freq(sampling.prewarp_rad_s, unit)}"
    return f"{name}, T = {num(sampling.period_s)} s"


#: The inter-sample caveat, printed on every sampled variant's evidence page.
BETWEEN_SAMPLES = (
    "<b>Only the sampling instants are analysed.</b> Every figure and plot for this variant "
    "describes the loop at t = kT, as the controller sees it. What the plant output does "
    "between two instants is not computed, so ripple or a hidden oscillation between "
    "samples would not show here, and disturbances above the Nyquist frequency fold back "
    "onto lower frequencies. Where the output between samples matters, check it with a "
    "continuous-time simulation or on the machine.")


def _caveat_box(body: str, st: dict[str, Any]) -> Table:
    box = Table([[Paragraph(body, st["small"])]], colWidths=[FRAME_W])
    box.setStyle(TableStyle([("BACKGROUND", (0, 0), (-1, -1), colors.HexColor("#fdf0d9")),
                             ("LINEBEFORE", (0, 0), (0, -1), 3, colors.HexColor("#8a4b00")),
                             ("LEFTPADDING", (0, 0), (-1, -1), 7),
                             ("TOPPADDING", (0, 0), (-1, -1), 4),
                             ("BOTTOMPADDING", (0, 0), (-1, -1), 4)]))
    return box


def _sampled_and_measured(a: LoopAnalysis, st: dict[str, Any],
                          unit: FrequencyUnit) -> list[Any]:
    """What sampling does to this loop, and what a measured response leaves undecided."""
    out: list[Any] = []
    sampling = a.sampling
    if sampling is not None:
        bw = sampling.closed_loop_bandwidth_rad_s
        out.append(Paragraph(
            f"Sampled loop: continuous stages discretised by "
            f"{text(method_text(sampling, unit))}; compute delay "
            f"{sampling.compute_delay_samples} sample(s), plant delay "
            f"{num(sampling.plant_delay_samples)} samples; Nyquist frequency π/T = "
            f"{_freq(sampling.nyquist_rad_s, unit)}; closed-loop bandwidth "
            f"{_freq(bw, unit) if bw is not None else 'not below the Nyquist frequency'}, "
            f"sample rate {num(sampling.sample_rate_ratio, 3)}× the bandwidth.", st["body"]))
        out.append(_caveat_box(BETWEEN_SAMPLES, st))
        out.append(Spacer(1, 2 * mm))
    coverage = a.coverage
    if coverage is not None:
        out.append(Paragraph(
            f"On the measured range |L| runs from {num(coverage.loop_gain_at_min, 3)} to "
            f"{num(coverage.loop_gain_at_max, 3)}; the loop has {coverage.integrators} "
            f"integrator(s) (controller and declared). {text(coverage.assumptions)}",
            st["body"]))
        by_reason: dict[str, list[str]] = {}
        for check, why in sorted(coverage.uncovered.items()):
            by_reason.setdefault(why, []).append(check)
        for why, checks in by_reason.items():
            out.append(Paragraph(f"<font color='#5b1a87'><b>Not decided by the measured range"
                                 f"</b></font> ({text(', '.join(checks))}): {text(why)}",
                                 st["small"]))
        if coverage.uncovered:
            out.append(Spacer(1, 2 * mm))
    return out


def _absent_figures(plots: dict[str, Plot], st: dict[str, Any]) -> list[Any]:
    """A short note for each figure that is not drawn, saying why (empty when all are)."""
    from .plots import MODEL_FIGURES

    names = {"poles": "Pole-zero map", "time": "Step and ramp responses"}
    missing = [k for k in ("poles", "time") if k not in plots]
    out: list[Any] = [Paragraph(f"<b>{names[k]}: not drawn.</b> {text(MODEL_FIGURES[k])}; "
                                "the review shows nothing it could only guess.", st["body"])
                      for k in missing]
    if out:
        out.append(Paragraph("The frequency-domain figures are drawn from the measured "
                             "response itself, on its measured range.", st["small"]))
    return out


def _figure_beside(plot: Plot, notes: list[Any], st: dict[str, Any]) -> Table:
    """A square figure with notes in the other half of the width."""
    table = Table([[[Picture(plot), Paragraph(text(plot.caption), st["caption"])], notes]],
                  colWidths=[FRAME_W / 2, FRAME_W / 2])
    table.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                               ("LEFTPADDING", (0, 0), (-1, -1), 2),
                               ("RIGHTPADDING", (0, 0), (-1, -1), 2),
                               ("TOPPADDING", (1, 0), (1, 0), 14),
                               ("BACKGROUND", (1, 0), (1, 0), ZEBRA)]))
    return table


def evidence_section(review: Review, a: LoopAnalysis, st: dict[str, Any],
                     unit: FrequencyUnit, *, number: str,
                     plots: dict[str, Plot] | None = None) -> list[Any]:
    """Section 2.n: the figures and plots of one plant variant (``plots``: its figures
    when already drawn, else drawn here)."""
    variant = next(v for v in review.design.variants if v.name == a.variant)
    out: list[Any] = [Paragraph(f"{number}  Evidence: {text(a.variant)}", st["h1"]),
                      Paragraph(_plant_text(variant, unit), st["body"])]
    out += _sampled_and_measured(a, st, unit)
    out += _key_figures(a, st, unit)
    out += _crossings(a, st, unit)
    out += _slow_pairs(a, st)
    out += _boosts(a, st, unit)
    out.append(Spacer(1, 3 * mm))
    if plots is None:
        plots = variant_plots(review.design, a)
    notes = _notes(a, st)
    # The square pair first: it fits under the tables more often than the tall Bode plot.
    if "poles" in plots:
        out.append(_side_by_side(plots["nyquist"], plots["poles"], st))
    else:
        # The half page beside the Nyquist plot holds why the other figures are absent
        # and what else was not computed.
        out.append(_figure_beside(plots["nyquist"], _absent_figures(plots, st)
                                  + _notes(a, st, compact=True), st))
        notes = []
    out.append(_figure(plots["bode"], st))
    if "time" in plots:
        out.append(_figure(plots["time"], st))
    if a.saturation is not None and a.saturation.curves is not None:
        from .plots_response import saturation_figure

        out.append(_figure(saturation_figure(a), st))
    out.append(_figure(plots["sensitivity"], st))
    # Notes last: the figures fit under the tables more often without them in between.
    return out + notes


def _notes(a: LoopAnalysis, st: dict[str, Any], *, compact: bool = False) -> list[Any]:
    """What was not computed for this variant, and what does not apply to it, with why.

    ``compact``: names only, in one paragraph (the reasons are in the findings table).
    """
    if compact:
        parts = []
        if a.errors:
            parts.append("<b>Not computed:</b> " + text("; ".join(
                f"{k} ({v})" for k, v in sorted(a.errors.items()))))
        if a.not_applicable:
            parts.append("<b>Not applicable to this loop:</b> "
                         + text(", ".join(sorted(a.not_applicable)))
                         + "; each finding in section 1 gives the reason.")
        return [Spacer(1, 2 * mm), Paragraph("<br/>".join(parts), st["small"])] if parts else []
    out: list[Any] = []
    for title, items in (("Not computed", a.errors), ("Not applicable to this loop",
                                                      a.not_applicable)):
        if items:
            out.append(Paragraph(title, st["h3"]))
            out += [Paragraph(f"<b>{text(part)}</b>: {text(why)}", st["small"])
                    for part, why in sorted(items.items())]
    return out


# --------------------------------------------------------------------------- section 3
def _compare_rows(a: LoopAnalysis, alt: IntegralAlternative) -> list[list[str]]:
    cur_m, alt_m = a.margins, alt.margins
    cur_tail = a.slow_tail.pairs if a.slow_tail is not None else ()

    def tail(pairs: tuple[Any, ...]) -> str:
        if not pairs:
            return "none"
        worst = max(pairs, key=lambda p: p.tail_time_s)
        return f"{len(pairs)}; longest tail {num(worst.tail_time_s)} s"

    def step(m: Any, attr: str, unit: str) -> str:
        return "—" if m is None else f"{num(getattr(m, attr))}{unit}"

    def opt(x: float | None) -> str:
        return "—" if x is None else f"{num(x)}"

    load: list[list[str]] = []
    if (alt.current_disturbance_ie, alt.disturbance_ie, alt.disturbance_error) != (
            None, None, None):
        why = "" if alt.disturbance_error is None else f" ({text(alt.disturbance_error)})"
        load = [["Load step IE (∫y dt)", opt(alt.current_disturbance_ie),
                 opt(alt.disturbance_ie) + why],
                ["Load step IAE (∫|y| dt)", opt(alt.current_disturbance_iae),
                 opt(alt.disturbance_iae)]]
    return [
        ["Figure", "Current design", "Integral alternative"],
        ["Closed loop", "stable" if a.stability.closed_loop_stable else "UNSTABLE",
         "stable" if alt.closed_loop_stable else "UNSTABLE"],
        ["Phase margin", f"{num(cur_m.phase_margin_deg)}°", f"{num(alt_m.phase_margin_deg)}°"],
        ["Gain margin", f"{num(cur_m.gain_margin_db)} dB", f"{num(alt_m.gain_margin_db)} dB"],
        ["Delay margin", f"{num(cur_m.delay_margin_s)} s", f"{num(alt_m.delay_margin_s)} s"],
        ["Ms / Mt", f"{num(a.sensitivity.peak_sensitivity)} / "
                    f"{num(a.sensitivity.peak_complementary)}",
         f"{num(alt.sensitivity.peak_sensitivity)} / {num(alt.sensitivity.peak_complementary)}"],
        ["System type", str(a.tracking.system_type), str(alt.tracking.system_type)],
        ["Kv (1/s)", num(a.tracking.kv), num(alt.tracking.kv)],
        ["Steady ramp error", num(a.tracking.ramp_error), num(alt.tracking.ramp_error)],
        ["Step overshoot", step(a.step, "overshoot_pct", " %"),
         step(alt.step, "overshoot_pct", " %")],
        ["Settling time", step(a.step, "settling_time_s", " s"),
         step(alt.step, "settling_time_s", " s")],
        ["Slow pairs", tail(cur_tail) if a.slow_tail is not None else "not computed",
         tail(alt.slow_pairs) if alt.slow_pairs_error is None else "not computed"],
        *load,
        ["Overall gain factor", "1", num(alt.gain_factor)
         + (f" (set by {text(alt.sizing_variant)})" if alt.sizing_variant else "")],
        ["Review limits met", "—", text(", ".join(alt.meets)) or "none"],
        ["Review limits failed", "—", text(", ".join(alt.fails)) or "none"],
    ]


def alternative_section(review: Review, st: dict[str, Any],
                        unit: FrequencyUnit) -> list[Any]:
    """Section 3: each boost stage replaced by integral action, figures side by side."""
    out: list[Any] = [
        Paragraph("3  Integral action instead of the low-frequency boost", st["h1"]),
        Paragraph("For each low-frequency boost stage the analysis moved the stage's pole to "
                  "the origin (integral action; z = 1 for a stage written in z) and re-tuned "
                  "the loop by one overall gain factor, the same for every plant variant, so "
                  "that the worst variant keeps the phase margin. The table sets the result "
                  "beside the current design on each plant variant, with the review limits "
                  "it meets and fails there; the snippet replaces the stage in the design "
                  "file.", st["body"]),
    ]
    shown: dict[int, str] = {}
    for a in review.analyses:
        for alt in a.integral_alternatives:
            stage = next((s for s in review.design.controller if s.index == alt.stage), None)
            name = stage.name if stage is not None else f"controller[{alt.stage}]"
            out.append(Paragraph(f"{text(a.variant)}: {text(name)} → integral action",
                                 st["h2"]))
            table = grid_table(_compare_rows(a, alt), st, (30, 35, 35))
            table.setStyle(TableStyle([("BACKGROUND", (2, 1), (2, -1), HEAD_BG)]))
            out.append(table)
            out.append(Spacer(1, 2 * mm))
            if shown.get(alt.stage) == alt.snippet_toml:
                out.append(Paragraph("Snippet: the same as for the first variant above.",
                                     st["small"]))
                continue
            shown[alt.stage] = alt.snippet_toml
            out.append(Paragraph("Design-file snippet", st["h3"]))
            snippet = Table([[Preformatted(alt.snippet_toml.rstrip("\n"), st["mono"])]],
                            colWidths=[FRAME_W])
            snippet.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 0.5, RULE),
                                         ("BACKGROUND", (0, 0), (-1, -1), HEAD_BG),
                                         ("LEFTPADDING", (0, 0), (-1, -1), 6),
                                         ("TOPPADDING", (0, 0), (-1, -1), 5),
                                         ("BOTTOMPADDING", (0, 0), (-1, -1), 5)]))
            out.append(snippet)
    return out
