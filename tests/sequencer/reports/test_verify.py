"""verify: a certificate against the database; tampering on either side is found and named."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import html5lib
import pytest
from pypdf import PdfReader, PdfWriter

from sequencer.errors import CertificateFileError
from sequencer.reports import certify_run, gather_certificates, verify_certificate
from sequencer.reports.certificate_pdf import ATTACHMENT_NAME
from sequencer.store import Store

from .simulated_runs import RunSpec, record_run


def _copy_db(db: Path, tmp_path: Path) -> Path:
    copy = tmp_path / "copy.db"
    src = sqlite3.connect(db)
    dst = sqlite3.connect(copy)
    src.backup(dst)
    src.close()
    dst.close()
    return copy


def _tamper_db(db: Path, run_id: int, channel: int, quantity: str, output: str) -> None:
    """What a tamperer would do: drop the append-only trigger, then edit a stored value."""
    con = sqlite3.connect(db)
    con.execute("DROP TRIGGER IF EXISTS bw_measurements_no_update")
    cur = con.execute(
        "UPDATE measurements SET value = value * 1.01 WHERE run_id = ? AND channel = ? "
        "AND quantity = ? AND output = ?",
        (run_id, channel, quantity, output),
    )
    assert cur.rowcount == 1
    con.commit()
    con.close()


def test_untouched_certificates_verify(certified):
    store, _, paths, _ = certified
    for path in paths[:4]:
        result = verify_certificate(store, path)
        assert result.ok, result.differences
        assert result.differences == []


@pytest.mark.parametrize("suffix", [".pdf", ".html"])
def test_a_changed_value_in_the_database_is_named(certified, tmp_path, suffix):
    _, run_id, paths, db = certified
    copy = _copy_db(db, tmp_path)
    _tamper_db(copy, run_id, 2, "gain", "x5")
    path = next(p for p in paths if p.suffix == suffix and p.stem.endswith("CH02"))
    with Store.open(f"sqlite:///{copy}") as tampered:
        data = next(d for d in gather_certificates(tampered, run_id) if d.channel == 2)
        index = next(
            i for i, q in enumerate(data.quantities) if q.quantity == "gain" and q.output == "x5"
        )
        result = verify_certificate(tampered, path)
        other = verify_certificate(tampered, paths[0])  # channel 1 is untouched
    assert not result.ok
    assert any(d.startswith(f"quantities.{index}.value:") for d in result.differences), result
    assert other.ok, other.differences


def test_an_edited_printed_value_in_the_html_is_found(certified, tmp_path):
    store, _, paths, _ = certified
    text = paths[1].read_text(encoding="utf-8")
    start = text.index('data-field="quantities.1.value">') + len('data-field="quantities.1.value">')
    end = text.index("<", start)
    forged = tmp_path / "forged.html"
    forged.write_text(text[:start] + "9.9999" + text[end:], encoding="utf-8")
    result = verify_certificate(store, forged)
    assert not result.ok
    assert result.differences == [
        f"printed quantities.1.value: '9.9999' but the data says {text[start:end]!r}"
    ]


def test_edited_embedded_data_in_the_html_is_found(certified, tmp_path):
    store, _, paths, _ = certified
    text = paths[1].read_text(encoding="utf-8")
    start = text.index('id="certificate-data">') + len('id="certificate-data">')
    end = text.index("</script>", start)
    data = json.loads(text[start:end])
    data["operator"] = "someone.else"
    forged = tmp_path / "forged.html"
    forged.write_text(text[:start] + json.dumps(data) + text[end:], encoding="utf-8")
    result = verify_certificate(store, forged)
    assert not result.ok
    assert (
        "embedded data does not match the SHA-256 printed on the certificate" in result.differences
    )
    assert any(
        d.startswith("operator: 'someone.else' != 'i.lindqvist'") for d in result.differences
    )


def test_edited_embedded_data_in_the_pdf_is_found(certified, tmp_path):
    store, _, paths, _ = certified
    reader = PdfReader(str(paths[0]))
    data = json.loads(reader.attachments[ATTACHMENT_NAME][0])
    data["quantities"][1]["value"] = 1.5
    writer = PdfWriter(clone_from=reader)
    writer._root_object.pop("/Names", None)  # drop the original attachment
    writer.add_attachment(ATTACHMENT_NAME, json.dumps(data).encode())
    forged = tmp_path / "forged.pdf"
    with forged.open("wb") as fh:
        writer.write(fh)
    result = verify_certificate(store, forged)
    assert not result.ok
    assert (
        "embedded data does not match the SHA-256 printed on the certificate" in result.differences
    )
    assert any(d.startswith("quantities.1.value: 1.5 != ") for d in result.differences)


def test_a_certificate_of_a_run_missing_from_the_database(certified, tmp_path):
    _, _, paths, _ = certified
    with Store.open(f"sqlite:///{tmp_path / 'empty.db'}") as empty:
        result = verify_certificate(empty, paths[1])
    assert not result.ok and result.differences[-1].startswith("database: no run")


def test_not_a_certificate(store, tmp_path):
    page = tmp_path / "page.html"
    page.write_text("<!DOCTYPE html><html><head><title>x</title></head><body></body></html>")
    with pytest.raises(CertificateFileError, match="no benchwright certificate data"):
        verify_certificate(store, page)  # bad input (exit 2), located at the file


@pytest.mark.parametrize(
    ("name", "content"),
    [("notes.pdf", b"hello"), ("results.db", bytes(range(256)) * 8), ("page.html", b"\xff\xfe<x>")],
)
def test_any_other_file_is_a_located_refusal(store, tmp_path, name, content):
    path = tmp_path / name
    path.write_bytes(content)
    with pytest.raises(CertificateFileError) as caught:
        verify_certificate(store, path)
    (problem,) = caught.value.problems
    assert str(problem).startswith(f"{path}:1:1: not a benchwright certificate (")


def test_markup_in_stored_text_neither_breaks_the_html_nor_verify(store, tmp_path):
    run_id = record_run(store, RunSpec(channels=1, operator="o'neil </script><b>x</b> & co"))
    pdf, html = certify_run(store, run_id, tmp_path, workers=1)
    html5lib.HTMLParser(strict=True).parse(html.read_text(encoding="utf-8"))
    assert verify_certificate(store, html).ok
    assert verify_certificate(store, pdf).ok
