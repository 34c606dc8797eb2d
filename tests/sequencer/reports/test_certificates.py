"""Certificates: PDF and HTML of every channel, their content, layout and determinism."""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import html5lib
import pytest
from pypdf import PdfReader

from sequencer.reports import certify_run, gather_certificates
from sequencer.reports.certificate_data import canonical_dict, certificate_number, data_sha256
from sequencer.reports.certificate_view import quantity_cells
from sequencer.reports.certify import render_certificates
from sequencer.reports.pdf_layout import pdf_text
from sequencer.reports.quantities import format_limits, format_measured

from .conftest import BAD_CHANNEL
from .simulated_runs import PROCEDURE_TEXT, RunSpec, record_run

# ISO 216 A4 = 210 x 297 mm and ANSI Letter = 8.5 x 11 in, in PDF points (1/72 in).
A4_PT = (210 / 25.4 * 72, 297 / 25.4 * 72)
LETTER_PT = (612.0, 792.0)


def _text(path: Path) -> str:
    return " ".join(" ".join(p.extract_text() for p in PdfReader(str(path)).pages).split())


def test_one_pdf_and_one_html_per_channel(certified):
    _, run_id, paths, _ = certified
    assert [p.suffix for p in paths] == [".pdf", ".html"] * 8
    assert [p.stem for p in paths[::2]] == [
        f"BW-{run_id:06d}-NR-PA8-0001-CH{c:02d}" for c in range(1, 9)
    ]
    assert all(p.exists() and p.stat().st_size > 10_000 for p in paths)


def test_pdf_carries_identity_quantities_and_verdicts(certified):
    store, run_id, paths, _ = certified
    sha_prefix = hashlib.sha256(PROCEDURE_TEXT.encode()).hexdigest()[:12]
    for data in gather_certificates(store, run_id):
        text = _text(paths[2 * (data.channel - 1)])
        for expected in (
            "NR-PA8-0001",
            "PA8",
            sha_prefix,
            "i.lindqvist",
            "bench-2",
            "pa8-qualify version 2.0",
            data.number,
            "NRS-0042",
            "2026-06-30",
            f"Channel {data.channel}",
            data_sha256(data)[:40],
        ):
            assert expected in text, expected
        assert len(data.quantities) >= 12
        for q in data.quantities:
            # the whole printed row: quantity, output, value, uncertainty, unit, limits, verdict
            assert " ".join(pdf_text(c, False) for c in quantity_cells(q)) in text
        verdict = "FAIL" if data.channel == BAD_CHANNEL else "PASS"
        assert f"Overall verdict: {verdict}" in text


def test_failed_channel_names_the_failed_values(certified):
    store, run_id, _, _ = certified
    data = {d.channel: d for d in gather_certificates(store, run_id)}
    failed = {(q.quantity, q.output) for q in data[BAD_CHANNEL].quantities if q.verdict == "fail"}
    assert failed == {("gain", "x1"), ("gain", "x5")}
    assert data[BAD_CHANNEL].verdict == "FAIL" and data[1].verdict == "PASS"


def test_html_is_valid_html5_and_self_contained(certified):
    _, _, paths, _ = certified
    for path in paths[1::2]:
        text = path.read_text(encoding="utf-8")
        html5lib.HTMLParser(strict=True).parse(text)  # raises ParseError on any HTML5 error
        assert "http://" not in text and "https://" not in text  # no external resource
        assert len(re.findall(r'<img src="data:image/png;base64,', text)) == 4


def test_embedded_data_is_the_hashed_canonical_json(certified):
    store, run_id, paths, _ = certified
    text = paths[1].read_text(encoding="utf-8")
    embedded = re.search(
        r'<script type="application/json" id="certificate-data">(.*?)</script>', text, re.S
    ).group(1)
    value = json.loads(embedded)
    # recomputed with the standard library only: sorted keys, no whitespace, ASCII
    canonical = json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    digest = hashlib.sha256(canonical.encode()).hexdigest()
    assert digest in text
    data = gather_certificates(store, run_id)[0]
    assert value == canonical_dict(data) and digest == data_sha256(data)
    meta = json.loads(PdfReader(str(paths[0])).metadata["/Keywords"])
    assert meta == {
        "schema": "benchwright-certificate/2",
        "number": data.number,
        "run_id": run_id,
        "channel": 1,
        "data_sha256": digest,
    }


