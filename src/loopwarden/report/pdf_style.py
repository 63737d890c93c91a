"""Fonts, colours, paragraph styles and number formatting for the PDF review.

The fonts are the DejaVu faces that ship with matplotlib, embedded as subsets: they cover
ω, ≥, ∞, ζ and the other symbols a control review needs, and match the figures' lettering.
"""

from __future__ import annotations

import math
from pathlib import Path
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.platypus import TableStyle

from ..ruleset.model import Status

SANS = "LW-Sans"
SANS_BOLD = "LW-Sans-Bold"
SANS_ITALIC = "LW-Sans-Oblique"
MONO = "LW-Mono"

INK = colors.HexColor("#1b1b1b")
MUTED = colors.HexColor("#5f6368")
RULE = colors.HexColor("#c9ced6")
ACCENT = colors.HexColor("#1f4e79")
HEAD_BG = colors.HexColor("#e9eef4")
ZEBRA = colors.HexColor("#f7f8fa")

#: Status → (text colour, cell background, word printed).
STATUS_LOOK: dict[Status, tuple[colors.Color, colors.Color, str]] = {
    Status.PASS: (colors.HexColor("#1b5e20"), colors.HexColor("#e3f1e4"), "PASS"),
    Status.WARN: (colors.HexColor("#8a4b00"), colors.HexColor("#fdf0d9"), "WARN"),
    Status.FAIL: (colors.HexColor("#9b0019"), colors.HexColor("#fbe3e6"), "FAIL"),
    Status.WAIVED: (colors.HexColor("#37474f"), colors.HexColor("#e6ebee"), "WAIVED"),
    Status.NA: (colors.HexColor("#5f6368"), colors.HexColor("#f1f1f1"), "N/A"),
    Status.ERROR: (colors.HexColor("#5b1a87"), colors.HexColor("#efe3f7"), "ERROR"),
}
VERDICT_LOOK = {
    "pass": (colors.HexColor("#1b5e20"), colors.HexColor("#e3f1e4")),
    "fail": (colors.HexColor("#9b0019"), colors.HexColor("#fbe3e6")),
}


def register_fonts() -> None:
    """Register the DejaVu faces with reportlab once per process."""
    if SANS in pdfmetrics.getRegisteredFontNames():
        return
    import matplotlib

    ttf = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    for name, file in ((SANS, "DejaVuSans.ttf"), (SANS_BOLD, "DejaVuSans-Bold.ttf"),
                       (SANS_ITALIC, "DejaVuSans-Oblique.ttf"), (MONO, "DejaVuSansMono.ttf")):
        pdfmetrics.registerFont(TTFont(name, str(ttf / file)))
    pdfmetrics.registerFontFamily(SANS, normal=SANS, bold=SANS_BOLD, italic=SANS_ITALIC,
                                  boldItalic=SANS_BOLD)


def styles() -> dict[str, ParagraphStyle]:
    """The paragraph styles of the review, by role."""
    base = ParagraphStyle("body", fontName=SANS, fontSize=8.8, leading=11.6, textColor=INK,
                          alignment=TA_LEFT, spaceAfter=4)
    return {
        "body": base,
        "small": ParagraphStyle("small", parent=base, fontSize=7.4, leading=9.4,
                                spaceAfter=0),
        "cell": ParagraphStyle("cell", parent=base, fontSize=7.6, leading=9.4, spaceAfter=0),
        "cell_bold": ParagraphStyle("cell_bold", parent=base, fontName=SANS_BOLD,
                                    fontSize=7.6, leading=9.4, spaceAfter=0),
        "cell_head": ParagraphStyle("cell_head", parent=base, fontName=SANS_BOLD,
                                    fontSize=7.4, leading=9.2, spaceAfter=0,
                                    textColor=ACCENT),
        "cell_note": ParagraphStyle("cell_note", parent=base, fontName=SANS_ITALIC,
                                    fontSize=7.0, leading=8.8, spaceAfter=0,
                                    textColor=MUTED),
        "mono": ParagraphStyle("mono", parent=base, fontName=MONO, fontSize=7.0,
                               leading=8.8, spaceAfter=0),
        "verbatim": ParagraphStyle("verbatim", parent=base, fontName=MONO, fontSize=6.8,
                                   leading=8.4, backColor=ZEBRA, borderColor=RULE,
                                   borderWidth=0.5, borderPadding=5, spaceBefore=4,
                                   spaceAfter=8, leftIndent=5, rightIndent=5),
        "caption": ParagraphStyle("caption", parent=base, fontName=SANS_ITALIC, fontSize=7.4,
                                  leading=9.4, textColor=MUTED, spaceBefore=2, spaceAfter=8),
        "h1": ParagraphStyle("h1", parent=base, fontName=SANS_BOLD, fontSize=15, leading=19,
                             textColor=ACCENT, spaceBefore=4, spaceAfter=8),
        "h2": ParagraphStyle("h2", parent=base, fontName=SANS_BOLD, fontSize=11.5,
                             leading=14.5, textColor=ACCENT, spaceBefore=10, spaceAfter=5),
        "h3": ParagraphStyle("h3", parent=base, fontName=SANS_BOLD, fontSize=9.6,
                             leading=12.2, textColor=INK, spaceBefore=7, spaceAfter=3),
        "kicker": ParagraphStyle("kicker", parent=base, fontName=SANS_BOLD, fontSize=9,
                                 leading=12, textColor=MUTED, spaceAfter=2),
        "title": ParagraphStyle("title", parent=base, fontName=SANS_BOLD, fontSize=22,
                                leading=27, textColor=INK, spaceAfter=4),
        "verdict": ParagraphStyle("verdict", parent=base, fontName=SANS_BOLD, fontSize=26,
                                  leading=30, spaceAfter=0),
        "verdict_text": ParagraphStyle("verdict_text", parent=base, fontSize=9.6,
                                       leading=12.6, spaceAfter=0),
        "caution": ParagraphStyle("caution", parent=base, fontSize=10.5, leading=15,
                                  spaceAfter=8),
    }


