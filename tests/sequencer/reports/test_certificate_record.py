"""A certificate is verifiable as a whole (issue 16): every printed field of the PDF and the HTML is
checked against the embedded data (whose SHA-256 is printed) and the data against the database;
an edit of any printed field fails and names the field.  And no certificate says more than the run
measured: caveats are printed, unjudged values of limited quantities are counted and keep the
verdict from reading "every judged value within its limits"."""

from __future__ import annotations

import re
from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import pytest
from pypdf import PdfReader, PdfWriter

from sequencer.events import Measurement, MeasurementMade, RunFinished, StepFinished, StepStarted
from sequencer.reports import certify_run, gather_certificates, verify_certificate
from sequencer.reports.certificate_view import closing_fields, printed_fields, table_fields
from sequencer.reports.pdf_layout import pdf_text
from sequencer.store import Store

from .simulated_runs import T0, RunSpec, record_run, run_info

CAVEAT = "instrument check overridden by i.lindqvist: scope: calibration was due 2025-01-01"


@pytest.fixture(scope="module")
def certified(tmp_path_factory: pytest.TempPathFactory):
    base = tmp_path_factory.mktemp("record")
    with Store.open(f"sqlite:///{base / 'results.db'}") as store:
        run_id = record_run(store, RunSpec(channels=2))
        store.add_caveat(run_id, CAVEAT)
        pdf, html, *_ = certify_run(store, run_id, base / "certs", workers=1)
        data = gather_certificates(store, run_id)[0]
        yield store, data, pdf, html


def _keys(data) -> list[str]:
    """The header fields, verdict, judgement, caveats, hash, and one cell of every table column."""
    keys = [k for k, _ in printed_fields(data) + closing_fields(data)] + ["data_sha256"]
    seen: set[tuple[str, str]] = set()
    for row, columns, _ in table_fields(data):
        table = row.split(".")[0]
        for col in columns:
            if (table, col) not in seen:
                seen.add((table, col))
                keys.append(f"{row}.{col}")
    return keys


def test_the_qa_block_is_printed(certified):
    """Decision rule with coverage factor, test conditions, the bias record summarised (peak V and
    I, ramp rate, interlock, acknowledgement), the approval block; readable quantity names."""
    store, _, pdf, html = certified
    text = html.read_text(encoding="utf-8")
    assert "Decision rule: simple acceptance" in text and "coverage factor k = 1" in text
    # simulated_runs: bias ramped 0 -> 42 V at 5 V/s, leakage read at 8.4 nA
    assert "Peak bias voltage: 42 V" in text and "Ramp rate: up to 5 V/s" in text
    assert "Tested by i.lindqvist" in text and "Reviewed by ____" in text
    assert ">Gain<" in text and ">gain<" not in text
    assert verify_certificate(store, html).ok and verify_certificate(store, pdf).ok


def test_the_caveat_and_the_judgement_are_printed(certified):
    store, data, pdf, html = certified
    assert data.caveats == (CAVEAT,)
    text = html.read_text(encoding="utf-8")
    assert f"Caveat: {CAVEAT}" in text
    page = " ".join(" ".join(p.extract_text() for p in PdfReader(str(pdf)).pages).split())
    assert f"Caveat: {CAVEAT}" in page
    assert "unjudged values of limited quantities: 0" in page
    assert verify_certificate(store, pdf).ok and verify_certificate(store, html).ok


def test_every_printed_field_of_the_html_is_marked(certified):
    _, data, _, html = certified
    marked = set(re.findall(r'data-field="([^"]+)"', html.read_text(encoding="utf-8")))
    expected = {k for k, _ in printed_fields(data) + closing_fields(data)} | {"data_sha256"}
    expected |= {f"{row}.{col}" for row, columns, _ in table_fields(data) for col in columns}
    assert marked == expected
    assert {"header.board_serial", "header.operator", "instruments.0.calibration_due",
            "instruments.0.calibrated", "quantities.0.limits", "quantities.0.uncertainty", "verdict", "caveats.0",
            "decision_rule", "bias.peak_bias_voltage", "approval.tested_by"} <= marked


