"""``verify_certificate``: check a certificate (PDF or HTML) against the results database.

Three checks, every difference reported as one line:

1. the data embedded in the certificate still hashes to the SHA-256 printed on it (the embedded
   data was not edited);
2. every printed field is the text the embedded data gives for it (``certificate_view.printed_fields``
   and the table cells: header, verdict, judgement, caveats, results, instruments, safety events,
   hash).  HTML: each ``data-field`` element; PDF: each field's text is found in the page text;
3. the database, gathered again for the certificate's run and channel, gives the same canonical
   data; if not, each field that differs is named with both values.

Reading a PDF needs ``pypdf`` (in the ``test`` extra today; ``benchwright verify`` of a PDF needs it
installed).  HTML needs only the standard library.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

from sequencer.errors import CertificateFileError, Location, Problem, StoreError

from .certificate_data import (
    SCHEMA,
    canonical_dict,
    certificate_from_dict,
    data_sha256,
    gather_certificate,
)
from .certificate_html import DATA_SCRIPT_ID, META_NAME
from .certificate_pdf import ATTACHMENT_NAME, needs_unicode_font, pdf_text
from .certificate_view import closing_fields, printed_fields, table_fields
from .reading import StoreReader

MAX_DIFFERENCES = 50


@dataclass(frozen=True)
class VerifyResult:
    ok: bool
    differences: list[str] = field(default_factory=list)
    number: str = ""
    data_sha256: str = ""


@dataclass(frozen=True)
class _Embedded:
    meta: dict[str, Any]
    data: dict[str, Any]
    visible: dict[str, str] | None  # HTML data-field -> text
    page_text: str | None  # PDF text


def verify_certificate(store: StoreReader, path: Path | str) -> VerifyResult:
    """Compare the certificate at ``path`` with the database of ``store`` (module docstring).

    ``ValueError`` if the file is not a benchwright certificate at all.
    """
    p = Path(path)
    embedded = _read_certificate(p)
    meta = embedded.meta
    if not isinstance(meta, dict) or meta.get("schema") != SCHEMA:
        schema = meta.get("schema") if isinstance(meta, dict) else None
        raise _not_a_certificate(p, f"schema {schema!r}")
    printed = str(meta.get("data_sha256", ""))
    problems: list[str] = []
    if data_sha256(embedded.data) != printed:
        problems.append("embedded data does not match the SHA-256 printed on the certificate")
    problems += _visible_problems(embedded, printed)
    try:
        fresh = gather_certificate(store, int(meta["run_id"]), int(meta["channel"]))
    except (StoreError, KeyError) as exc:
        problems.append(f"database: {exc}")
        return VerifyResult(False, problems, str(meta.get("number", "")), printed)
    if data_sha256(fresh) != data_sha256(embedded.data):
        changed = diff(embedded.data, canonical_dict(fresh))
        problems += [f"{d} (certificate != database)" for d in changed]
    return VerifyResult(
        not problems, problems[:MAX_DIFFERENCES], str(meta.get("number", "")), printed
    )


def diff(a: Any, b: Any, where: str = "") -> list[str]:
    """Paths (``quantities.3.value``) where two plain JSON values differ, with both values."""
    if isinstance(a, dict) and isinstance(b, dict):
        out: list[str] = []
        for key in sorted(set(a) | set(b)):
            sub = f"{where}.{key}" if where else str(key)
            if key not in a or key not in b:
                out.append(f"{sub}: {a.get(key, '<missing>')!r} != {b.get(key, '<missing>')!r}")
            else:
                out += diff(a[key], b[key], sub)
        return out
    if isinstance(a, list) and isinstance(b, list):
        out = [
            x
            for i, (p, q) in enumerate(zip(a, b, strict=False))
            for x in diff(p, q, f"{where}.{i}")
        ]
        if len(a) != len(b):
            out.append(f"{where}: {len(a)} entries != {len(b)} entries")
        return out
    return [] if a == b else [f"{where}: {a!r} != {b!r}"]


def _visible_problems(e: _Embedded, printed_digest: str) -> list[str]:
    """Every printed field (``certificate_view.printed_fields`` and the table cells) against the text
    the embedded data gives for it; each difference names the field."""
    try:
        data = certificate_from_dict(e.data)
    except (KeyError, TypeError) as exc:
        return [f"embedded data is not a certificate's: {exc}"]
    fields = printed_fields(data)
    tables = table_fields(data)
    closing = closing_fields(data)
    if e.visible is not None:
        expected = dict(fields) | dict(closing)
        for key, columns, cells in tables:
            expected.update({f"{key}.{col}": text for col, text in zip(columns, cells, strict=True)})
        expected["data_sha256"] = printed_digest
        problems = [
            f"printed {key}: {e.visible.get(key)!r} but the data says {text!r}"
            for key, text in expected.items()
            if e.visible.get(key) != text
        ]
        return problems + [
            f"printed {k} is not in the data" for k in sorted(set(e.visible) - set(expected))
        ]
    if e.page_text is None:
        return []
    unicode_font = needs_unicode_font(data)
    page = _squeezed(e.page_text)
    at = 0

    def find(text: str) -> bool:
        """Find ``text`` after the previous field (fields are printed in reading order)."""
        nonlocal at
        where = page.find(_squeezed(pdf_text(text, unicode_font)), at)
        if where < 0:
            return False
        at = where + len(_squeezed(pdf_text(text, unicode_font)))
        return True

    problems = [f"printed {key}: {text!r} not found in the PDF text" for key, text in fields if not find(text)]
    for key, columns, cells in tables:
        if find(" ".join(cells)):
            continue
        gone = _cells_not_found(page, at, columns, cells, unicode_font)
        problems += [f"printed {key}.{col}: {cell!r} not found in the PDF text" for col, cell in gone]
        if not gone:
            problems.append(f"printed {key}: {' '.join(cells)!r} not found in the PDF text")
    problems += [f"printed {key}: {text!r} not found in the PDF text" for key, text in closing if not find(text)]
    digest_line = f"SHA-256 of the certificate data: {printed_digest}"
    if not find(digest_line):
        problems.append(f"printed data_sha256: {digest_line!r} not found in the PDF text")
    return problems


def _cells_not_found(
    page: str, at: int, columns: tuple[str, ...], cells: tuple[str, ...], unicode_font: bool
) -> list[tuple[str, str]]:
    """The cell of a row (not found whole) whose text differs: the row is found after ``at`` with
    that one cell left open, and with no other; [] when no single cell explains it."""
    texts = [re.escape(_squeezed(pdf_text(c, unicode_font))) for c in cells]
    explains = [
        (col, cell)
        for i, (col, cell) in enumerate(zip(columns, cells, strict=True))
        if re.compile("".join(texts[:i]) + ".{0,80}?" + "".join(texts[i + 1 :])).search(page, at)
    ]
    return explains if len(explains) == 1 else []


def _squeezed(text: str) -> str:
    """Text without any whitespace: a PDF wraps long cells and pypdf puts line breaks there."""
    return "".join(text.split())


def _not_a_certificate(path: Path, why: str) -> CertificateFileError:
    return CertificateFileError(
        [Problem(Location(str(path), 1, 1), f"not a benchwright certificate ({why})")]
    )


def _read_certificate(path: Path) -> _Embedded:
    """The embedded data of a certificate file; :class:`CertificateFileError` (exit 2) for any
    other file, whatever its bytes: a PDF must start with ``%PDF-`` (ISO 32000-1 §7.5.2)."""
    try:
        if path.suffix.lower() == ".pdf":
            with path.open("rb") as f:
                if f.read(5) != b"%PDF-":
                    raise _not_a_certificate(path, "no PDF header")
            return _read_pdf(path)
        return _read_html(path)
    except OSError as exc:
        raise _not_a_certificate(path, f"cannot read it: {exc.strerror or exc}") from None
    except ValueError as exc:  # also UnicodeDecodeError, and pypdf's errors mapped in _read_pdf
        raise _not_a_certificate(path, str(exc).removeprefix(f"{path}: ")) from None


def _read_pdf(path: Path) -> _Embedded:
    try:
        from pypdf import PdfReader
    except ImportError as exc:  # pragma: no cover - depends on the environment
        raise ImportError("verifying a PDF certificate needs pypdf: pip install pypdf") from exc
    from pypdf.errors import PyPdfError

    try:
        reader = PdfReader(str(path))
        keywords = (reader.metadata or {}).get("/Keywords", "")
        meta = json.loads(str(keywords))
        payload = reader.attachments[ATTACHMENT_NAME][0]
        data = json.loads(payload.decode("utf-8"))
        text = "\n".join(page.extract_text() or "" for page in reader.pages)
    except (ValueError, KeyError, IndexError, PyPdfError) as exc:
        raise ValueError(f"{path}: no benchwright certificate data in this PDF") from exc
    return _Embedded(meta=meta, data=data, visible=None, page_text=text)


class _CertificateHTML(HTMLParser):
    """The meta tag, the embedded data, and the text of every element with a ``data-field``."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.meta: str | None = None
        self.data_text: list[str] = []
        self.fields: dict[str, str] = {}
        self._in_data = False
        self._field: str | None = None
        self._tag = ""
        self._depth = 0
        self._buf: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        if tag == "meta" and a.get("name") == META_NAME:
            self.meta = a.get("content") or ""
        elif tag == "script" and a.get("id") == DATA_SCRIPT_ID:
            self._in_data = True
        elif self._field is not None:
            self._depth += tag == self._tag
        elif a.get("data-field"):
            self._field, self._tag, self._depth, self._buf = a["data-field"], tag, 1, []

    def handle_endtag(self, tag: str) -> None:
        if tag == "script":
            self._in_data = False
        elif self._field is not None and tag == self._tag:
            self._depth -= 1
            if self._depth == 0:
                self.fields[self._field] = "".join(self._buf)
                self._field = None

    def handle_data(self, data: str) -> None:
        if self._in_data:
            self.data_text.append(data)
        elif self._field is not None:
            self._buf.append(data)


def _read_html(path: Path) -> _Embedded:
    parser = _CertificateHTML()
    parser.feed(path.read_text(encoding="utf-8"))
    parser.close()
    if parser.meta is None or not parser.data_text:
        raise ValueError(f"{path}: no benchwright certificate data in this file")
    try:
        meta = json.loads(parser.meta)
        data = json.loads("".join(parser.data_text))
    except ValueError as exc:
        raise ValueError(f"{path}: the embedded certificate data is not JSON") from exc
    return _Embedded(meta=meta, data=data, visible=parser.fields, page_text=None)
