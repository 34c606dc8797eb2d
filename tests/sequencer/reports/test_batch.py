"""Batch summary: yield, statistics, robust outliers (also inside limits), failed channels."""

from __future__ import annotations

from datetime import timedelta

import html5lib
import numpy as np
import pytest
from pypdf import PdfReader
from scipy import stats

from sequencer.reports import batch_report, batch_summary
from sequencer.store import Store

from .simulated_runs import T0, RunSpec, record_run


@pytest.fixture(scope="module")
def batch_store(tmp_path_factory):
    with Store.open(f"sqlite:///{tmp_path_factory.mktemp('batch') / 'results.db'}") as store:
        _batch(store)
        yield store


def _batch(store) -> None:
    # board 2, channel 5: gain 30 % high (fails); board 3, channel 2: gain 6 % high, inside the
    # limits (0.9-1.1 and 4.5-5.5) but far out of a batch whose channels scatter by ~1 %.
    specs = [
        RunSpec(board="NR-PA8-0001", seed=1, full=False),
        RunSpec(board="NR-PA8-0002", seed=2, full=False, gain_scale={5: 1.3}),
        RunSpec(board="NR-PA8-0003", seed=3, full=False, gain_scale={2: 1.06}),
    ]
    for i, spec in enumerate(specs):
        record_run(store, RunSpec(**{**spec.__dict__, "started_at": T0 + timedelta(hours=i)}))
    # a batch of another lab's boards must not leak in
    record_run(store, RunSpec(board="NR-PA8-0099", batch="NR-B08", seed=9, full=False))


def test_yield_and_failed_channels(batch_store):
    store = batch_store
    s = batch_summary(store, "NR-B07")
    assert [b for b, _, _ in s.runs] == ["NR-PA8-0001", "NR-PA8-0002", "NR-PA8-0003"]
    assert (s.channels, s.passed) == (24, 23)
    assert s.yield_fraction == 23 / 24
    (failed,) = s.failed
    assert (failed.board, failed.channel) == ("NR-PA8-0002", 5)
    assert [r.split(" = ")[0] for r in failed.reasons] == ["gain x1", "gain x5"]


def test_robust_statistics_match_scipy(batch_store):
    store = batch_store
    s = batch_summary(store, "NR-B07")
    gain_x1 = next(q for q in s.stats if (q.quantity, q.output) == ("gain", "x1"))
    x = np.asarray(gain_x1.values)
    assert gain_x1.n == 24
    assert gain_x1.median == np.median(x)
    # scipy's scale="normal" is 1/Φ⁻¹(3/4) = 1.482602...; our stated constant is 1.4826
    assert gain_x1.robust_sigma == np.float64(1.4826 * stats.median_abs_deviation(x, scale=1.0))
    assert abs(gain_x1.robust_sigma - stats.median_abs_deviation(x, scale="normal")) < 1e-5
    assert (gain_x1.low, gain_x1.high, gain_x1.n_fail) == (0.9, 1.1, 1)


def test_outliers_include_one_inside_its_limits(batch_store):
    store = batch_store
    s = batch_summary(store, "NR-B07", outlier_sigma=3.5)
    found = {(o.board, o.channel, o.quantity, o.output): o for o in s.outliers}
    inside = found[("NR-PA8-0003", 2, "gain", "x1")]
    assert inside.verdict == "pass" and inside.robust_z > 3.5
    assert found[("NR-PA8-0002", 5, "gain", "x5")].verdict == "fail"
    for o in s.outliers:
        q = next(
            q for q in s.stats if (q.quantity, q.output, q.group) == (o.quantity, o.output, o.group)
        )
        assert abs(o.value - q.median) > 3.5 * q.robust_sigma
    # a wider cut keeps only the gross one
    wide = batch_summary(store, "NR-B07", outlier_sigma=20.0)
    assert ("NR-PA8-0003", 2) not in {(o.board, o.channel) for o in wide.outliers}


def test_text_rendering(batch_store):
    store = batch_store
    summary = batch_summary(store, "NR-B07")
    text = summary.to_text()
    assert text.startswith("batch NR-B07: 3 boards, 24 channels, 23 passed, yield 95.8 %")
    run_2 = next(rid for board, rid, _ in summary.runs if board == "NR-PA8-0002")
    failed_rows = [ln.split()[:3] for ln in text.splitlines() if "gain x1 = " in ln]
    assert failed_rows == [["NR-PA8-0002", str(run_2), "5"]]
    assert "NR-PA8-0099" not in text


