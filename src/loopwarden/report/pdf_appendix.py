"""PDF review appendices (the model as read, the rule set) and the closing page."""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from typing import Any

from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, Paragraph, Preformatted, Spacer, Table, TableStyle

from .pdf_evidence import grid_table, measured_plant_text, method_text
from .pdf_style import FRAME_W, HEAD_BG, SANS, SANS_BOLD, num, text, zpk_text
from .plots import FrequencyUnit
from .review import Review

__all__ = ["appendix", "closing_page"]

#: Stage parameters that hold a frequency (kept in rad/s by the loader).
_FREQ_KEYS = ("zero", "pole", "freq")


def _params(params: Mapping[str, float | str], unit: FrequencyUnit) -> str:
    parts = []
    for key, value in params.items():
        if key in _FREQ_KEYS and isinstance(value, int | float):
            shown = f"{num(unit.show(float(value)))} {unit.label}"
            if unit.label != "rad/s":
                shown += f" ({num(float(value))} rad/s)"
            parts.append(f"{key} = {shown}")
        elif isinstance(value, int | float):
            parts.append(f"{key} = {num(float(value))}")
        else:
            parts.append(f"{key} = {value}")
    return ", ".join(parts)


def _tf(model: Any, var: str = "s") -> str:
    tf = zpk_text(model.zeros, model.poles, model.gain, var)
    return f"<font name='LW-Mono' size='7'>{text(tf)}</font>"


def _digital_controller(review: Review, st: dict[str, Any], unit: FrequencyUnit
                        ) -> list[Any]:
    """The controller as it runs: continuous stages discretised, digital stages, delay."""
    d = review.design
    sampling = d.sampling
    assert sampling is not None
    loop = d.sampled_loop(d.variants[0])        # the controller is the same for every plant
    continuous = [s for s in d.controller if s.domain == "s"]
    digital = [s for s in d.controller if s.domain == "z"]
    rows = [["Block", "How it was formed", "Transfer function in z"]]
    blocks = list(loop.stages)
    if continuous:
        names = ", ".join(f"controller[{s.index}]" for s in continuous)
        together = (" (their product, discretised together)" if len(continuous) > 1 else "")
        rows.append([text(names), f"continuous, discretised by {text(method_text(sampling, unit))}"
                     f"{together}", "C_d(z) = " + _tf(blocks.pop(0), "z")])
    for s in digital:
        rows.append([f"controller[{s.index}]", "digital, as written",
                     f"C{s.index}(z) = " + _tf(blocks.pop(0), "z")])
    if sampling.compute_delay_samples:
        n = sampling.compute_delay_samples
        rows.append(["compute delay", f"{n} sample(s) between reading the input and writing "
                                      "the output", f"z^−{n}"])
    rows.append(["<b>digital controller</b>", "the product, as the computer runs it",
                 "C(z) = " + _tf(loop.controller, "z")])
    return [Paragraph("The controller as it runs, in z", st["h3"]),
            grid_table(rows, st, (18, 32, 50))]


def appendix(review: Review, st: dict[str, Any], unit: FrequencyUnit) -> list[Any]:
    """Appendix A (model as read) and B (rule set)."""
    d = review.design
    sampling = d.sampling
    if sampling is None:
        domains = ("Transfer functions are in s with frequencies in rad/s; parameters are "
                   f"shown in the design's unit ({text(unit.label)}).")
    else:
        domains = ("The controller runs every T = "
                   f"{num(sampling.period_s)} s: digital stages and the loop are functions "
                   "of z (descending powers, z = e^(sT)); continuous stages, plant and sensor "
                   "are shown as read in s (rad/s) and then as the computer sees them, in z. "
                   f"Parameters are shown in the design's unit ({text(unit.label)}).")
    out: list[Any] = [Paragraph("A  The model as read", st["h1"]),
                      Paragraph(f"Design file {text(d.path)} (sha256 <font name='LW-Mono' "
                                f"size='7'>{d.sha256}</font>). {domains}", st["body"])]

    out.append(Paragraph("Controller stages, in signal order", st["h3"]))
    rows = [["Stage", "Type", "Parameters", "Transfer function"]]
    for s in d.controller:
        var = "z" if s.domain == "z" else "s"
        label = f"controller[{s.index}]" + ("" if s.title is None else f"<br/>{text(s.title)}")
        rows.append([label, text(s.type), text(_params(s.params, unit)),
                     f"C{s.index}({var}) = " + _tf(s.model, var)])
    out.append(grid_table(rows, st, (14, 10, 34, 42)))
    if sampling is not None:
        out += _digital_controller(review, st, unit)

    out.append(Paragraph("Plant variants", st["h3"]))
    rows = [["Variant", "Read from", "Transfer function", "Delay"]]
    for v in d.variants:
        model = ("P(s) = " + _tf(v.model) if v.measured is None else
                 measured_plant_text(v.measured, unit))
        rows.append([text(v.name), f"{text(v.where)} ({text(v.form)})", model,
                     f"{num(v.delay_s)} s"])
    out.append(grid_table(rows, st, (16, 18, 54, 12)))

    out.append(Paragraph("Sensor", st["h3"]))
    sensor = "unity (no sensor dynamics)" if d.sensor is None else f"H(s) = {_tf(d.sensor)}"
    if d.sensor_delay_s:
        sensor += f", delay {num(d.sensor_delay_s)} s"
    out.append(Paragraph(sensor, st["body"]))

    if sampling is not None:
        out.append(Paragraph("Plant, sensor and delay as the computer sees them", st["h3"]))
        out.append(Paragraph(
            "From the computer's output through the zero-order hold, the plant, the sensor "
            "and every transport delay to the sampler, exactly (matrix exponential; a delay "
            "that is not a whole number of periods included): P_d(z), in descending powers "
            "of z.", st["body"]))
        rows = [["Variant", "Sampled through the hold, in z"]]
        for v in d.variants:
            rows.append([text(v.name), "P_d(z) = " + _tf(d.sampled_loop(v).plant, "z")])
        out.append(grid_table(rows, st, (16, 84)))

    out += _nominal_loop(d, st)
    out += _requirements(d, st, unit)
    out.append(Paragraph("Design file as read", st["h3"]))
    out.append(_verbatim(d.text, st))

    out += _rule_set(review, st)
    return out


