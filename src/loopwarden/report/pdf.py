"""The PDF review: cover, findings, evidence per variant, appendix, cautions.

:func:`render_pdf` is deterministic: the same Review and embedded files give byte-identical
bytes.  reportlab runs in invariant mode; the creation date is the review date; the
document identifier is a hash of the content; figures are PNG without metadata.  The
embedded files (review JSON, design file, rule set) go into the EmbeddedFiles name tree,
so a signature over the file covers them too.
"""

from __future__ import annotations

import hashlib
import io
from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING, Any

from reportlab.lib.pagesizes import A4
from reportlab.lib.units import mm
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import PageBreak, Paragraph, SimpleDocTemplate, Spacer, Table, TableStyle

from ..ruleset.model import Status
from .pdf_appendix import appendix, closing_page
from .pdf_evidence import alternative_section, evidence_section
from .pdf_findings import (  # noqa: F401
    FINDING_ORDER,
    _finding_widths,
    _findings,
    _findings_table,
    _limit_text,
    _na_table,
    ordered_findings,
)
from .pdf_style import (
    FRAME_W,
    HEAD_BG,
    INK,
    MARGIN_BOTTOM,
    MARGIN_TOP,
    MARGIN_X,
    MUTED,
    PAGE_H,
    PAGE_W,
    RULE,
    SANS,
    STATUS_LOOK,
    VERDICT_LOOK,
    grid_style,
    hexcolor,
    num,
    register_fonts,
    styles,
    text,
    widths,
)
from .plots import FrequencyUnit, all_variant_plots
from .review import Review

if TYPE_CHECKING:  # pragma: no cover
    from .figure_pool import FigureJob

__all__ = ["render_pdf", "CAUTION"]

CAUTION = ("This review analyses the linear models it was given. It does not replace tests "
           "on hardware, the applicable functional-safety and industry standards, or the "
           "judgement of a qualified engineer; where a controller can hurt people or "
           "equipment, local codes and licensed practice decide.")

#: MIME type and description of each embedded file the review command passes.
_EMBED_INFO = {
    "review.json": ("application/json", "Review evidence (loopwarden-review/1 JSON)"),
    "design.toml": ("application/toml", "Design file as read"),
    "rules.toml": ("application/toml", "Rule set as read"),
    "baseline.toml": ("application/toml", "Baseline design file as read"),
}


def _embed_info(name: str) -> tuple[str, str]:
    """MIME type and description of an embedded file."""
    if name in _EMBED_INFO:
        return _EMBED_INFO[name]
    if name.startswith("plant-") and name.endswith(".csv"):
        return "text/csv", "Measured frequency response of a plant variant, as read"
    if name.startswith("rules-") and name.endswith(".toml"):
        return "application/toml", "Rule set extended by the review's rule set, as read"
    return "application/octet-stream", name


def render_pdf(review: Review, *, embedded: Mapping[str, bytes],
               figures: FigureJob | None = None) -> bytes:
    """Render the review as PDF bytes, with ``embedded`` files attached.

    Parameters
    ----------
    review : Review
        The complete review; nothing is recomputed here.
    embedded : mapping of str to bytes
        Files to embed, by name (normally ``review.json``, ``design.toml``,
        ``rules.toml``).  They are attached in name order.
    figures : FigureJob, optional
        The review's figures, already being drawn (:mod:`.figure_pool`); without it they
        are drawn here.  The PDF is the same either way.

    Returns
    -------
    bytes
        The unsigned PDF.  Same inputs, same bytes.
    """
    from reportlab import rl_config

    register_fonts()
    # Binary image streams: reportlab's pure-Python ASCII85 step took a third of the time
    # and made the file 25 % larger.  (A process-wide setting; loopwarden wants it off.)
    rl_config.useA85 = 0
    body = _layout(review, embedded, figures)
    return _attach(body, review, embedded)


