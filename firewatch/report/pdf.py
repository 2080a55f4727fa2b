"""The report as PDF pages (A4 or Letter), laid out in millimetres with matplotlib.

matplotlib draws the chart anyway, and its PDF backend embeds the fonts
(with their Unicode names, so the text stays searchable); no other library is needed for a
page of text and tables. The layout here is a few dozen lines by hand:
titles, wrapped table cells, a table that continues on the next page with
its heading, and a footer with the cautions, the readings digest and the
page number on every page.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import matplotlib
from matplotlib import font_manager, ft2font
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties

from firewatch.report.chart import axes_rect, draw_chart
from firewatch.report.document import ChartBlock, Document, Fields, Table
from firewatch.report.text import unbreakable

__all__ = ["PAPER", "write_pdf"]

PAPER = {"a4": (210.0, 297.0), "letter": (215.9, 279.4)}
"""Paper sizes in mm (ISO 216 A4; US Letter, 8.5 x 11 in)."""

MARGIN = 15.0
FOOTER = 19.0
BODY_PT = 7.2
PT_MM = 25.4 / 72.0
LINE = BODY_PT * PT_MM * 1.35


class _Measure:
    """Text widths in mm from the fonts' own advance widths (unhinted), cached per character.

    Summing advances is what a PDF viewer does with the embedded font; it
    avoids laying out every trial line of the word wrap through FreeType.
    """

    SAFETY = 1.01

    def __init__(self) -> None:
        self._fonts: dict[tuple[bool, str | None], tuple[ft2font.FT2Font, dict[str, float]]] = {}

    def _font(self, bold: bool, family: str | None) -> tuple[ft2font.FT2Font, dict[str, float]]:
        key = (bold, family)
        if key not in self._fonts:
            path = font_manager.findfont(FontProperties(weight="bold" if bold else "normal", family=family))
            font = font_manager.get_font(path)
            self._fonts[key] = (font, {})
        return self._fonts[key]

    def width(self, text: str, size: float, bold: bool = False, family: str | None = None) -> float:
        font, cache = self._font(bold, family)
        em = 0.0
        for ch in text:
            w = cache.get(ch)
            if w is None:
                font.set_size(100.0, 72.0)  # shared font objects: set the size before each load
                glyph = font.load_char(ord(ch), flags=ft2font.LoadFlags.NO_HINTING)
                w = cache[ch] = glyph.linearHoriAdvance / 65536.0 / 100.0  # 16.16 fixed point, per em
            em += w
        return em * size * PT_MM * self.SAFETY

    def wrap(self, text: str, width_mm: float, size: float, bold: bool = False, family: str | None = None) -> list[str]:
        """Greedy wrap between the pieces :func:`unbreakable` allows; a piece longer than the line is cut."""
        space = self.width(" ", size, bold, family)
        lines: list[str] = []
        for para in (text or "").split("\n"):
            line, line_w = "", 0.0
            words: list[str] = []
            for piece in unbreakable(para):  # a piece too long for any line may still break at its spaces
                words += [piece] if self.width(piece, size, bold, family) <= width_mm else piece.split(" ")
            for word in words:
                w = self.width(word, size, bold, family)
                if not line or line_w + space + w > width_mm:
                    if line:
                        lines.append(line)
                    while w > width_mm and len(word) > 1:
                        cut = len(word) - 1
                        while cut > 1 and self.width(word[:cut], size, bold, family) > width_mm:
                            cut -= 1
                        lines.append(word[:cut])
                        word = word[cut:]
                        w = self.width(word, size, bold, family)
                    line, line_w = word, w
                else:
                    line, line_w = f"{line} {word}", line_w + space + w
            lines.append(line)
        return lines or [""]


class _Pages:
    """A cursor over pages of a given size; text placed by its top-left corner in mm."""

    def __init__(self, paper: str) -> None:
        self.w, self.h = PAPER[paper]
        self.pages: list[Figure] = []
        self.measure = _Measure()
        self.new_page()

    @property
    def content_width(self) -> float:
        return self.w - 2 * MARGIN

    @property
    def bottom(self) -> float:
        return self.h - FOOTER

    def new_page(self) -> None:
        self.fig = Figure(figsize=(self.w / 25.4, self.h / 25.4))
        self.pages.append(self.fig)
        self.y = MARGIN

    def room(self, mm: float) -> None:
        if self.y + mm > self.bottom:
            self.new_page()

    def text(self, x: float, y: float, s: str, size: float = BODY_PT, bold: bool = False, colour: str = "black",
             ha: str = "left", family: str | None = None) -> None:
        # family only when given: otherwise the rc default, as a Text made without one
        extra: dict[str, Any] = {"family": family} if family else {}
        self.fig.text(x / self.w, 1.0 - y / self.h, s, fontsize=size, fontweight="bold" if bold else "normal",
                      color=colour, ha=ha, va="top", parse_math=False, **extra)

    def rule(self, y: float, x0: float | None = None, x1: float | None = None, width: float = 0.4, colour: str = "#999999") -> None:
        x0 = MARGIN if x0 is None else x0
        x1 = self.w - MARGIN if x1 is None else x1
        self.fig.add_artist(matplotlib.lines.Line2D([x0 / self.w, x1 / self.w], [1 - y / self.h] * 2, linewidth=width, color=colour))


def _title(p: _Pages, doc: Document) -> None:
    p.text(MARGIN, p.y, doc.title, size=15, bold=True)
    p.text(p.w - MARGIN, p.y + 1.5, doc.subtitle, size=9, ha="right", colour="#333333")
    p.y += 8.0
    p.rule(p.y, width=0.8, colour="black")
    p.y += 2.0


def _fields(p: _Pages, block: Fields) -> None:
    col_w = p.content_width / block.columns
    label_w = 34.0
    rows = (len(block.items) + block.columns - 1) // block.columns
    for r in range(rows):
        heights = []
        for c in range(block.columns):
            i = r * block.columns + c
            if i >= len(block.items):
                continue
            label, value = block.items[i]
            x = MARGIN + c * col_w
            lines = p.measure.wrap(value, col_w - label_w - 3.0, BODY_PT + 0.3)
            p.text(x, p.y, label, colour="#555555")
            for k, line in enumerate(lines):
                p.text(x + label_w, p.y + k * LINE, line, size=BODY_PT + 0.3)
            heights.append(len(lines) * LINE)
        p.y += max(heights) + 0.6
    p.y += 1.5


def _chart(p: _Pages, doc: Document, block: ChartBlock, height: float) -> None:
    p.room(height + 8.0)
    rect = axes_rect(p.content_width, height, MARGIN, p.h - (p.y + height), p.w, p.h)
    ax = p.fig.add_axes(rect)
    draw_chart(ax, doc.record.chart, doc.clock, doc.units, font_pt=BODY_PT)
    p.y += height
    for line in p.measure.wrap(block.caption, p.content_width, BODY_PT - 0.7):
        p.text(MARGIN, p.y, line, size=BODY_PT - 0.7, colour="#555555")
        p.y += LINE * 0.92
    p.y += 3.0


def _table(p: _Pages, t: Table) -> None:
    total = sum(w for _, w, _ in t.columns)
    widths = [w / total * p.content_width for _, w, _ in t.columns]
    xs = [MARGIN + sum(widths[:i]) for i in range(len(widths))]
    pad = 1.2

    def heading(cont: bool) -> None:
        p.text(MARGIN, p.y, t.title + (" (continued)" if cont else ""), size=BODY_PT + 2.3, bold=True)
        p.y += LINE * 1.55
        if any(h for h, _, _ in t.columns) and t.rows:
            for (h, _, align), x, w in zip(t.columns, xs, widths):
                p.text(x + (w - 2 * pad if align == "r" else 0.0), p.y, h, colour="#555555", ha="right" if align == "r" else "left")
            p.y += LINE
            p.rule(p.y - 0.5, width=0.5, colour="#555555")
            p.y += 0.6

    note = p.measure.wrap(t.note, p.content_width, BODY_PT - 0.7) if t.note else []
    note_h = len(note) * LINE * 0.92 + (0.4 if note else 0.0)
    p.room(LINE * 4.5)
    heading(False)
    if not t.rows:
        p.room(LINE + note_h)
        p.text(MARGIN, p.y, t.empty, colour="#333333")
        p.y += LINE
    last = len(t.rows) - 1
    for i, (row, mark, group) in enumerate(zip(t.rows, t.marks or [False] * len(t.rows), t.groups or [False] * len(t.rows))):
        cells = [p.measure.wrap(text, w - 2 * pad, BODY_PT, bold=mark) for text, w in zip(row, widths)]
        height = max(len(c) for c in cells) * LINE + 0.5
        if p.y + height + (note_h if i == last else 0.0) > p.bottom:  # the note stays with the table's last row
            p.new_page()
            heading(True)
        if group and p.y > MARGIN + 12.0:
            p.rule(p.y - 0.4, width=0.3, colour="#bbbbbb")
        for lines, x, w, (_, _, align) in zip(cells, xs, widths, t.columns):
            for k, line in enumerate(lines):
                p.text(x + (w - 2 * pad if align == "r" else 0.0), p.y + k * LINE, line, bold=mark, ha="right" if align == "r" else "left")
        p.y += height
    for line in note:
        p.text(MARGIN, p.y + 0.4, line, size=BODY_PT - 0.7, colour="#555555")
        p.y += LINE * 0.92
    p.y += 3.5


def _footers(p: _Pages, doc: Document) -> None:
    n = len(p.pages)
    for i, fig in enumerate(p.pages):
        p.fig = fig
        y = p.h - FOOTER + 3.0
        p.rule(y - 1.2, width=0.6, colour="black")
        for line in p.measure.wrap("  ".join(doc.cautions), p.content_width, BODY_PT - 1.0, bold=True):
            p.text(MARGIN, y, line, size=BODY_PT - 1.0, bold=True)
            y += LINE * 0.85
        for line in p.measure.wrap(doc.digest_line, p.content_width, BODY_PT - 1.2, family="DejaVu Sans Mono"):
            p.text(MARGIN, y, line, size=BODY_PT - 1.2, family="DejaVu Sans Mono")
            y += LINE * 0.85
        p.text(MARGIN, y, doc.produced, size=BODY_PT - 1.2, colour="#555555")
        p.text(p.w - MARGIN, y, f"page {i + 1} of {n}", size=BODY_PT - 1.2, ha="right", colour="#555555")


def layout(doc: Document, paper: str = "a4") -> list[Figure]:
    """The document laid out on pages (figures); the chart takes about a third of the first page."""
    p = _Pages(paper)
    _title(p, doc)
    _fields(p, doc.header)
    for block in doc.blocks:
        if isinstance(block, ChartBlock):
            _chart(p, doc, block, height=min(86.0, (p.bottom - p.y) * 0.5))
        elif isinstance(block, Table):
            _table(p, block)
        elif isinstance(block, Fields):
            _fields(p, block)
    _footers(p, doc)
    return p.pages


def write_pdf(doc: Document, path: str | Path, paper: str = "a4") -> int:
    """Write the report as a PDF; return the number of pages."""
    pages = layout(doc, paper)
    r = doc.record
    meta = {
        "Title": f"Firing record: {r.kiln or r.site_name} ({r.log_name})",
        "Author": r.site_name or "firewatch",
        "Subject": f"Firing record; readings SHA-256 {r.digest}",
        "Keywords": f"sha256:{r.digest}",
        "Creator": doc.produced.split(" · ")[0],
        "CreationDate": dt.datetime.now(dt.UTC),
    }
    # Type 3 fonts (matplotlib's default) keep the text searchable and embed several times faster than Type 42
    with matplotlib.rc_context({"pdf.fonttype": 3, "pdf.compression": 6}), PdfPages(str(path), metadata=meta) as pdf:
        for fig in pages:
            pdf.savefig(fig)
    return len(pages)
