"""Page layout shared by the PDF reports (fpdf2): an A4/Letter-safe column, fonts, tables.

The content is a 180 mm column between 15 mm margins above an 18 mm footer: it fits A4
(210 × 297 mm) and US Letter (215.9 × 279.4 mm).  Fonts: the PDF core font Helvetica (nothing to
parse or subset: fast) when every text is Latin-1 after :func:`pdf_text` spells out the few symbols
we print; otherwise DejaVu Sans from matplotlib's package data.
"""

from __future__ import annotations

import io
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

PAPER = {"A4": "A4", "Letter": "Letter"}
MARGIN_MM = 15.0
CONTENT_MM = 180.0
FOOTER_MM = 18.0
CELL_PAD_MM = 1.0  # fpdf's cell margin (c_margin) with unit="mm"

LATIN1_SPELLING = {"…": "to", "≤": "<=", "≥": ">=", "—": "-", "σ": "sigma", "→": "->", "μ": "µ"}


def needs_unicode(texts: Iterable[str]) -> bool:
    """True when some text stays outside Latin-1 after the symbol spelling."""
    return any(ord(ch) > 255 for t in texts for ch in _spell(t))


def _spell(text: str) -> str:
    for symbol, spelled in LATIN1_SPELLING.items():
        text = text.replace(symbol, spelled)
    return text


def pdf_text(text: str, unicode_font: bool) -> str:
    """``text`` as printed in the PDF: unchanged with DejaVu, symbols spelled out with Helvetica."""
    return text if unicode_font else _spell(text)


def _add_fonts(pdf: Any, unicode_font: bool) -> str:
    """Register the fonts; returns the family name to use."""
    if not unicode_font:
        return "helvetica"
    import matplotlib

    ttf = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    pdf.add_font("DejaVu", "", str(ttf / "DejaVuSans.ttf"))
    pdf.add_font("DejaVu", "B", str(ttf / "DejaVuSans-Bold.ttf"))
    return "DejaVu"


def new_document(paper: str, unicode_font: bool, footer: Callable[[int], str]) -> Any:
    """An FPDF document with our margins and fonts; ``footer(page_no)`` is printed on each page
    (``{nb}`` in it becomes the page count).  ``doc.family`` is the font family to use."""
    from fpdf import FPDF

    if paper not in PAPER:
        raise ValueError(f"paper must be one of {sorted(PAPER)}, got {paper!r}")

    class _Document(FPDF):
        def normalize_text(self, text: str) -> str:
            return super().normalize_text(pdf_text(text, unicode_font))

        def footer(self) -> None:
            self.set_y(-12)
            self.set_font(self.family, "", 6.5)
            self.cell(0, 4, footer(self.page_no()), align="C")

    pdf = _Document(orientation="portrait", unit="mm", format=PAPER[paper])
    pdf.family = _add_fonts(pdf, unicode_font)
    pdf.set_margins(MARGIN_MM, MARGIN_MM, MARGIN_MM)
    pdf.set_auto_page_break(True, margin=FOOTER_MM)
    return pdf


def section(pdf: Any, title: str) -> None:
    if pdf.will_page_break(20):
        pdf.add_page()
    pdf.ln(2)
    pdf.set_font(pdf.family, "B", 10)
    pdf.cell(0, 6, title, new_x="LMARGIN", new_y="NEXT")
    pdf.set_line_width(0.3)
    pdf.line(MARGIN_MM, pdf.get_y(), MARGIN_MM + CONTENT_MM, pdf.get_y())
    pdf.ln(1.5)


def note(pdf: Any, text: str) -> None:
    pdf.set_font(pdf.family, "", 7.5)
    pdf.multi_cell(CONTENT_MM, 4.5, text, new_x="LMARGIN", new_y="NEXT")


def table(
    pdf: Any,
    header: tuple[str, ...],
    rows: list[tuple[str, ...]],
    widths: tuple[float, ...],
    *,
    size: float = 7.5,
    bold_rows: set[int] | frozenset[int] = frozenset(),
) -> None:
    """A ruled table of plain cells (much cheaper than fpdf's table layout); a cell too long for
    its column wraps, and the header is repeated after a page break."""
    line_h = size * 0.5
    _row(pdf, header, widths, size, line_h, bold=True)
    pdf.set_line_width(0.3)
    pdf.line(MARGIN_MM, pdf.get_y(), MARGIN_MM + sum(widths), pdf.get_y())
    for i, cells in enumerate(rows):
        if pdf.will_page_break(line_h * _lines(pdf, cells, widths, size)):
            pdf.add_page()
            _row(pdf, header, widths, size, line_h, bold=True)
        _row(pdf, cells, widths, size, line_h, bold=i in bold_rows)
    pdf.set_line_width(0.3)
    pdf.line(MARGIN_MM, pdf.get_y(), MARGIN_MM + sum(widths), pdf.get_y())
    pdf.ln(1)


def _lines(pdf: Any, cells: tuple[str, ...], widths: tuple[float, ...], size: float) -> int:
    """How many text lines the row needs (its tallest wrapped cell)."""
    pdf.set_font(pdf.family, "", size)
    if all(
        pdf.get_string_width(c) <= w - 2 * CELL_PAD_MM for c, w in zip(cells, widths, strict=True)
    ):
        return 1
    return max(
        len(pdf.multi_cell(w, 1, c, dry_run=True, output="LINES"))
        for c, w in zip(cells, widths, strict=True)
    )


def _row(
    pdf: Any,
    cells: tuple[str, ...],
    widths: tuple[float, ...],
    size: float,
    line_h: float,
    *,
    bold: bool,
) -> None:
    n = _lines(pdf, cells, widths, size)
    pdf.set_font(pdf.family, "B" if bold else "", size)
    x, y = MARGIN_MM, pdf.get_y()
    for text, w in zip(cells, widths, strict=True):
        pdf.set_xy(x, y)
        if n == 1:
            pdf.cell(w, line_h, text)
        else:
            pdf.multi_cell(w, line_h, text, new_x="RIGHT", new_y="TOP")
        x += w
    bottom = y + n * line_h
    pdf.set_xy(MARGIN_MM, bottom)
    if not bold:
        pdf.set_line_width(0.1)
        pdf.set_draw_color(150)
        pdf.line(MARGIN_MM, bottom, MARGIN_MM + sum(widths), bottom)
        pdf.set_draw_color(0)


def figure(pdf: Any, png: bytes, caption: str) -> None:
    w_px, h_px = int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")  # PNG IHDR
    height = CONTENT_MM * h_px / w_px
    if pdf.will_page_break(height + 8):
        pdf.add_page()
    pdf.ln(2)
    pdf.image(io.BytesIO(png), x=MARGIN_MM, w=CONTENT_MM, h=height)
    pdf.set_font(pdf.family, "", 7)
    pdf.cell(0, 4, caption, new_x="LMARGIN", new_y="NEXT", align="C")
