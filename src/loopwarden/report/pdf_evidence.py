"""PDF review sections 2 and 3: the evidence of each plant variant and the integral-action
alternative beside the current design.  Every number is read from the LoopAnalysis."""

from __future__ import annotations

from typing import Any

from reportlab.lib import colors
from reportlab.lib.units import mm
from reportlab.platypus import (
    Paragraph,
    Spacer,
    Table,
    TableStyle,
)

from ..analysis.results import LoopAnalysis
from .pdf_alternative import (  # noqa: F401  (re-exported: the old import path stays valid)
    _compare_rows,
    alternative_section,
)
from .pdf_flowables import (  # noqa: F401  (re-exported: the old import path stays valid)
    Picture,
    _figure,
    _freq,
    _image_xobject,
    _pairs_table,
    _side_by_side,
    grid_table,
)
from .pdf_loop_figures import (  # noqa: F401  (re-exported: the old import path stays valid)
    _UNDECIDED_LABELS,
    MAX_LISTED_PHASE,
    UNDECIDED,
    UNKNOWN,
    _beyond_the_sweep,
    _boosts,
    _crossings,
    _delay_text,
    _key_figures,
    _margin_items,
    _measured_marks,
    _slow_pairs,
    _stability_text,
    _tracking_items,
    a_measured,
    certificate_text,
)
from .pdf_style import (
    FRAME_W,
    ZEBRA,
    num,
    text,
    zpk_text,
)
from .plots import FrequencyUnit, Plot, variant_plots
from .review import Review

__all__ = ["evidence_section", "alternative_section", "grid_table", "method_text",
           "measured_plant_text"]


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
