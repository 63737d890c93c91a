"""Flowables shared by the PDF evidence sections: grid and pair tables, the figure
:class:`Picture` (PNG drawn as an image XObject), figures side by side.
"""

from __future__ import annotations

import math
from typing import Any

from reportlab.lib.units import inch
from reportlab.platypus import (
    Flowable,
    KeepTogether,
    Paragraph,
    Table,
    TableStyle,
)

from .pdf_style import (
    FRAME_W,
    RULE,
    ZEBRA,
    fit_widths,
    grid_style,
    num,
    text,
    widths,
)
from .plots import FrequencyUnit, Plot


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
