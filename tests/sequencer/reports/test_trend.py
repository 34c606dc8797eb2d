"""Trend: control band from reference runs, flags, drift warning, CSV and PNG."""

from __future__ import annotations

import csv
import io
import math
import statistics
from datetime import timedelta

import numpy as np
import pytest

from sequencer.reports import plot_trend, trend, trend_csv
from sequencer.store import Store

from .simulated_runs import T0, RunSpec, record_run

WEEKS = 10
DRIFT = 0.02  # V/V added to the last week's ch 1 x1 gain: 1.0 -> ~1.02, inside 0.9-1.1


DRIFTING, STEADY = "NR-PA8-0001", "NR-PA8-0002"


@pytest.fixture(scope="module")
def weekly(tmp_path_factory):
    """Two boards with ten weekly runs each, the first with a drift in its last week."""
    with Store.open(f"sqlite:///{tmp_path_factory.mktemp('trend') / 'results.db'}") as store:
        values = _weekly(store, DRIFTING, DRIFT)
        _weekly(store, STEADY, 0.0)
        yield store, values


def _weekly(store, board: str, drift: float) -> list[tuple[float, float]]:
    """Ten weekly repeats of one board; week-to-week scatter 0.001 V/V, drift in the last."""
    jitter = np.random.default_rng(5).normal(0.0, 0.001, WEEKS)
    jitter[-1] += drift
    stored = []
    for week in range(WEEKS):
        spec = RunSpec(
            board=board, channels=2, seed=11, full=False, started_at=T0 + timedelta(weeks=week)
        )

        def tweak(q, ch, out, v, week=week):
            return v + jitter[week] if (q, ch, out) == ("gain", 1, "x1") else v

        record_run(store, spec, tweak)
    for p in store.quantity_series(board, "gain", channel=1, output="x1"):
        stored.append((p.value, p.uncertainty or 0.0))
    return stored


def test_drift_inside_limits_is_flagged(weekly):
    store, stored = weekly
    values = [v for v, _ in stored]
    r = trend(store, DRIFTING, "gain", channel=1, output="x1", reference_runs=5)
    # Shewhart individuals band (common practice): mean ± 3 s of the first 5, s the sample standard
    # deviation (stdlib statistics as the reference) combined in quadrature with the RMS of the
    # values' stated uncertainties.
    stated = math.sqrt(statistics.fmean(u * u for _, u in stored[:5]))
    mean, s = statistics.mean(values[:5]), math.hypot(statistics.stdev(values[:5]), stated)
    assert r.centre == pytest.approx(mean, rel=1e-12)
    assert (r.band_low, r.band_high) == (pytest.approx(mean - 3 * s), pytest.approx(mean + 3 * s))
    assert [p.outside_band for p in r.points] == [
        not (mean - 3 * s <= v <= mean + 3 * s) for v in values
    ]
    assert r.points[-1].outside_band and r.points[-1].verdict == "pass"
    assert r.drift and "drift" in r.warning and str(r.points[-1].run_id) in r.warning
    assert [p.run_id for p in r.flagged] == [r.points[-1].run_id]


def test_no_drift_without_injection(weekly):
    store, _ = weekly
    r = trend(store, STEADY, "gain", channel=1, output="x1")
    assert not r.drift and r.warning == "" and r.flagged == ()


def test_given_band_and_csv(weekly):
    store, _ = weekly
    r = trend(store, DRIFTING, "gain", channel=1, output="x1", band=(0.95, 1.05))
    assert r.band_source == "given" and not r.drift
    rows = list(csv.DictReader(io.StringIO(trend_csv(r))))
    assert len(rows) == WEEKS
    assert (
        rows[0]["band_low"] == "0.95" and rows[0]["low"] == "0.9" and rows[0]["verdict"] == "pass"
    )
    assert [float(row["value"]) for row in rows] == [p.value for p in r.points]


def test_ambiguous_series_asks_for_channel_and_output(weekly):
    store, _ = weekly
    with pytest.raises(ValueError, match="4 series"):
        trend(store, DRIFTING, "gain")


def test_png(weekly, tmp_path):
    store, _ = weekly
    r = trend(store, DRIFTING, "gain", channel=1, output="x1")
    out = plot_trend(r, tmp_path / "trend.png")
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)


def test_all_channels_at_once_and_a_thin_band_warns(weekly):
    from sequencer.reports import trends

    store, _ = weekly
    every = trends(store, DRIFTING, "gain")
    stored_keys = {(m.channel, m.output) for m in store.measurements(board=DRIFTING) if m.quantity == "gain"}
    assert [(r.channel, r.output) for r in every] == sorted(stored_keys)  # by channel, then output
    assert all(len(r.points) == WEEKS for r in every)
    thin = trend(store, DRIFTING, "gain", channel=2, output="x1", reference_runs=WEEKS + 5)
    assert f"rests on {WEEKS} run(s), fewer than the {WEEKS + 5}" in thin.warning
    assert "rests on" not in trend(store, STEADY, "gain", channel=2, output="x1").warning
    assert trend(store, DRIFTING, "gain", channel=1, output="x1", procedure="no-such-procedure").points == ()


def test_small_multiples_png(weekly, tmp_path):
    from sequencer.reports import plot_trends, trends

    store, _ = weekly
    path = plot_trends(trends(store, STEADY, "gain"), tmp_path / "all.png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    with pytest.raises(ValueError):
        plot_trends([], tmp_path / "none.png")
