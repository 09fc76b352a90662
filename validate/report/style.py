"""The report's house style: fonts, paragraph styles, table looks and number formats.

Numbers are written by validate.report.numbers. A plain look of our own: one sans family (DejaVu Sans, shipped with
matplotlib, so µ, ±, ², ν and the like print everywhere), dark slate
headings, light grey rules, numbers right-aligned in tables.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from functools import lru_cache
from pathlib import Path

import matplotlib
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT, TA_RIGHT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.platypus import Flowable, Paragraph, Spacer, Table, TableStyle

PAGE_SIZE = A4
MARGIN_X = 18 * mm
MARGIN_TOP = 19 * mm
MARGIN_BOTTOM = 18 * mm
FRAME_WIDTH = PAGE_SIZE[0] - 2 * MARGIN_X

INK = colors.HexColor("#1f2a33")
ACCENT = colors.HexColor("#2f5d7c")
RULE = colors.HexColor("#b7c0c7")
HEAD_FILL = colors.HexColor("#e4eaef")
STRIPE = colors.HexColor("#f5f7f9")
GOOD = colors.HexColor("#2e6b3a")
BAD = colors.HexColor("#a02c2c")

FONT = "ReportSans"
FONT_BOLD = "ReportSans-Bold"
FONT_ITALIC = "ReportSans-Italic"
FONT_MONO = "ReportMono"

@lru_cache(maxsize=1)
def register_fonts() -> None:
    """Register DejaVu Sans (regular, bold, italic, mono) from matplotlib's data folder."""
    folder = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    files = {FONT: "DejaVuSans.ttf", FONT_BOLD: "DejaVuSans-Bold.ttf",
             FONT_ITALIC: "DejaVuSans-Oblique.ttf", FONT_MONO: "DejaVuSansMono.ttf"}
    for name, file in files.items():
        pdfmetrics.registerFont(TTFont(name, str(folder / file)))
    pdfmetrics.registerFontFamily(FONT, normal=FONT, bold=FONT_BOLD, italic=FONT_ITALIC,
                                  boldItalic=FONT_BOLD)


def _style(name: str, **kw) -> ParagraphStyle:
    base = dict(fontName=FONT, fontSize=9.5, leading=12.5, textColor=INK, alignment=TA_LEFT,
                allowWidows=0, allowOrphans=0)
    base.update(kw)
    return ParagraphStyle(name, **base)


@lru_cache(maxsize=1)
def styles() -> dict[str, ParagraphStyle]:
    register_fonts()
    return {
        "title": _style("title", fontName=FONT_BOLD, fontSize=17, leading=21, spaceAfter=4,
                        textColor=ACCENT),
        "subtitle": _style("subtitle", fontSize=10.5, leading=14, spaceAfter=2),
        "h1": _style("h1", fontName=FONT_BOLD, fontSize=13, leading=16, spaceBefore=7,
                     spaceAfter=5, textColor=ACCENT),
        "h2": _style("h2", fontName=FONT_BOLD, fontSize=10.5, leading=13.5, spaceBefore=5,
                     spaceAfter=3),
        "body": _style("body", spaceAfter=4),
        "lead": _style("lead", spaceAfter=4),  # an introduction, kept with what follows (pdf.py)
        "small": _style("small", fontSize=8, leading=10, spaceAfter=3),
        "lead_small": _style("lead_small", fontSize=8, leading=10, spaceAfter=3),  # kept with what follows
        "note": _style("note", fontName=FONT_ITALIC, fontSize=8, leading=10, spaceAfter=3,
                       textColor=colors.HexColor("#4a5560")),
        "bullet": _style("bullet", fontSize=8.5, leading=10.5, leftIndent=10, bulletIndent=0,
                         spaceAfter=2),
        "cell": _style("cell", fontSize=8, leading=9.5),
        "cell_right": _style("cell_right", fontSize=8, leading=9.5, alignment=TA_RIGHT),
        "cell_head": _style("cell_head", fontName=FONT_BOLD, fontSize=8, leading=9.5),
        "cell_head_right": _style("cell_head_right", fontName=FONT_BOLD, fontSize=8,
                                  leading=9.5, alignment=TA_RIGHT),
        "mono": _style("mono", fontName=FONT_MONO, fontSize=7, leading=9),
        "formula": _style("formula", fontName=FONT_MONO, fontSize=10, leading=13, leftIndent=12,
                          spaceBefore=2, spaceAfter=6),
    }