def _nominal_loop(d: Any, st: dict[str, Any]) -> list[Any]:
    """Appendix A: the open loop of the nominal plant, as the analysis uses it."""
    sampling = d.sampling
    out: list[Any] = []
    nominal_variant = d.variants[0]
    out.append(Paragraph("Loop, nominal plant", st["h3"]))
    if nominal_variant.measured is not None:
        ctrl = d.continuous_loop(nominal_variant)
        delay = nominal_variant.delay_s + d.sensor_delay_s
        h = " · H(s)" if d.sensor is not None else ""
        out.append(Paragraph(
            f"L(jω) = C(jω) · P_meas(jω){h}" + (f" · e^(−jω·{num(delay)})" if delay else "")
            + f", with C(s) = {_tf(ctrl.controller)} and P_meas the measured response "
            f"{text(nominal_variant.measured.file)}, known on its measured range only.",
            st["body"]))
    elif sampling is not None:
        loop = d.sampled_loop(nominal_variant)
        out.append(Paragraph(f"L(z) = C(z)·P_d(z) = {_tf(loop.rational, 'z')}", st["body"]))
    else:
        nominal = d.continuous_loop(nominal_variant)
        delay_text = f" · e^(−{num(nominal.delay_s)}·s)" if nominal.delay_s else ""
        out.append(Paragraph(f"L(s) = C·P·H = {_tf(nominal.rational)}{text(delay_text)}",
                             st["body"]))
    return out


def _requirements(d: Any, st: dict[str, Any], unit: FrequencyUnit) -> list[Any]:
    """Appendix A: the requirements, the limits the design tightens and its waivers."""
    out: list[Any] = []
    req = d.requirements
    items = []
    if req.reference_band_rad_s is not None:
        items.append(("reference band", f"{num(unit.show(req.reference_band_rad_s))} "
                                        f"{unit.label}"))
    if req.settling_time_s is not None:
        items.append(("settling time", f"{num(req.settling_time_s)} s"))
    if req.settling_band is not None:
        items.append(("settling band", f"{100 * req.settling_band:g} %"))
    for key, value in req.values.items():
        if key not in ("reference_band", "settling_time", "settling_band"):
            items.append((key, num(value)))
    out.append(Paragraph("Requirements", st["h3"]))
    if items:
        out.append(grid_table([["Requirement", "Value"]]
                              + [[text(k), text(v)] for k, v in items], st, (40, 60)))
    else:
        out.append(Paragraph("The design file states no requirements; the rule set's "
                             "limits apply as written.", st["body"]))
    if d.rule_limits:
        out.append(Paragraph("Limits tightened by the design file", st["h3"]))
        rows = [["Rule", "Limits"]]
        for rule_id, lims in d.rule_limits.items():
            rows.append([text(rule_id), text(", ".join(f"{k} = {num(v)}"
                                                       for k, v in lims.items()))])
        out.append(grid_table(rows, st, (40, 60)))
    if d.waivers:
        out.append(Paragraph("Waivers", st["h3"]))
        rows = [["Rule", "Variant", "Reason", "Approved by", "Expires"]]
        for w in d.waivers:
            rows.append([text(w.rule), text(w.variant or "all"), text(w.reason),
                         text(w.approved_by), w.expires.isoformat()])
        out.append(grid_table(rows, st, (18, 12, 42, 16, 12)))
    return out