def test_an_edit_of_each_printed_html_field_is_named(certified, tmp_path: Path):
    store, data, _, html = certified
    text = html.read_text(encoding="utf-8")
    for key in _keys(data):
        marker = f'data-field="{key}">'
        at = text.index(marker) + len(marker)
        while text[at] == "<":  # the field's first text: past any opening tag (<dt>)
            at = text.index(">", at) + 1
        forged = tmp_path / "forged.html"
        forged.write_text(text[:at] + "X" + text[at:], encoding="utf-8")
        result = verify_certificate(store, forged)
        assert not result.ok, key
        assert any(d.startswith(f"printed {key}: ") for d in result.differences), (key, result)


def _pdf_literal(text: str) -> bytes:
    """How fpdf2 shows a Latin-1 text in a content stream with the core font (symbols spelled)."""
    escaped = pdf_text(text, False).replace("\\", "\\\\").replace("(", "\\(").replace(")", "\\)")
    return b"(" + escaped.encode("latin-1") + b") Tj"  # PDF 32000-1 7.3.4.2: \( \) \\ in strings


def _edit_pdf(pdf: Path, old: str, out: Path) -> bool:
    """Write ``pdf`` with the last character of the one string ``old`` shown on its pages changed;
    False when the string is not shown exactly once."""
    reader = PdfReader(str(pdf))
    writer = PdfWriter(clone_from=reader)
    hits = [
        (page, page.get_contents())
        for page in writer.pages
        if _pdf_literal(old) in page.get_contents().get_data()
    ]
    total = sum(c.get_data().count(_pdf_literal(old)) for _, c in hits)
    if total != 1:
        return False
    page, contents = hits[0]
    edited = old[:-1] + ("Y" if old.endswith("X") else "X")
    contents.set_data(contents.get_data().replace(_pdf_literal(old), _pdf_literal(edited)))
    page.replace_contents(contents)
    with out.open("wb") as fh:
        writer.write(fh)
    return True


def test_an_edit_of_each_printed_pdf_field_is_named(certified, tmp_path: Path):
    store, data, pdf, _ = certified
    values = dict(printed_fields(data) + closing_fields(data))
    shown = {k: v.removeprefix(lbl + " ") for k, v in values.items() for lbl in [_label(k, data)]}
    digest = verify_certificate(store, pdf).data_sha256
    shown["data_sha256"] = f"SHA-256 of the certificate data: {digest}"
    for row, columns, cells in table_fields(data):
        shown.update({f"{row}.{col}": cell for col, cell in zip(columns, cells, strict=True)})
    checked = []
    for key, old in shown.items():
        forged = tmp_path / "forged.pdf"
        if not _edit_pdf(pdf, old, forged):
            continue  # shown more than once (e.g. "pass"), or wrapped over two lines
        result = verify_certificate(store, forged)
        assert not result.ok, key
        assert any(d.startswith(f"printed {key}") for d in result.differences), (key, result)
        checked.append(key)
    # every header field (the number is shown twice: title line and header), the verdict, the
    # caveat, the hash, and cells of each table were edited one at a time
    assert {k for k in checked if k.startswith("header.")} == {
        k for k in values if k.startswith("header.")
    } - {"header.certificate_number"}
    # (the decision rule wraps over two lines of the PDF, so it is not one string to edit here)
    assert {"verdict", "caveats.0", "data_sha256", "instruments.0.serial",
            "instruments.0.calibration_due", "instruments.0.calibrated", "bias.interlock",
            "approval.tested_by"} <= set(checked)
    for col in ("value", "uncertainty", "limits"):
        assert any(k.startswith("quantities.") and k.endswith("." + col) for k in checked), col


