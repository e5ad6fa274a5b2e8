"""Fonts, styles and page furniture shared by the printed reports.

Font: Bitstream Vera Sans, shipped inside the reportlab package itself
(``reportlab/fonts/Vera*.ttf``, with its licence, bitstream-vera-license.txt),
so every machine that installs the app has it.  It holds the glyphs the
reports print (µ U+00B5, Ω U+03A9, ° U+00B0, × U+00D7, ≤ U+2264, – U+2013;
a test checks them) and is embedded (subset) in every PDF.  It has no ballot
box or tick glyph: tick boxes are drawn (:class:`TickBox`).

Speed: ``rl_accel`` (ReportLab's own C accelerator, a separate package since
reportlab 4) does the number formatting and string widths; without it a
120-position sheet takes about twice as long to draw.

Every page carries a header (what the pages belong to, the print date and
"page n of m", counted per sheet when one PDF holds many) drawn by
:class:`HeaderCanvas` once the sheet's page count is known.
"""

import functools
import io

from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4, landscape
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.lib.utils import simpleSplit
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.pdfgen import canvas
from reportlab.platypus import BaseDocTemplate, Flowable, Frame, PageTemplate

FONT, FONT_BOLD, FONT_ITALIC = "RecapSans", "RecapSans-Bold", "RecapSans-Italic"
FONT_FILES = {FONT: "Vera.ttf", FONT_BOLD: "VeraBd.ttf", FONT_ITALIC: "VeraIt.ttf", "RecapSans-BoldItalic": "VeraBI.ttf"}
#: Characters the reports print beyond ASCII; the font must hold every one.
NEEDED_GLYPHS = "\u00b5\u03a9\u00b0\u00d7\u2264\u2265\u2013\u2014\u00b7\u2212\u00bd"

PAGE = landscape(A4)
MARGIN = 11 * mm
HEADER_HEIGHT = 11 * mm
FOOTER_HEIGHT = 7 * mm

INK = colors.HexColor("#1d232b")
MUTED = colors.HexColor("#5b6470")
RULE = colors.HexColor("#9aa3ad")
DANGER = colors.HexColor("#a11d1d")
DANGER_TINT = colors.HexColor("#fbeaea")
REPLACE_TINT = colors.HexColor("#f6dada")
MEASURE_TINT = colors.HexColor("#fbefcf")
HEAD_TINT = colors.HexColor("#e3e7ec")


@functools.cache
def register_fonts():
    """Register the embedded font family once per process."""
    from reportlab.lib.fonts import addMapping

    for name, filename in FONT_FILES.items():
        pdfmetrics.registerFont(TTFont(name, filename))
    addMapping(FONT, 0, 0, FONT)
    addMapping(FONT, 1, 0, FONT_BOLD)
    addMapping(FONT, 0, 1, FONT_ITALIC)
    addMapping(FONT, 1, 1, "RecapSans-BoldItalic")
    return FONT


def style(name, size=8.5, leading=None, font=FONT, color=INK, **kw):
    register_fonts()
    return ParagraphStyle(name, fontName=font, fontSize=size, leading=leading or size * 1.25, textColor=color,
                          alignment=TA_LEFT, bulletFontName=FONT, **kw)


@functools.cache
def styles():
    return {
        "title": style("title", 15, font=FONT_BOLD),
        "h2": style("h2", 10.5, font=FONT_BOLD, spaceBefore=4, spaceAfter=2),
        "h3": style("h3", 8.5, font=FONT_BOLD, spaceAfter=1),
        "body": style("body", 8.2),
        "small": style("small", 7.2, color=MUTED),
        "cell": style("cell", 7.4),
        "bullet": style("bullet", 8.0, leftIndent=8, bulletIndent=0),
        "danger": style("danger", 10.5, font=FONT_BOLD, color=DANGER),
    }