def escape(value: str) -> str:
    """&, < and > as entities, for reportlab's paragraph markup (what xml.sax.saxutils.escape does;
    that module is not imported because it pulls in urllib, http and ssl: about 0.08 s per run)."""
    return value.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


CODE = re.compile(r"`([^`\n]+)`")  # `repeatability`: a key as the text names it (Markdown's code span)


def _code_spans(escaped: str) -> str:
    """Backticked names in the monospaced font, the backticks themselves not printed."""
    return CODE.sub(lambda m: f'<font name="{FONT_MONO}">{m.group(1)}</font>', escaped)


def unquoted(value) -> str:
    """A message as printed in a plain cell: a pair of backticks around a name is dropped."""
    return CODE.sub(r"\1", str(value))


def text(value) -> str:
    """Plain text made safe for reportlab's paragraph markup; `name` shown in the monospaced font."""
    return _code_spans(escape(str(value)))


# A table row taller than the page stops reportlab's layout, so a cell shows at most
# CELL_LINES lines of its column's width (about 1.8 mm per character at the cell's 8 pt);
# a longer text (a provenance, an id from the inputs) is cut with a note, results.json keeps it.
CELL_LINES = 25
MM_PER_CHARACTER = 1.8


def cell_limit(width_mm: float) -> int:
    """Characters a cell of this width shows before its text is cut."""
    return max(40, int(width_mm / MM_PER_CHARACTER) * CELL_LINES)


def cell_text(value, width_mm: float = 174.0) -> str:
    """text() for a table cell, cut with a note when too long to lay out."""
    shown, limit = str(value), cell_limit(width_mm)
    if len(shown) > limit:
        shown = f"{shown[:limit]} ... [{len(shown) - limit} more characters; the whole text is in results.json]"
    return _code_spans(escape(shown))


def _one_plain_line(value: str) -> bool:
    """Text a Paragraph would set as it stands: no markup, no code span, single spaces only."""
    return (bool(value) and value == value.strip() and "  " not in value and value.isprintable() and not any(
        c in "&<>`" or (c.isspace() and c != " ") for c in value))


class CellLine(Flowable):
    """A table cell's text drawn as a Paragraph of `style` draws a single unwrapped line (same
    position, font and colour), without the Paragraph's markup parsing and line breaking, which
    cost most of the layout time of a report with thousands of cells. Text that does not fit the
    cell's width on one line is handed to a real Paragraph, which wraps it."""

    def __init__(self, value: str, style: ParagraphStyle) -> None:
        super().__init__()
        self.plain, self.style, self.text = value, style, value  # .text: the markup, as a Paragraph's
        self._line_width = pdfmetrics.stringWidth(value, style.fontName, style.fontSize)
        self._wrapped: Paragraph | None = None

    def getPlainText(self) -> str:
        return self.plain

    def wrap(self, availWidth, availHeight):
        if self._line_width <= availWidth - self.style.leftIndent - self.style.rightIndent - 1e-6:
            self._wrapped = None
            self.width, self.height = availWidth, self.style.leading
            return self.width, self.height
        self._wrapped = Paragraph(self.plain, self.style)
        return self._wrapped.wrap(availWidth, availHeight)

    def draw(self) -> None:
        if self._wrapped is not None:  # drawn in this cell's frame, as the table would draw it
            self._wrapped.canv = self.canv
            try:
                self._wrapped.draw()
            finally:
                del self._wrapped.canv
            return
        style, canvas = self.style, self.canv
        shift = 0.0  # the room left on the line goes before the text when it is right-aligned
        if style.alignment == TA_RIGHT:
            shift = self.width - style.leftIndent - style.rightIndent - self._line_width
        moves = abs(shift) > 1e-6
        canvas.saveState()  # the same operators, in the same order, as Paragraph.drawPara writes
        canvas.setFillColor(style.textColor)
        line = canvas.beginText(style.leftIndent, self.height - style.fontSize)
        line.setFont(style.fontName, style.fontSize, style.leading)
        if moves:
            line.setXPos(shift)
        line._textOut(self.plain, 1)
        if moves:
            line.setXPos(-shift)
        canvas.drawText(line)
        canvas.restoreState()