def _label(key: str, data) -> str:
    from sequencer.reports.certificate_view import field_slug, identity_rows

    return next((lbl for lbl, _ in identity_rows(data) if f"header.{field_slug(lbl)}" == key), "")


def _one_channel_run(
    store: Store, measurements: list[Measurement], results: dict | None = None, inputs: tuple = ()
) -> int:
    run_id = store.create_run(replace(run_info(RunSpec(channels=1)), inputs=inputs), started_at=T0)
    store.handle(StepStarted(run_id, "gain/ch1/fit", "analyse.transfer", 0, 1, T0))
    for m in measurements:
        store.handle(MeasurementMade(run_id, "gain/ch1/fit", m))
    end = T0 + timedelta(seconds=1)
    store.handle(StepFinished(run_id, "gain/ch1/fit", "analyse.transfer", "completed", T0, end,
                              results=results or {}))
    store.handle(RunFinished(run_id, "completed", end))
    return run_id


def test_an_unjudged_value_of_a_limited_quantity_is_counted_and_never_passes(tmp_path: Path):
    judged = Measurement("gain", 1.01, "V/V", 0.002, 1, "x1", None, 0.95, 1.05, "pass")
    # the same quantity measured with no output: the limit set limits gain per output only
    unjudged = Measurement("gain", 5.02, "V/V", 0.01, 1, None, None, None, None, "info")
    no_limit = Measurement("baseline_mV", 0.2, "mV", None, 1, "x1", None, None, None, "info")
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        clean = _one_channel_run(store, [judged, no_limit])
        flawed = _one_channel_run(store, [judged, unjudged, no_limit])
        [ok] = gather_certificates(store, clean)
        [bad] = gather_certificates(store, flawed)
        _, html = certify_run(store, flawed, tmp_path / "c", workers=1)
        assert verify_certificate(store, html).ok
    assert (ok.verdict, ok.unjudged) == ("PASS", 0)
    assert (bad.verdict, bad.unjudged) == ("UNJUDGED", 1)
    text = html.read_text(encoding="utf-8")
    assert "every judged value within its limits" not in text
    assert "unjudged values of limited quantities: 1" in text
    assert "Judged values: 1 pass, 0 fail" in text


def test_a_dead_channel_value_is_printed_with_its_reason(tmp_path: Path):
    # what the engine stores for an analysis that cannot measure (failed_analysis): NaN, fail, and
    # the reason in the step's results
    dead = Measurement("gain", float("nan"), "V/V", None, 1, "x1", None, 0.95, 1.05, "fail")
    reason = "no pulse above the noise: nothing to time"
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        run_id = _one_channel_run(store, [dead], results={"error": reason})
        [data] = gather_certificates(store, run_id)
        pdf, html = certify_run(store, run_id, tmp_path / "c", workers=1)
        assert verify_certificate(store, html).ok and verify_certificate(store, pdf).ok
    assert data.quantities[0].note == reason
    assert f"Not measured: Gain x1: {reason}" in html.read_text(encoding="utf-8")
    assert data.verdict == "FAIL"


def test_a_refused_value_prints_its_stored_reason_beside_it(tmp_path: Path):
    # since store revision 0006 the reason is kept with the measurement: printed in the value's
    # cell (once: no closing note repeats it), covered by verify in both formats
    reason = "clipped: 12 % of samples at the rail"
    dead = Measurement("gain", float("nan"), "V/V", None, 1, "x1", None, 0.95, 1.05, "fail",
                       reason=reason)  # fmt: skip
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        run_id = _one_channel_run(store, [dead], results={"error": "the step's own words"})
        [data] = gather_certificates(store, run_id)
        pdf, html = certify_run(store, run_id, tmp_path / "c", workers=1)
        assert verify_certificate(store, html).ok and verify_certificate(store, pdf).ok
    q = data.quantities[0]
    assert (q.reason, q.note) == (reason, reason)  # the measurement's reason before the step's
    [row] = [cells for key, _, cells in table_fields(data) if key == "quantities.0"]
    assert row[2] == f"— ({reason})"
    text = html.read_text(encoding="utf-8")
    assert f"— ({reason})" in text and "Not measured:" not in text
    assert not [key for key, _ in closing_fields(data) if key.startswith("notes.")]


