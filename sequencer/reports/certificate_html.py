"""A channel certificate as one self-contained HTML5 file (inline CSS, base64 PNG figures).

Print rules put it on A4 or Letter (``@page`` margins, no page size forced).  For ``verify`` the file
carries ``<meta name="benchwright-certificate" content="{json}">`` (schema, number, run id, channel,
data SHA-256), the canonical data in ``<script type="application/json" id="certificate-data">``, and
every printed field a ``data-field`` attribute (``certificate_view.printed_fields``: header fields,
verdict, judgement, caveats, the cells of every table, the hash) so that the visible text can be
checked against the data.
"""

from __future__ import annotations

import base64
from collections.abc import Mapping
from html import escape
from pathlib import Path

from .certificate_data import CertificateData, canonical_json, data_sha256
from .certificate_pdf import CLOSING_SECTIONS, FIGURE_CAPTIONS, metadata_keywords
from .certificate_view import (
    QUANTITY_COLUMN_KEYS,
    QUANTITY_HEADER,
    closing_fields,
    crosstalk_out_rows,
    field_slug,
    identity_rows,
    instrument_columns,
    instrument_header,
    instrument_rows,
    overall_text,
    printed_fields,
    quantity_rows,
)

DATA_SCRIPT_ID = "certificate-data"
META_NAME = "benchwright-certificate"
QUANTITY_COLUMNS = QUANTITY_COLUMN_KEYS

_CSS = """
body{font-family:"DejaVu Sans",Verdana,Arial,sans-serif;font-size:10pt;color:#000;background:#fff;
max-width:180mm;margin:12mm auto;line-height:1.3}
h1{font-size:16pt;margin:0}h2{font-size:11pt;border-bottom:1px solid #000;margin:14px 0 6px}
header{display:flex;justify-content:space-between;align-items:baseline;border-bottom:2px solid #000}
.number{font-weight:bold;font-family:"DejaVu Sans Mono",monospace}
dl{display:grid;grid-template-columns:auto 1fr auto 1fr;gap:2px 10px;margin:8px 0}
dl>div{display:contents}.caveat{border:1.5px solid #000;padding:3px 8px;font-weight:bold}
dt{font-size:8.5pt}dd{margin:0;font-weight:bold}
.verdict{border:3px solid #000;padding:6px 10px;font-size:13pt;font-weight:bold;margin:10px 0}
.verdict.fail,.verdict.incomplete{border-style:double;border-width:6px}
table{border-collapse:collapse;width:100%;font-size:8.5pt}
th{text-align:left;border-bottom:1.5px solid #000}td{border-bottom:0.5px solid #888;padding:1px 3px}
tr.fail td{font-weight:bold}tr.fail td:last-child{text-decoration:underline}
figure{margin:10px 0;page-break-inside:avoid;break-inside:avoid}figure img{width:100%}
figcaption{font-size:8pt;text-align:center}.hash{font-family:"DejaVu Sans Mono",monospace;
font-size:8pt;word-break:break-all}
@page{margin:15mm}@media print{body{margin:0;max-width:none}}
"""


def render_html(data: CertificateData, images: Mapping[str, bytes | None], path: Path) -> Path:
    """Write the HTML certificate of ``data`` with the PNG ``images`` to ``path``."""
    digest = data_sha256(data)
    verdict = data.verdict.lower()
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        f"<title>Test certificate {escape(data.number)}</title>",
        f'<meta name="{META_NAME}" content="{escape(metadata_keywords(data, digest))}">',
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        f'<header><h1>Channel test certificate</h1><span class="number">{escape(data.number)}</span>'
        "</header>",
        _identity(data),
        f'<p class="verdict {verdict}" id="verdict" data-field="verdict">Overall verdict: '
        f"{escape(overall_text(data))}</p>",
        *(_paragraph(key, text) for key, text in printed_fields(data)
          if not key.startswith("header.") and key != "verdict"),
        "<h2>Results</h2>",
        _quantities(data),
        _crosstalk_out(data),
        "<h2>Instruments</h2>",
        _table(instrument_header(data), instrument_rows(data), "instruments", instrument_columns(data)),
        *(_figure(key, images.get(key), caption) for key, caption in FIGURE_CAPTIONS.items()),
        *_closing(data),
        "<h2>Data integrity</h2>",
        f'<p>SHA-256 of the certificate data: <span class="hash" id="data-sha256" data-field="data_sha256">{digest}</span></p>',
        f"<p>Check with: <code>benchwright verify {escape(data.number)}.html</code></p>",
        f'<script type="application/json" id="{DATA_SCRIPT_ID}">{_script_json(data)}</script>',
        "</body>",
        "</html>",
    ]
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(p for p in parts if p) + "\n", encoding="utf-8")
    return path


def _paragraph(key: str, text: str) -> str:
    css = ' class="caveat"' if key.startswith("caveats.") else ""
    return f'<p{css} data-field="{key}">{escape(text)}</p>'


def _closing(data: CertificateData) -> list[str]:
    closing = closing_fields(data)
    parts = []
    for title, prefix, empty in CLOSING_SECTIONS:
        lines = [(key, text) for key, text in closing if key.startswith(prefix)]
        if lines or empty:
            parts.append(f"<h2>{escape(title)}</h2>")
        parts += [_paragraph(key, text) for key, text in lines]
        if not lines and empty:
            parts.append(f"<p>{escape(empty)}</p>")
    return parts


def _script_json(data: CertificateData) -> str:
    # "</" would end the script element early; JSON allows "\/" for "/".
    return canonical_json(data).replace("</", "<\\/")


def _identity(data: CertificateData) -> str:
    items = "".join(
        f'<div data-field="header.{field_slug(k)}"><dt>{escape(k)}</dt> <dd>{escape(v)}</dd></div>'
        for k, v in identity_rows(data)
    )
    return f"<dl>{items}</dl>"


def _crosstalk_out(data: CertificateData) -> str:
    rows = crosstalk_out_rows(data)
    if not rows:
        return ""
    title = f"Crosstalk caused by this channel (channel {data.channel} driven)"
    return f"<h2>{escape(title)}</h2>" + _quantities(data, rows)


def _quantities(data: CertificateData, rows: list | None = None) -> str:
    rows = quantity_rows(data) if rows is None else rows
    if not rows:
        return "<p>No measurement of this channel is stored.</p>"
    head = "".join(f"<th>{escape(h)}</th>" for h in QUANTITY_HEADER)
    body = []
    for r in rows:
        cells = "".join(
            f'<td data-field="{r.key}.{col}">{escape(text)}</td>'
            for col, text in zip(QUANTITY_COLUMNS, r.cells, strict=True)
        )
        body.append(f'<tr class="{"fail" if r.failed else "ok"}">{cells}</tr>')
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _table(
    header: tuple[str, ...], rows: list[tuple[str, ...]], key: str, columns: tuple[str, ...]
) -> str:
    head = "".join(f"<th>{escape(h)}</th>" for h in header)
    body = "".join(
        "<tr>"
        + "".join(
            f'<td data-field="{key}.{i}.{col}">{escape(c)}</td>'
            for col, c in zip(columns, r, strict=True)
        )
        + "</tr>"
        for i, r in enumerate(rows)
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _figure(key: str, png: bytes | None, caption: str) -> str:
    if not png:
        return ""
    b64 = base64.b64encode(png).decode("ascii")
    return (
        f'<figure id="figure-{key}"><img src="data:image/png;base64,{b64}" alt="{escape(caption)}">'
        f"<figcaption>{escape(caption)}</figcaption></figure>"
    )