def test_plots_show_what_the_store_holds(certified):
    store, run_id, _, _ = certified
    data = gather_certificates(store, run_id)[1]
    assert [c.output for c in data.transfer] == ["x1", "x5"]
    assert all(len(c.amplitudes_mV) == 6 for c in data.transfer)
    (curve,) = data.s_curves
    assert len(curve.thresholds_mV) == 15 and curve.trials == 200
    assert curve.threshold_mV == next(
        q.value for q in data.quantities if q.quantity == "threshold_mV"
    )
    (pulse,) = data.pulses
    assert pulse.output == "shaped" and len(pulse.samples_mV) == 400
    assert sorted(q.channel for q in data.crosstalk_out) == [1, 3]


def test_letter_and_a4_page_sizes(store, tmp_path):
    run_id = record_run(store, RunSpec(channels=1))
    (data,) = gather_certificates(store, run_id)
    for paper, size in (("A4", A4_PT), ("Letter", LETTER_PT)):
        pdf = Path(render_certificates([data], str(tmp_path / paper), paper)[0])
        box = PdfReader(str(pdf)).pages[0].mediabox
        assert float(box.width) == pytest.approx(size[0], abs=0.5)
        assert float(box.height) == pytest.approx(size[1], abs=0.5)


def test_non_latin1_text_switches_to_the_bundled_unicode_font(store, tmp_path):
    run_id = record_run(store, RunSpec(channels=1, operator="Łukasz Żółć"))
    (data,) = gather_certificates(store, run_id)
    pdf = Path(render_certificates([data], str(tmp_path), "A4")[0])
    reader = PdfReader(str(pdf))
    fonts = {str(f["/BaseFont"]) for f in reader.pages[0]["/Resources"]["/Font"].values()}
    assert any("DejaVu" in f for f in fonts)
    assert "Łukasz Żółć" in _text(pdf) and "≤" in _text(pdf)


def test_process_pool_gives_the_same_certificates(certified, tmp_path):
    store, run_id, single, _ = certified  # rendered in-process
    pooled = certify_run(store, run_id, tmp_path / "pool", workers=2)
    assert [p.name for p in pooled] == [p.name for p in single]
    for a, b in zip(pooled, single, strict=True):
        assert a.read_bytes() == b.read_bytes()  # PDFs too: deterministic output


def test_aborted_run_is_incomplete_not_pass(store, tmp_path):
    run_id = record_run(store, RunSpec(channels=1, status="aborted"))
    (data,) = gather_certificates(store, run_id)
    assert data.verdict == "INCOMPLETE" and data.run_status == "aborted"


def test_certificate_number_scheme():
    assert certificate_number(42, "NR-PA8-0001", 3) == "BW-000042-NR-PA8-0001-CH03"


@pytest.mark.parametrize(
    ("value", "unc", "expected"),
    [
        # two significant digits of the uncertainty, value to the same place (common practice,
        # Particle Data Group rounding, from memory)
        (1.29983, 0.00153, ("1.2998", "0.0015")),
        (8.04412, 0.0571, ("8.044", "0.057")),
        (195.137, 2.43, ("195.1", "2.4")),
        (1234.5, 27.0, ("1234", "27")),
    ],
)
def test_value_and_uncertainty_rounding(value, unc, expected):
    assert format_measured(value, unc) == expected


def test_limits_text():
    assert format_limits(0.9, 1.1) == "0.9 … 1.1"
    assert format_limits(None, 20.0) == "≤ 20"
    assert format_limits(150.0, None) == "≥ 150"