def test_a_value_within_uncertainty_of_its_limit_says_so(tmp_path: Path):
    # ILAC-G8:09/2019: 1.06 ± 2·0.01 straddles the 1.05 limit: the verdict stays fail and the
    # certificate prints the qualifier beside it; verify covers the printed text
    near = Measurement("gain", 1.06, "V/V", 0.01, 1, "x1", None, 0.95, 1.05, "fail",
                       qualifier="within uncertainty")  # fmt: skip
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        run_id = _one_channel_run(store, [near])
        [data] = gather_certificates(store, run_id)
        pdf, html = certify_run(store, run_id, tmp_path / "c", workers=1)
        assert verify_certificate(store, html).ok and verify_certificate(store, pdf).ok
        text = html.read_text(encoding="utf-8")
        edited = tmp_path / "edited.html"
        edited.write_text(text.replace("FAIL (within uncertainty)", "FAIL"), encoding="utf-8")
        result = verify_certificate(store, edited)
    assert data.quantities[0].qualifier == "within uncertainty"
    assert "FAIL (within uncertainty)" in text
    assert not result.ok and any("quantities.0.verdict" in d for d in result.differences)


def test_certificates_issued_before_qualifiers_still_verify(tmp_path: Path):
    # data embedded before QuantityLine had qualifier/reason has no such keys: an empty qualifier
    # and reason are left out of the canonical form, so the digest is the one printed then
    from sequencer.reports.certificate_data import canonical_dict, data_sha256

    plain = Measurement("gain", 1.01, "V/V", 0.002, 1, "x1", None, 0.95, 1.05, "pass")
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        [data] = gather_certificates(store, _one_channel_run(store, [plain]))
    line = canonical_dict(data)["quantities"][0]
    assert "qualifier" not in line and "reason" not in line and "note" in line
    assert data_sha256(data) == data_sha256(canonical_dict(data))


def test_crosstalk_table_and_plot_name_victim_and_aggressor_alike(certified):
    """DESIGN.md: crosstalk_pct's ``channel`` is the victim, ``aggressor`` the driven one.  The
    results table lists this channel as the victim; the crosstalk plot draws this channel as the
    aggressor, and so does the table beside it."""
    store, data, _, html = certified
    text = html.read_text(encoding="utf-8")
    stored = {(m.channel, m.aggressor): m.value for m in store.measurements(run_id=data.run_id)
              if m.quantity == "crosstalk_pct"}
    [victim_row] = [q for q in data.quantities if q.quantity == "crosstalk_pct"]
    assert (victim_row.channel, victim_row.aggressor) == (1, 2)
    assert victim_row.value == stored[(1, 2)]
    [caused] = data.crosstalk_out
    assert (caused.channel, caused.aggressor, caused.value) == (2, 1, stored[(2, 1)])
    assert "Crosstalk (from ch 2)" in text and "Crosstalk into ch 2" in text
    assert "Crosstalk caused by this channel (channel 1 driven)" in text


GUARDED = """board_type: PA8
version: "3"
decision_rule: {rule: guarded, coverage_factor: 3}
limits:
  - {quantity: gain, output: x1, low: 0.95, high: 1.05, unit: V/V}
"""