def cell(value, style: ParagraphStyle, width_mm: float = 174.0) -> Flowable:
    """A table cell of `value`: a CellLine for plain text, else a Paragraph of cell_text."""
    shown = str(value)
    quick = style.alignment in (TA_LEFT, TA_RIGHT) and not style.firstLineIndent and not style.backColor
    if quick and len(shown) <= cell_limit(width_mm) and _one_plain_line(shown):
        return CellLine(shown, style)
    return Paragraph(cell_text(value, width_mm), style)


def para(value, style: str = "body", markup: bool = False) -> Paragraph:
    return Paragraph(str(value) if markup else text(value), styles()[style])


def heading(title: str, level: int = 1) -> Paragraph:
    return Paragraph(text(title), styles()["h1" if level == 1 else "h2"])


def bullets(lines, style: str = "bullet") -> list:
    return [Paragraph(text(line), styles()[style], bulletText="•") for line in lines]


def gap(height_mm: float = 3) -> Spacer:
    return Spacer(1, height_mm * mm)


# --------------------------------------------------------------------------
# tables

def data_table(header: list[str], rows: list[list], widths_mm: Sequence[float],
               numeric: set[int] | frozenset = frozenset(), zebra: bool = True,
               extra_style: list | None = None) -> Table:
    """A table that wraps every cell, right-aligns numeric columns and repeats its header.

    `widths_mm` should add up to at most the frame width (174 mm on A4 with
    our margins); cells are Paragraphs, so long text wraps instead of
    running off the page.
    """
    s = styles()
    head = [Paragraph(text(h), s["cell_head_right" if i in numeric else "cell_head"])
            for i, h in enumerate(header)]
    body = []
    for row in rows:
        cells = []
        for i, (value, width) in enumerate(zip(row, widths_mm, strict=False)):
            if isinstance(value, Paragraph):
                cells.append(value)
            else:
                cells.append(cell(value, s["cell_right" if i in numeric else "cell"], width))
        body.append(cells)
    table = Table([head] + body, colWidths=[w * mm for w in widths_mm], repeatRows=1,
                  hAlign="LEFT")
    commands = [
        ("BACKGROUND", (0, 0), (-1, 0), HEAD_FILL),
        ("LINEBELOW", (0, 0), (-1, 0), 0.8, ACCENT),
        ("LINEBELOW", (0, -1), (-1, -1), 0.6, RULE),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("TOPPADDING", (0, 0), (-1, -1), 1.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 1.6),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
        ("RIGHTPADDING", (0, 0), (-1, -1), 3),
    ]
    if zebra:
        commands.append(("ROWBACKGROUNDS", (0, 1), (-1, -1), [colors.white, STRIPE]))
    table.setStyle(TableStyle(commands + (extra_style or [])))
    return table


def key_value_table(pairs: Sequence[tuple[str, object]], widths_mm=(52, 122)) -> Table:
    """Two columns, label and value, for short facts (no header row)."""
    s = styles()
    rows = [[Paragraph(text(k), s["cell_head"]),
             v if isinstance(v, Paragraph) else cell(v, s["cell"], widths_mm[1])] for k, v in pairs]
    table = Table(rows, colWidths=[w * mm for w in widths_mm], hAlign="LEFT")
    table.setStyle(TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.3, RULE),
        ("TOPPADDING", (0, 0), (-1, -1), 1.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 1.6),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
    ]))
    return table


def pairs_table(pairs: Sequence[tuple[str, object]], widths_mm=(46, 41, 46, 41)) -> Table:
    """Short facts two to a row (label, value, label, value): settings and the like."""
    s = styles()
    cells = [[Paragraph(text(k), s["cell_head"]), cell(v, s["cell"], widths_mm[1])]
             for k, v in pairs]
    rows = [cells[i] + (cells[i + 1] if i + 1 < len(cells) else ["", ""]) for i in range(0, len(cells), 2)]
    table = Table(rows or [["", "", "", ""]], colWidths=[w * mm for w in widths_mm], hAlign="LEFT")
    table.setStyle(TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.3, RULE),
        ("TOPPADDING", (0, 0), (-1, -1), 1.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 1.6),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
    ]))
    return table


def verdict_colour(status: str | None):
    if status in ("met", "agrees", True):
        return GOOD
    if status in ("not met", "disagrees", False):
        return BAD
    return INK