# --------------------------------------------------------------------------- formatting
def num(x: float | None, digits: int = 4) -> str:
    """A number with ``digits`` significant digits; ∞ for infinities, — for None."""
    if x is None:
        return "—"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if math.isnan(x):          # never produced by the analysis; shown, not hidden
        return "NaN"
    if math.isinf(x):
        return "∞" if x > 0 else "−∞"
    if x == 0:
        return "0"
    mag = math.floor(math.log10(abs(x)))
    if -4 <= mag < 6:
        decimals = max(0, digits - 1 - mag)
        text = f"{x:.{decimals}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
    else:
        text = f"{x:.{digits - 1}e}"
    return text.replace("-", "−")


def cplx(z: complex, digits: int = 4) -> str:
    """A complex number as ``a ± jb`` (just ``a`` when real)."""
    if z.imag == 0:
        return num(z.real, digits)
    sign = "+" if z.imag > 0 else "−"
    return f"{num(z.real, digits)} {sign} j{num(abs(z.imag), digits)}"


def text(s: object) -> str:
    """Escape arbitrary text for a reportlab Paragraph."""
    return escape(str(s))


def zpk_text(zeros: object, poles: object, gain: float, var: str = "s") -> str:
    """A transfer function written as gain · factors / factors, in ``var`` (s or z).

    Real roots r give ``(s + a)`` with a = −r, complex pairs give ``(s² + b·s + c)``, roots at
    the origin give ``s``.  Used only for the appendix's "model as read".
    """
    def factors(roots: object) -> list[str]:
        out: list[str] = []
        origin = 0
        for r in sorted((complex(x) for x in roots), key=abs):  # type: ignore[attr-defined]
            if r == 0:
                origin += 1
            elif r.imag == 0:
                a = -r.real
                out.append(f"({var} {'+' if a > 0 else '−'} {num(abs(a))})")
            elif r.imag > 0:
                b, c = -2.0 * r.real, abs(r) ** 2
                out.append(f"({var}² {'+' if b >= 0 else '−'} {num(abs(b))}·{var} + {num(c)})")
        if origin:
            out.insert(0, var if origin == 1 else f"{var}^{origin}")
        return out

    num_f, den_f = factors(zeros), factors(poles)
    top = "·".join(num_f)
    head = num(gain)
    top = (f"{head}·{top}" if gain != 1 else top) if top else head
    if not den_f:
        return top
    bottom = den_f[0] if len(den_f) == 1 else f"[{'·'.join(den_f)}]"
    return f"{top} / {bottom}"


# --------------------------------------------------------------------------- page and tables
PAGE_W, PAGE_H = A4
MARGIN_X = 18 * mm
MARGIN_TOP = 20 * mm
MARGIN_BOTTOM = 25 * mm
FRAME_W = PAGE_W - 2 * MARGIN_X


def grid_style() -> TableStyle:
    """The look of every data table: tinted header row, hairlines between rows."""
    return TableStyle([
        ("BACKGROUND", (0, 0), (-1, 0), HEAD_BG),
        ("LINEBELOW", (0, 0), (-1, -1), 0.35, RULE),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("TOPPADDING", (0, 0), (-1, -1), 2.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.5),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
        ("RIGHTPADDING", (0, 0), (-1, -1), 3),
    ])


def widths(*parts: float) -> list[float]:
    """Column widths in points from relative parts, filling the text width."""
    total = sum(parts)
    return [FRAME_W * p / total for p in parts]


def hexcolor(c: colors.Color) -> str:
    """``#rrggbb`` of a colour, for <font color=...> in paragraphs."""
    return "#" + c.hexval()[2:]


def value_text(value: float | str | None, unit_name: str, shown: object) -> str:
    """A measured value or limit with its unit; rad/s values in the design's unit.

    ``shown`` is the :class:`~loopwarden.report.plots.FrequencyUnit` of the design.
    """
    if value is None:
        return "—"
    if isinstance(value, str):
        return value
    if unit_name == "rad/s":
        return f"{num(shown.show(float(value)))} {shown.label}"  # type: ignore[attr-defined]
    if unit_name == "deg":
        return f"{num(float(value))}°"
    return f"{num(float(value))} {unit_name}".rstrip()


def fit_widths(columns: list[list[str]], parts: tuple[float, ...], *,
               fonts: tuple[str, ...] | None = None, size: float = 7.6) -> list[float]:
    """Column widths from relative parts, widened so that no word in a column is broken.

    ``columns`` holds the plain text of each column.  A column narrower than its longest
    word grows, taking the room from columns with slack; when there is not enough slack the
    plain proportional widths are kept (reportlab then breaks the longest words).
    """
    base = widths(*parts)
    fonts = fonts or (SANS,) * len(parts)
    pad = 7.0                                  # 2 × 3 pt cell padding and a little slack
    need = [max((pdfmetrics.stringWidth(tok, font, size) for cell in col
                 for tok in str(cell).split()), default=0.0) + pad
            for col, font in zip(columns, fonts, strict=True)]
    w = [max(b, n) for b, n in zip(base, need, strict=True)]
    excess = sum(w) - FRAME_W
    if excess <= 0:
        return [wi - excess * b / FRAME_W for wi, b in zip(w, base, strict=True)]
    slack = [max(0.0, wi - ni) for wi, ni in zip(w, need, strict=True)]
    if sum(slack) < excess:
        return base
    return [wi - excess * s / sum(slack) for wi, s in zip(w, slack, strict=True)]