def test_the_decision_rule_the_stored_limit_set_states_is_printed(tmp_path: Path):
    from sequencer.inputs import RunInput

    judged = Measurement("gain", 1.01, "V/V", 0.002, 1, "x1", None, 0.95, 1.05, "pass")
    with Store.open(f"sqlite:///{tmp_path / 'r.db'}") as store:
        run_id = _one_channel_run(store, [judged], inputs=(RunInput("limits", "PA8.yaml", GUARDED),))
        [data] = gather_certificates(store, run_id)
        _, html = certify_run(store, run_id, tmp_path / "c", workers=1)
        assert verify_certificate(store, html).ok
    assert data.decision_rule.startswith("guarded acceptance (ILAC-G8:09/2019)")
    assert "k = 3" in data.coverage
    assert "Decision rule: guarded acceptance" in html.read_text(encoding="utf-8")


def test_a_run_without_calibration_dates_prints_and_hashes_as_before(tmp_path: Path):
    # the calibration date (bench key `calibrated`, issue 16) is a column only when the run kept one:
    # a run recorded before it was kept prints the six columns its certificates always had, and its
    # canonical record has no `calibrated` key, so certificates printed before still verify
    import json

    from sequencer.reports.certificate_data import canonical_json

    with Store.open(f"sqlite:///{tmp_path / 'results.db'}") as store:
        info = run_info(RunSpec(channels=1))
        undated = tuple(replace(i, calibrated="") for i in info.instruments)
        run_id = record_run(store, RunSpec(channels=1), instruments=undated)
        pdf, html, *_ = certify_run(store, run_id, tmp_path / "certs", workers=1)
        data = gather_certificates(store, run_id)[0]
        assert all("calibrated" not in i for i in json.loads(canonical_json(data))["instruments"])
        [(_, columns, _)] = [r for r in table_fields(data) if r[0] == "instruments.0"]
        assert columns == ("role", "maker", "model", "serial", "firmware", "calibration_due")
        assert "calibrated" not in html.read_text(encoding="utf-8")
        assert verify_certificate(store, html).ok and verify_certificate(store, pdf).ok


def test_the_calibration_date_is_printed_beside_the_due_date(certified):
    _, data, pdf, _ = certified
    [(_, columns, cells)] = [r for r in table_fields(data) if r[0] == "instruments.0"]
    row = dict(zip(columns, cells, strict=True))  # the bias supply of simulated_runs (roles sorted)
    assert (row["role"], row["calibrated"], row["calibration_due"]) == ("bias", "2024-12-31", "2025-12-31")
    assert columns[-2:] == ("calibrated", "calibration_due")
    page = " ".join(" ".join(p.extract_text() for p in PdfReader(str(pdf)).pages).split())
    assert "2024-12-31" in page and "2025-12-31" in page


def test_a_declared_hardware_interlock_is_printed_and_verified(tmp_path: Path):
    # a supply that cannot report its interlock (issue 14): the run rests on the bench's declared
    # hardware interlock, acknowledged by the operator; the certificate says so instead of
    # "found open" (the unread state is not an open interlock), and verify covers the lines
    wired = "door switch in series with INHIBIT, tested 2026-11-30"
    with Store.open(f"sqlite:///{tmp_path / 'results.db'}") as store:
        run_id = record_run(store, RunSpec(channels=1, hardware_interlock=wired))
        pdf, html, *_ = certify_run(store, run_id, tmp_path / "certs", workers=1)
        text = html.read_text(encoding="utf-8")
        assert f"Interlock: not readable from the supply; hardware interlock declared: {wired}" in text
        assert f"by i.lindqvist at {T0.isoformat()}, with the hardware interlock declared: {wired}" in text
        assert "found open" not in text
        assert verify_certificate(store, html).ok and verify_certificate(store, pdf).ok
        for key in ("bias.interlock", "bias.acknowledgement"):  # the printed line, not the data
            at = text.index(f'data-field="{key}">')
            edited = text[at:].replace("tested 2026-11-30", "tested 2026-12-01", 1)
            forged = tmp_path / "forged.html"
            forged.write_text(text[:at] + edited, encoding="utf-8")
            result = verify_certificate(store, forged)
            assert not result.ok
            assert any(d.startswith(f"printed {key}: ") for d in result.differences), result