# --------------------------------------------------------------------------- layout
def _layout(review: Review, embedded: Mapping[str, bytes],
            job: FigureJob | None = None) -> bytes:
    st = styles()
    unit = FrequencyUnit.of(review.design)
    story: list[Any] = []
    story += _cover(review, st, unit)
    story.append(PageBreak())
    story += _findings(review, st, unit)
    figures = (job.result() if job is not None
               else all_variant_plots(review.design, review.analyses))
    for i, analysis in enumerate(review.analyses):
        story.append(PageBreak())
        story += evidence_section(review, analysis, st, unit, number=f"2.{i + 1}",
                                  plots=figures[i])
    if review.uncertainty is not None:
        from .pdf_uncertainty import uncertainty_section

        story.append(PageBreak())
        story += uncertainty_section(review, st, unit,
                                     number=f"2.{len(review.analyses) + 1}")
    if any(a.integral_alternatives for a in review.analyses):
        story.append(PageBreak())
        story += alternative_section(review, st, unit)
    story.append(PageBreak())
    story += appendix(review, st, unit)
    story.append(PageBreak())
    story += closing_page(review, st, embedded, CAUTION)

    story = _no_orphan_headings(story)
    buf = io.BytesIO()
    doc = SimpleDocTemplate(
        buf, pagesize=A4, leftMargin=MARGIN_X, rightMargin=MARGIN_X, topMargin=MARGIN_TOP,
        bottomMargin=MARGIN_BOTTOM, invariant=1,
        title=f"Control loop review: {review.design.name}",
        author=f"loopwarden {review.run.tool_version}",
        subject=f"verdict {review.verdict}; rule set {review.ruleset.id} "
                f"{review.ruleset.version}",
        creator=f"loopwarden {review.run.tool_version}",
        keywords=f"design-sha256={review.design.sha256} ruleset-sha256={review.ruleset.sha256}",
    )
    doc.build(story, canvasmaker=_canvas_class(review))
    return buf.getvalue()


def _no_orphan_headings(story: list[Any]) -> list[Any]:
    """A conditional page break before each sub-heading, so none ends a page alone.

    (reportlab's keepWithNext would move a heading *and* a long table to the next page.)
    """
    from reportlab.platypus import CondPageBreak

    out: list[Any] = []
    for item in story:
        if isinstance(item, Paragraph) and item.style.name in ("h2", "h3"):
            out.append(CondPageBreak(30 * mm))
        out.append(item)
    return out


def _canvas_class(review: Review) -> Callable[..., Canvas]:
    """A canvas that knows the page count, for the "page n of m" foot on every page."""
    st = styles()
    sig = (f"signed: {review.run.signer}" if review.run.signer else "UNSIGNED")
    head_left = f"Control loop review · {review.design.name}"
    if review.design.revision:
        head_left += f" · rev. {review.design.revision}"
    head_right = f"{review.verdict.upper()} · {review.run.date} · {sig}"
    caution = Paragraph(text(CAUTION), st["small"].clone("foot", fontSize=6.4, leading=7.9,
                                                         textColor=MUTED))

    class _PagedCanvas(Canvas):
        def __init__(self, *args: Any, **kwargs: Any) -> None:
            super().__init__(*args, **kwargs)
            self._saved: list[dict[str, Any]] = []

        def showPage(self) -> None:  # noqa: N802 - reportlab's name
            self._saved.append(dict(self.__dict__))
            self._startPage()

        def save(self) -> None:
            total = len(self._saved)
            for state in self._saved:
                self.__dict__.update(state)
                self._decorate(total)
                super().showPage()
            super().save()

        def _decorate(self, total: int) -> None:
            page = self._pageNumber
            self.saveState()
            self.setStrokeColor(RULE)
            self.setLineWidth(0.5)
            if page > 1:
                self.setFont(SANS, 7.2)
                self.setFillColor(MUTED)
                y = PAGE_H - MARGIN_TOP + 7 * mm
                self.drawString(MARGIN_X, y, head_left)
                self.setFillColor(VERDICT_LOOK[review.verdict][0] if review.verdict in
                                  VERDICT_LOOK else INK)
                self.drawRightString(PAGE_W - MARGIN_X, y, head_right)
                self.line(MARGIN_X, y - 2.2 * mm, PAGE_W - MARGIN_X, y - 2.2 * mm)
            foot_y = MARGIN_BOTTOM - 5 * mm
            self.line(MARGIN_X, foot_y, PAGE_W - MARGIN_X, foot_y)
            w, h = caution.wrap(FRAME_W - 24 * mm, 20 * mm)
            caution.drawOn(self, MARGIN_X, foot_y - 1.6 * mm - h)
            self.setFont(SANS, 7.2)
            self.setFillColor(MUTED)
            self.drawRightString(PAGE_W - MARGIN_X, foot_y - 4.2 * mm, f"page {page} of {total}")
            self.restoreState()

    return _PagedCanvas


