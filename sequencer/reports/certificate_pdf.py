"""A channel certificate as PDF (fpdf2), printable on A4 and US Letter (layout: ``pdf_layout``).

Verdicts are words in bold and boxes, never colour alone.  Embedded for ``verify``: the document
keywords hold a small JSON object (schema, number, run id, channel, data SHA-256) and the attachment
``certificate-data.json`` holds the canonical data.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from datetime import datetime
from pathlib import Path
from typing import Any

from .certificate_data import SCHEMA, CertificateData, canonical_json, data_sha256
from .certificate_view import (
    QUANTITY_HEADER,
    closing_fields,
    crosstalk_out_rows,
    identity_rows,
    instrument_header,
    instrument_rows,
    overall_text,
    printed_fields,
    quantity_rows,
    shows_calibrated,
    table_fields,
)
from .pdf_layout import (
    CONTENT_MM,
    MARGIN_MM,
    figure,
    needs_unicode,
    new_document,
    note,
    pdf_text,
    section,
    table,
)

__all__ = ["ATTACHMENT_NAME", "FIGURE_CAPTIONS", "needs_unicode_font", "pdf_text", "render_pdf"]

ATTACHMENT_NAME = "certificate-data.json"
CLOSING_SECTIONS = (
    ("Values not measured", "notes.", ""),
    ("Bias record", "bias.", "No bias or high voltage was applied in this run."),
    ("Approval", "approval.", ""),
)
"""Sections after the figures: (title, field prefix of ``closing_fields``, text when it has none)."""
FIGURE_CAPTIONS = {
    "transfer": "Transfer curve per output with the fitted line; residuals in % of the span (INL)",
    "s_curves": "Discriminator S-curves with the fitted error function",
    "pulses": "Captured pulse shapes (mean of the captures) with the peak marked",
    "crosstalk": "Crosstalk into the neighbouring channels when this channel is driven",
    "spectra": "Light sensor: gain scan, spectra with their fits (finger, muon), dark-count staircase",
}


def needs_unicode_font(data: CertificateData) -> bool:
    """True when a text of the certificate needs DejaVu (see ``pdf_layout``)."""
    texts = [t for _, t in printed_fields(data) + closing_fields(data)]
    texts += [c for _, _, cells in table_fields(data) for c in cells]
    return needs_unicode(texts)


def metadata_keywords(data: CertificateData, digest: str) -> str:
    """The JSON put in the PDF keywords (and the HTML meta tag)."""
    return json.dumps(
        {
            "schema": SCHEMA,
            "number": data.number,
            "run_id": data.run_id,
            "channel": data.channel,
            "data_sha256": digest,
        },
        sort_keys=True,
    )


def render_pdf(
    data: CertificateData, images: Mapping[str, bytes | None], path: Path, *, paper: str = "A4"
) -> Path:
    """Write the certificate of ``data`` with the PNG ``images`` (keys of FIGURE_CAPTIONS)."""
    digest = data_sha256(data)
    pdf = new_document(
        paper,
        needs_unicode_font(data),
        lambda page: f"{data.number} · data SHA-256 {digest} · page {page}/{{nb}}",
    )
    _metadata(pdf, data, digest)
    pdf.add_page()
    _header(pdf, data)
    _verdict(pdf, data)
    for key, text in printed_fields(data):
        if key.startswith("caveats."):
            _caveat(pdf, text)
        elif not key.startswith("header.") and key != "verdict":
            note(pdf, text)
    section(pdf, "Results")
    _quantities(pdf, data)
    caused = crosstalk_out_rows(data)
    if caused:
        section(pdf, f"Crosstalk caused by this channel (channel {data.channel} driven)")
        _quantities(pdf, data, caused)
    section(pdf, "Instruments")
    widths = (20, 30, 30, 28, 24, 24, 24) if shows_calibrated(data) else (22, 34, 34, 32, 30, 28)
    table(pdf, instrument_header(data), instrument_rows(data), widths)
    for key, caption in FIGURE_CAPTIONS.items():
        png = images.get(key)
        if png:
            figure(pdf, png, caption)
    closing = closing_fields(data)
    for title, prefix, empty in CLOSING_SECTIONS:
        lines = [text for key, text in closing if key.startswith(prefix)]
        if lines or empty:
            section(pdf, title)
        for text in lines or ([empty] if empty else []):
            note(pdf, text)
    section(pdf, "Data integrity")
    note(pdf, f"SHA-256 of the certificate data: {digest}")
    note(pdf, f"Check with: benchwright verify {data.number}.pdf")
    path.parent.mkdir(parents=True, exist_ok=True)
    pdf.output(str(path))
    return path


def _metadata(pdf: Any, data: CertificateData, digest: str) -> None:
    pdf.set_title(f"Test certificate {data.number}")
    pdf.set_subject(f"benchwright certificate {data.number} data-sha256 {digest}")
    pdf.set_author(data.operator)
    pdf.set_creator(f"benchwright {data.software_version}")
    pdf.set_keywords(metadata_keywords(data, digest))
    stamp = _parse_time(data.ended_at) or _parse_time(data.started_at)
    if stamp is not None:
        pdf.set_creation_date(stamp)
    pdf.embed_file(
        bytes=canonical_json(data).encode("utf-8"),
        basename=ATTACHMENT_NAME,
        modification_date=stamp,
        desc="canonical certificate data (benchwright verify)",
    )


def _parse_time(text: str) -> datetime | None:
    try:
        return datetime.fromisoformat(text) if text else None
    except ValueError:
        return None


def _header(pdf: Any, data: CertificateData) -> None:
    pdf.set_font(pdf.family, "B", 15)
    pdf.cell(CONTENT_MM * 0.55, 9, "Channel test certificate")
    pdf.set_font(pdf.family, "B", 9.5)
    pdf.cell(CONTENT_MM * 0.45, 9, data.number, align="R", new_x="LMARGIN", new_y="NEXT")
    pdf.set_line_width(0.6)
    pdf.line(MARGIN_MM, pdf.get_y(), MARGIN_MM + CONTENT_MM, pdf.get_y())
    pdf.ln(2)
    for label, value in identity_rows(data):  # one line each: nothing printed is cut short
        pdf.set_font(pdf.family, "", 7.5)
        pdf.cell(32, 4.6, label)
        pdf.set_font(pdf.family, "B", 8)
        pdf.multi_cell(CONTENT_MM - 32, 4.6, value, new_x="LMARGIN", new_y="NEXT")


def _caveat(pdf: Any, text: str) -> None:
    pdf.set_font(pdf.family, "B", 8)
    pdf.set_line_width(0.6)
    pdf.multi_cell(CONTENT_MM, 5, text, border=1, new_x="LMARGIN", new_y="NEXT")


def _verdict(pdf: Any, data: CertificateData) -> None:
    pdf.ln(3)
    y = pdf.get_y()
    pdf.set_line_width(1.2 if data.verdict != "PASS" else 0.8)
    pdf.rect(MARGIN_MM, y, CONTENT_MM, 12)
    pdf.set_font(pdf.family, "B", 13)
    pdf.set_xy(MARGIN_MM + 3, y + 1.5)
    pdf.cell(CONTENT_MM - 6, 9, f"Overall verdict: {overall_text(data)}")
    pdf.set_y(y + 15)


def _quantities(pdf: Any, data: CertificateData, rows: list | None = None) -> None:
    rows = quantity_rows(data) if rows is None else rows
    if not rows:
        note(pdf, "No measurement of this channel is stored.")
        return
    widths = (52, 14, 24, 18, 12, 40, 20)
    table(
        pdf,
        QUANTITY_HEADER,
        [r.cells for r in rows],
        widths,
        bold_rows={i for i, r in enumerate(rows) if r.failed},
    )