def wrap(text, width, size=7.4, font=FONT, max_lines=None):
    """Text broken into lines that fit ``width`` points, joined by newlines
    (a table cell with plain lines draws far faster than a Paragraph)."""
    lines = simpleSplit(text or "", font, size, width)
    if max_lines and len(lines) > max_lines:
        lines = lines[:max_lines]
        lines[-1] = lines[-1].rstrip(" .,;") + "\u2026"
    return "\n".join(lines)


class TickBox(Flowable):
    """An empty square to tick by hand."""

    def __init__(self, size=3.6 * mm):
        super().__init__()
        self.size = size
        self.width = self.height = size

    def draw(self):
        self.canv.setStrokeColor(INK)
        self.canv.setLineWidth(0.7)
        self.canv.rect(0, 0, self.size, self.size, stroke=1, fill=0)


class SheetStart(Flowable):
    """Zero-size marker at the start of each sheet: sets the header the pages
    of that sheet carry, and reports progress when drawn."""

    def __init__(self, key, left, right, on_draw=None):
        super().__init__()
        self.key, self.left, self.right, self.on_draw = key, left, right, on_draw
        self.width = self.height = 0

    def draw(self):
        self.canv._recap_sheet = (self.key, self.left, self.right)
        if self.on_draw:
            self.on_draw(self.key)


class HeaderCanvas(canvas.Canvas):
    """A canvas that holds back the pages of the current sheet until the
    sheet ends, then draws each page's header with "page n of m"."""

    footer = ""

    def __init__(self, *args, footer="", **kwargs):
        super().__init__(*args, **kwargs)
        self._held = []
        self._recap_sheet = ("", "", "")
        self.footer = footer

    def showPage(self):
        state = {k: v for k, v in self.__dict__.items() if k != "_held"}
        if self._held and self._held[0]["_recap_sheet"][0] != state["_recap_sheet"][0]:
            self._flush()
            self.__dict__.update(state)
        self._held.append(state)
        self._startPage()

    def _flush(self):
        held = self._held
        for n, state in enumerate(held, start=1):
            self.__dict__.update(state)
            self._draw_furniture(n, len(held))
            canvas.Canvas.showPage(self)
        self._held = []

    def save(self):
        self._flush()
        canvas.Canvas.save(self)

    def _draw_furniture(self, n, m):
        width, height = self._pagesize
        _, left, right = self._recap_sheet
        top = height - MARGIN + 1.5 * mm
        self.saveState()
        self.setFillColor(INK)
        self.setFont(FONT_BOLD, 9.5)
        self.drawString(MARGIN, top - 4 * mm, left)
        self.setFont(FONT, 8.5)
        self.drawRightString(width - MARGIN, top - 4 * mm, f"{right} \u00b7 page {n} of {m}")
        self.setStrokeColor(RULE)
        self.setLineWidth(0.6)
        self.line(MARGIN, top - 6 * mm, width - MARGIN, top - 6 * mm)
        if self.footer:
            self.setFont(FONT, 6.8)
            self.setFillColor(MUTED)
            self.drawString(MARGIN, MARGIN - 3 * mm, self.footer)
        self.restoreState()


def document(buffer, *, title, author="Recap Scheduler", subject=""):
    """A landscape A4 document with one frame inside the header and footer."""
    register_fonts()
    doc = BaseDocTemplate(buffer, pagesize=PAGE, leftMargin=MARGIN, rightMargin=MARGIN,
                          topMargin=MARGIN + HEADER_HEIGHT - 4 * mm, bottomMargin=MARGIN + FOOTER_HEIGHT - 4 * mm,
                          title=title, author=author, subject=subject, creator="Recap Scheduler")
    frame = Frame(doc.leftMargin, doc.bottomMargin, doc.width, doc.height, id="body", leftPadding=0,
                  rightPadding=0, topPadding=0, bottomPadding=0)
    doc.addPageTemplates([PageTemplate(id="page", frames=[frame])])
    return doc


def build(story, *, title, footer="", subject=""):
    """Draw ``story`` into PDF bytes."""
    buffer = io.BytesIO()
    doc = document(buffer, title=title, subject=subject)
    doc.build(story, canvasmaker=functools.partial(HeaderCanvas, footer=footer))
    return buffer.getvalue()