# --------------------------------------------------------------------------- cover
def _cover(review: Review, st: dict[str, Any], unit: FrequencyUnit) -> list[Any]:
    d, rs, run = review.design, review.ruleset, review.run
    out: list[Any] = [Paragraph("CONTROL LOOP REVIEW", st["kicker"]),
                      Paragraph(text(d.name), st["title"])]
    if d.description:
        out.append(Paragraph(text(d.description), st["body"]))
    out.append(Spacer(1, 4 * mm))
    out.append(_verdict_box(review, st))
    out.append(Spacer(1, 5 * mm))

    signature = (Paragraph(f"<b>{text(run.signer)}</b> — this file carries a PAdES digital "
                           "signature over its whole content and the embedded evidence; "
                           "check it with <font name='LW-Mono'>loopwarden verify</font>.",
                           st["cell"])
                 if run.signer else
                 Paragraph("<font color='#9b0019'><b>UNSIGNED</b></font> — this file carries "
                           "no digital signature. It is a working copy, not release "
                           "evidence.", st["cell"]))
    rows = [
        ("Design", f"<b>{text(d.name)}</b>"
                   + (f" · revision {text(d.revision)}" if d.revision else " · no revision")),
        ("Design file", f"{text(d.path)}<br/><font name='LW-Mono' size='7'>sha256 "
                        f"{d.sha256}</font>"),
        ("Rule set", f"<b>{text(rs.id)}</b> {text(rs.version)} — {text(rs.title)}"
                     + (f" (extends {text(', '.join(rs.extends))})" if rs.extends else "")),
        ("Rule-set file", f"{text(rs.path)}<br/><font name='LW-Mono' size='7'>sha256 "
                          f"{rs.sha256}</font>"),
        ("Plant variants", text(", ".join(a.variant for a in review.analyses))),
        ("Frequency unit", text(unit.label)),
        ("Tool", f"loopwarden {text(run.tool_version)}"),
        ("Review date", text(run.date)),
    ]
    if run.signed_at:
        rows.append(("Signing time", text(run.signed_at.replace("T", " ").replace("Z", " UTC"))))
    data = [[Paragraph(k, st["cell_head"]), Paragraph(v, st["cell"])] for k, v in rows]
    data.append([Paragraph("Signature", st["cell_head"]), signature])
    table = Table(data, colWidths=[34 * mm, FRAME_W - 34 * mm])
    table.setStyle(TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.4, RULE),
        ("TOPPADDING", (0, 0), (-1, -1), 3.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 3.5),
        ("LEFTPADDING", (0, 0), (-1, -1), 2),
    ]))
    out.append(table)
    out.append(Spacer(1, 6 * mm))
    out.append(Paragraph("Loop figures at a glance", st["h3"]))
    out.append(_glance_table(review, st, unit))
    out.append(Spacer(1, 6 * mm))
    out.append(Paragraph("Contents", st["h3"]))
    contents = ["1  Findings", "2  Evidence per plant variant: "
                + ", ".join(a.variant for a in review.analyses)]
    if any(a.integral_alternatives for a in review.analyses):
        contents.append("3  Integral action instead of the low-frequency boost")
    contents += ["A  The model as read", "B  The rule set", "Cautions and embedded evidence"]
    for line in contents:
        out.append(Paragraph(text(line), st["small"]))
    out.append(Spacer(1, 6 * mm))
    out.append(Paragraph("Reading this review", st["h3"]))
    out.append(Paragraph(
        "Every rule of the rule set is checked on every plant variant. FAIL and ERROR "
        "findings block the release (an error is a figure that could not be computed); WARN "
        "findings do not block; a WAIVED finding names the waiver that allows it; N/A means "
        "the rule does not apply to this loop or no limit was given. Section 2 shows the "
        "evidence behind every number, the appendix the model exactly as it was read. The "
        "evidence file, the design file and the rule set are embedded in this PDF.",
        st["body"]))
    return out


def _verdict_box(review: Review, st: dict[str, Any]) -> Table:
    fg, bg = VERDICT_LOOK.get(review.verdict, (INK, HEAD_BG))
    blocking = [f for f in review.findings if f.status.blocks]
    counts = ", ".join(f"{review.count(s)} {STATUS_LOOK[s][2].lower()}" for s in Status
                       if review.count(s))
    if review.verdict == "pass":
        word = "PASS"
        sentence = (f"No finding fails ({counts}). The design meets every rule of the rule "
                    "set on every plant variant, as modelled.")
    else:
        word = "FAIL"
        names = "; ".join(f"{f.rule} ({f.variant or 'design'})" for f in blocking[:6])
        more = f" and {len(blocking) - 6} more" if len(blocking) > 6 else ""
        sentence = (f"{len(blocking)} finding{'s' if len(blocking) != 1 else ''} "
                    f"block{'s' if len(blocking) == 1 else ''} the release ({counts}): "
                    f"{names}{more}.")
    verdict = Paragraph(f"<font color='{hexcolor(fg)}'>{word}</font>", st["verdict"])
    body = Paragraph(text(sentence), st["verdict_text"])
    box = Table([[verdict, body]], colWidths=[36 * mm, FRAME_W - 36 * mm])
    box.setStyle(TableStyle([
        ("BACKGROUND", (0, 0), (-1, -1), bg),
        ("LINEBEFORE", (0, 0), (0, 0), 4, fg),
        ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
        ("TOPPADDING", (0, 0), (-1, -1), 9),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 9),
        ("LEFTPADDING", (0, 0), (0, 0), 10),
    ]))
    return box