def test_pdf_and_html_report(batch_store, tmp_path):
    store = batch_store
    pdf, html = batch_report(store, "NR-B07", tmp_path)
    text = " ".join(p.extract_text() for p in PdfReader(str(pdf)).pages)
    assert "yield 95.8 %" in text and "NR-PA8-0002" in text and "gain" in text
    page = html.read_text(encoding="utf-8")
    html5lib.HTMLParser(strict=True).parse(page)
    assert page.count("data:image/png;base64,") == 8  # gain/offset/inl/noise x two outputs


def test_crosstalk_into_adjacent_and_distant_channels_are_separate_populations(tmp_path):
    # Adjacent victims read ~1 %, the distant control ~0.02 %: one median over both would sit
    # between two clusters and flag one of them wholesale.  Each group's figures are checked
    # against numpy/scipy over that group's own values.
    with Store.open(f"sqlite:///{tmp_path / 'results.db'}") as store:
        for i in range(3):
            record_run(
                store,
                RunSpec(
                    board=f"NR-PA8-00{i + 1:02d}",
                    seed=20 + i,
                    distant_control=True,
                    started_at=T0 + timedelta(hours=i),
                ),
            )
        s = batch_summary(store, "NR-B07")
        ms = [m for r in store.list_runs() for m in store.measurements(run_id=r.id)]
    groups = {q.group: q for q in s.stats if q.quantity == "crosstalk_pct"}
    assert set(groups) == {"adjacent", "distant"}
    for name, q in groups.items():
        x = np.asarray(
            [
                m.value
                for m in ms
                if m.quantity == "crosstalk_pct"
                and (abs(m.channel - m.aggressor) == 1) == (name == "adjacent")
            ]
        )
        assert q.n == x.size and q.median == np.median(x)
        assert abs(q.robust_sigma - stats.median_abs_deviation(x, scale="normal")) < 1e-5
    assert groups["adjacent"].n == 3 * 14 and groups["distant"].n == 3 * 8  # 8 ch: 2·6 + 2·1
    assert not [o for o in s.outliers if o.quantity == "crosstalk_pct"]  # both clusters tight
    text = s.to_text()
    assert "crosstalk_pct (adjacent)" in text and "crosstalk_pct (distant)" in text


def test_an_outlier_row_names_its_crosstalk_group_and_aggressor():
    from sequencer.reports.batch_report import BatchSummary, Outlier, outlier_rows

    o = Outlier(
        board="NR-PA8-0001", channel=3, output="x1", aggressor=2, quantity="crosstalk_pct",
        group="adjacent", value=0.9, robust_z=5.2, verdict="pass",
    )
    s = BatchSummary(
        batch="B", outlier_sigma=3.5, runs=(), channels=0, passed=0, stats=(), outliers=(o,),
        failed=(),
    )
    (row,) = outlier_rows(s)
    assert row[2] == "crosstalk_pct (adjacent, from ch 2)"


def test_board_types_are_never_pooled(tmp_path):
    # A batch of two PA8 boards and a board of another type whose gain differs by design (here half;
    # the demo's inverted type, gain -1, is the same case with a sign): pooled, the healthy channels
    # of the other type would all sit ~50-100 robust sigma from the median and be listed as
    # outliers. Each type is its own population (median as numpy computes it on that type alone).
    with Store.open(f"sqlite:///{tmp_path / 'mixed.db'}") as store:
        specs = [
            RunSpec(board="NR-PA8-0001", seed=1, full=False),
            RunSpec(board="NR-PA8-0002", seed=2, full=False),
            RunSpec(
                board="NR-PA8N-0003",
                board_type="PA8N",
                seed=3,
                full=False,
                gain_scale={ch: 0.5 for ch in range(1, 9)},
            ),
        ]
        for i, spec in enumerate(specs):
            record_run(store, RunSpec(**{**spec.__dict__, "started_at": T0 + timedelta(hours=i)}))
        s = batch_summary(store, "NR-B07", outlier_sigma=3.5)
    gain_x1 = {q.board_type: q for q in s.stats if (q.quantity, q.output) == ("gain", "x1")}
    assert set(gain_x1) == {"PA8", "PA8N"}
    assert (gain_x1["PA8"].n, gain_x1["PA8N"].n) == (16, 8)
    assert gain_x1["PA8N"].median < 0.6 < 0.9 < gain_x1["PA8"].median
    x = np.asarray(gain_x1["PA8N"].values)
    assert gain_x1["PA8N"].median == np.median(x)
    assert not [o for o in s.outliers if o.board == "NR-PA8N-0003" and o.quantity == "gain"]
    assert "gain [PA8N]" in s.to_text() and "gain [PA8]" in s.to_text()


def test_one_board_type_keeps_plain_labels(batch_store):
    s = batch_summary(batch_store, "NR-B07")
    assert {q.board_type for q in s.stats} == {""}
    assert "[PA8]" not in s.to_text()