def _rule_set(review: Review, st: dict[str, Any]) -> list[Any]:
    """Appendix B: the rule set, each rule with its limits, rationale and source."""
    out: list[Any] = []
    rs = review.ruleset
    out.append(CondPageBreak(70 * mm))
    out.append(Paragraph("B  The rule set", st["h1"]))
    ext = f", extends {text(', '.join(rs.extends))}" if rs.extends else ""
    out.append(Paragraph(f"<b>{text(rs.id)}</b> {text(rs.version)} — {text(rs.title)}{ext}. "
                         f"File {text(rs.path)} (sha256 <font name='LW-Mono' size='7'>"
                         f"{rs.sha256}</font>); it is embedded in this PDF as rules.toml.",
                         st["body"]))
    rows = [["Rule", "Check", "Limits", "Breach is", "Why, and where the number comes from"]]
    cols: list[list[str]] = [[r.id for r in rs.rules], [r.check for r in rs.rules],
                             ["warn_max_lower"], ["Breach"], ["number"]]
    for r in rs.rules:
        limits = ", ".join(f"{k} = {num(float(v))}" for k, v in r.limits.items()) or "—"
        rows.append([f"<b>{text(r.id)}</b><br/><font size='6.4' color='#5f6368'>"
                     f"{text(r.origin)}</font>", text(r.check), text(limits), text(r.severity),
                     f"{text(r.rationale)}<br/><font color='#5f6368'>Source: "
                     f"{text(r.source)}</font>"])
    out.append(grid_table(rows, st, (20, 17, 16, 9, 38), fit=cols,
                          fonts=(SANS_BOLD, SANS, SANS, SANS, SANS)))
    return out


def _verbatim(body: str, st: dict[str, Any]) -> Preformatted:
    # A Preformatted flowable splits across pages (a boxed table would not).
    return Preformatted(body.rstrip("\n") or " ", st["verbatim"], maxLineLength=112,
                        newLineChars="")


def closing_page(review: Review, st: dict[str, Any], embedded: Mapping[str, bytes],
                 caution: str) -> list[Any]:
    """The cautions in full, what is embedded, and how to check the file."""
    out: list[Any] = [Paragraph("Cautions", st["h1"]),
                      Paragraph(text(caution), st["caution"]),
                      Paragraph("A passing review means only that the models in the design "
                                "file meet the rules in the rule set. Models leave things out: "
                                "saturation, friction, backlash, quantisation, sampling, "
                                "resonances above the modelled band and parameter drift are "
                                "not in a linear model unless the design file puts them "
                                "there.", st["body"]),
                      Spacer(1, 4 * mm),
                      Paragraph("Evidence embedded in this file", st["h2"])]
    if embedded:
        rows = [["File", "Size", "SHA-256"]]
        for name in sorted(embedded):
            data = embedded[name]
            rows.append([text(name), f"{len(data)} bytes",
                         f"<font name='LW-Mono' size='6.8'>"
                         f"{hashlib.sha256(data).hexdigest()}</font>"])
        out.append(grid_table(rows, st, (18, 14, 68)))
    else:
        out.append(Paragraph("No files are embedded in this copy.", st["body"]))
    out.append(Paragraph("Checking this document", st["h2"]))
    if review.run.signer:
        out.append(Paragraph(f"This file is signed by <b>{text(review.run.signer)}</b> with a "
                             "PAdES signature that covers the whole file, embedded files "
                             "included. Anyone holding the signer's certificate can check it:",
                             st["body"]))
    else:
        out.append(Paragraph("<b>This copy is UNSIGNED.</b> Nothing protects it against "
                             "change; do not archive it as release evidence. A signed copy is "
                             "checked with:", st["body"]))
    cmd = ("loopwarden verify review.pdf --trust SIGNER.pem \\\n"
           "    --design DESIGN.toml --rules RULES.toml")
    box = Table([[Preformatted(cmd, st["mono"])]], colWidths=[FRAME_W])
    box.setStyle(TableStyle([("BACKGROUND", (0, 0), (-1, -1), HEAD_BG),
                             ("LEFTPADDING", (0, 0), (-1, -1), 6),
                             ("TOPPADDING", (0, 0), (-1, -1), 5),
                             ("BOTTOMPADDING", (0, 0), (-1, -1), 5)]))
    out.append(box)
    out.append(Spacer(1, 2 * mm))
    out.append(Paragraph("It passes only when there is exactly one signature, intact and "
                         "issued under the given trust certificate, covering every byte of "
                         "the file; when the embedded evidence read from the signed revision "
                         "is a loopwarden-review/1 document; and when the given design and "
                         "rule-set files hash to what that evidence records.", st["body"]))
    return out
