"""Section 3 of the PDF evidence: the integral alternative beside the current design.
"""

from __future__ import annotations

from typing import Any

from reportlab.lib.units import mm
from reportlab.platypus import (
    Paragraph,
    Preformatted,
    Spacer,
    Table,
    TableStyle,
)

from ..analysis.results import IntegralAlternative, LoopAnalysis
from .pdf_flowables import grid_table
from .pdf_style import (
    FRAME_W,
    HEAD_BG,
    RULE,
    num,
    text,
)
from .plots import FrequencyUnit
from .review import Review


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
