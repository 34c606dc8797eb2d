"""The batch report as PDF and self-contained HTML: headline, tables, one histogram per quantity
and output with its limits drawn in."""

from __future__ import annotations

import base64
import re
from html import escape
from pathlib import Path

from .batch_report import (
    FAILED_HEADER,
    OUTLIER_HEADER,
    STATS_HEADER,
    BatchSummary,
    failed_rows,
    headline,
    outlier_rows,
    stats_rows,
)
from .pdf_layout import figure, needs_unicode, new_document, note, section, table

_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_CSS = (
    'body{font-family:"DejaVu Sans",Verdana,Arial,sans-serif;font-size:10pt;max-width:180mm;'
    "margin:12mm auto;color:#000;background:#fff}h1{font-size:15pt}h2{font-size:11pt;"
    "border-bottom:1px solid #000}table{border-collapse:collapse;width:100%;font-size:8.5pt}"
    "th{text-align:left;border-bottom:1.5px solid #000}td{border-bottom:0.5px solid #888}"
    "figure{margin:8px 0;break-inside:avoid}figure img{width:100%}figcaption{font-size:8pt;"
    "text-align:center}@page{margin:15mm}"
)


def _sections(s: BatchSummary) -> list[tuple[str, tuple[str, ...], list[tuple[str, ...]]]]:
    return [
        ("Quantities across channels", STATS_HEADER, stats_rows(s)),
        (
            f"Outliers: more than {s.outlier_sigma:g} robust σ (1.4826·MAD) from the batch median",
            OUTLIER_HEADER,
            outlier_rows(s),
        ),
        ("Failed channels", FAILED_HEADER, failed_rows(s)),
    ]


def _histograms(s: BatchSummary) -> list[tuple[str, bytes]]:
    from .plots import Plotter

    plotter = Plotter()
    out = []
    for q in s.stats:
        group = f", {q.group} channels" if q.group else ""
        kind = f" [{q.board_type}]" if q.board_type else ""
        title = q.quantity + kind + (f" ({q.output}{group})" if q.output else "") + f": {q.n} values"
        out.append((title, plotter.histogram(q.values, q.low, q.high, title, q.unit)))
    return out


def render_batch(s: BatchSummary, out_dir: Path, *, paper: str = "A4") -> list[Path]:
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = f"batch-{_UNSAFE.sub('_', s.batch)}"
    figures = _histograms(s)
    return [
        _pdf(s, figures, out_dir / f"{stem}.pdf", paper),
        _html(s, figures, out_dir / f"{stem}.html"),
    ]


def _pdf(s: BatchSummary, figures: list[tuple[str, bytes]], path: Path, paper: str) -> Path:
    sections = _sections(s)
    texts = [headline(s)] + [c for _, _, rows in sections for r in rows for c in r]
    pdf = new_document(paper, needs_unicode(texts), lambda p: f"batch {s.batch} · page {p}/{{nb}}")
    pdf.set_title(f"Batch report {s.batch}")
    pdf.add_page()
    pdf.set_font(pdf.family, "B", 15)
    pdf.cell(0, 9, f"Batch report {s.batch}", new_x="LMARGIN", new_y="NEXT")
    pdf.set_font(pdf.family, "B", 10)
    pdf.cell(0, 6, headline(s), new_x="LMARGIN", new_y="NEXT")
    widths = {
        STATS_HEADER: (30, 14, 10, 20, 20, 20, 20, 32, 14),
        OUTLIER_HEADER: (32, 16, 46, 16, 26, 22, 22),
        FAILED_HEADER: (32, 14, 16, 118),
    }
    for title, header, rows in sections:
        section(pdf, title)
        if rows:
            table(pdf, header, rows, widths[header], size=7)
        else:
            note(pdf, "None.")
    section(pdf, "Histograms (dashed: low limit, dotted: high limit)")
    for title, png in figures:
        figure(pdf, png, title)
    pdf.output(str(path))
    return path


def _table_html(header: tuple[str, ...], rows: list[tuple[str, ...]]) -> str:
    if not rows:
        return "<p>None.</p>"
    head = "".join(f"<th>{escape(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{escape(c)}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _html(s: BatchSummary, figures: list[tuple[str, bytes]], path: Path) -> Path:
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Batch report {escape(s.batch)}</title><style>{_CSS}</style></head><body>",
        f"<h1>Batch report {escape(s.batch)}</h1>",
        f'<p id="headline"><strong>{escape(headline(s))}</strong></p>',
    ]
    for title, header, rows in _sections(s):
        parts += [f"<h2>{escape(title)}</h2>", _table_html(header, rows)]
    parts.append("<h2>Histograms (dashed: low limit, dotted: high limit)</h2>")
    for title, png in figures:
        b64 = base64.b64encode(png).decode("ascii")
        parts.append(
            f'<figure><img src="data:image/png;base64,{b64}" alt="{escape(title)}">'
            f"<figcaption>{escape(title)}</figcaption></figure>"
        )
    parts.append("</body></html>")
    path.write_text("\n".join(parts) + "\n", encoding="utf-8")
    return path