def _glance_table(review: Review, st: dict[str, Any], unit: FrequencyUnit) -> Table:
    head = ["Variant", "Closed loop", "Phase margin", "Gain margin", "Ms", "Settling",
            "Findings"]
    data: list[list[Any]] = [[Paragraph(h, st["cell_head"]) for h in head]]
    for a in review.analyses:
        mine = [f for f in review.findings if f.variant == a.variant]
        bad = sum(1 for f in mine if f.status.blocks)
        m = a.margins
        pm = f"{num(m.phase_margin_deg)}°"
        if m.gain_crossover_rad_s is not None:
            pm += f" @ {num(unit.show(m.gain_crossover_rad_s))} {unit.label}"
        gm = f"{num(m.gain_margin_db)} dB"
        if a.coverage is not None:
            # A figure the measured range leaves open is not a number (as in the JSON).
            if "gain_margin" in a.coverage.bounded:
                gm = f"≥ {gm}"
            if "gain_margin" in a.coverage.uncovered:
                gm = "not decided"
            if "phase_margin" in a.coverage.uncovered:
                pm = "not decided"
        settle = f"{num(a.step.settling_time_s)} s" if a.step is not None else "—"
        stable = "stable" if a.stability.closed_loop_stable else "UNSTABLE"
        if a.coverage is not None and "closed_loop_stability" in a.coverage.uncovered:
            stable = "not decided"
        data.append([Paragraph(text(a.variant), st["cell_bold"]), Paragraph(stable, st["cell"]),
                     Paragraph(text(pm), st["cell"]), Paragraph(text(gm), st["cell"]),
                     Paragraph("not decided" if a.coverage is not None
                               and "peak_sensitivity" in a.coverage.uncovered
                               else num(a.sensitivity.peak_sensitivity), st["cell"]),
                     Paragraph(text(settle), st["cell"]),
                     Paragraph(f"{len(mine)} checked, {bad} blocking", st["cell"])])
    table = Table(data, colWidths=widths(30, 20, 33, 22, 14, 19, 36), repeatRows=1)
    table.setStyle(grid_style())
    return table


# --------------------------------------------------------------------------- embedding
def _attach(pdf: bytes, review: Review, embedded: Mapping[str, bytes]) -> bytes:
    """Attach the evidence files and fix the metadata that reportlab cannot set."""
    from pypdf import PdfReader, PdfWriter
    from pypdf.generic import (
        ArrayObject,
        ByteStringObject,
        NameObject,
        NumberObject,
        TextStringObject,
    )

    writer = PdfWriter(clone_from=PdfReader(io.BytesIO(pdf)))
    content = hashlib.sha256(pdf)
    files = []
    for name in sorted(embedded):
        data = bytes(embedded[name])
        mime, desc = _embed_info(name)
        ef = writer.add_attachment(name, data)
        ef.subtype = NameObject("/" + mime.replace("/", "#2F"))
        ef.description = TextStringObject(desc)
        ef.size = NumberObject(len(data))
        ef.checksum = ByteStringObject(hashlib.md5(data, usedforsecurity=False).digest())
        ef.associated_file_relationship = NameObject(
            "/Data" if name.endswith(".json") else "/Source")
        files.append(ef.pdf_object.indirect_reference or ef.pdf_object)
        content.update(name.encode() + b"\0" + hashlib.sha256(data).digest())
    if files:
        # PDF 2.0 / PDF/A-3 associated files: say the attachments belong to the document.
        writer.root_object[NameObject("/AF")] = ArrayObject(files)
    date = "D:" + review.run.date.replace("-", "") + "000000Z"
    writer.add_metadata({"/CreationDate": date, "/ModDate": date,
                         "/Producer": f"loopwarden {review.run.tool_version}"})
    # A content-derived identifier: unique per document and still reproducible.
    ident = ByteStringObject(content.digest()[:16])
    writer._ID = ArrayObject([ident, ident])  # noqa: SLF001 - pypdf has no public setter
    out = io.BytesIO()
    writer.write(out)
    return out.getvalue()

