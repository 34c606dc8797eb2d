"""Round trips: every open format read back with its own reference reader (pyarrow, pandas,
uproot) and compared with what the store hands back, value for value."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import optimize, stats

from sequencer import results
from sequencer.cli import attach_commands, cli
from sequencer.errors import MissingExtra
from sequencer.results.formats import need, read_root, write_parquet, write_root
from sequencer.results.tables import Selection, read_table
from sequencer.store import EXPORT_COLUMNS, export_rows

pa = pytest.importorskip("pyarrow")
pq = pytest.importorskip("pyarrow.parquet")
pd = pytest.importorskip("pandas")
uproot = pytest.importorskip("uproot")


def _same(a, b) -> bool:
    """Equal, NaN/None as missing on both sides, floats to the last bit."""
    missing = lambda v: v is None or (isinstance(v, float) and math.isnan(v))  # noqa: E731
    if missing(a) or missing(b):
        return missing(a) and missing(b)
    if isinstance(a, float) or isinstance(b, float):
        return float(a).hex() == float(b).hex()
    return a == b


def _invoke(*args: str):
    attach_commands()
    return CliRunner().invoke(cli, list(args))


def test_parquet_measurements_equal_the_store(recorded, out: Path) -> None:
    url, store = recorded
    path = out / "m.parquet"
    result = _invoke("export", "--db", url, "--format", "parquet", "--out", str(path))
    assert result.exit_code == 0, result.output
    table = pq.read_table(path)  # reference reader: pyarrow
    assert table.column_names == list(EXPORT_COLUMNS)  # DESIGN.md export columns, in order
    assert table.schema.field("procedure_version").type == pa.string()  # versions stay text
    assert str(table.schema.field("started_at").type) == "timestamp[us, tz=UTC]"
    got = table.to_pylist()
    want = export_rows(store)
    assert len(got) == len(want) > 0
    for g, w in zip(got, want, strict=True):
        for col in EXPORT_COLUMNS:
            if col == "started_at":
                assert g[col].isoformat() == w[col]
            else:
                assert _same(g[col], w[col]), (col, g[col], w[col])


def test_pandas_api_loads_a_batch_in_one_line(recorded) -> None:
    url, store = recorded
    df = results.measurements(url, batch="NR-B07")
    runs_of_batch = {r.id for r in store.list_runs(batch="NR-B07")}
    assert set(df["run_id"]) == runs_of_batch and len(runs_of_batch) == 2
    want = [m for m in store.measurements() if m.run_id in runs_of_batch]
    assert len(df) == len(want)
    assert [float(v) if v == v else None for v in df["value"]] == [m.value for m in want]
    assert df["procedure_version"].map(type).eq(str).all()
    runs = results.runs(url)
    verdicts = dict(zip(runs["board"], runs["verdict"], strict=True))
    # NR-PA8-0002 channel 2 was recorded with a gain 30 % high: outside 0.9 … 1.1
    assert verdicts == {"NR-PA8-0001": "pass", "NR-PA8-0002": "fail", "NR-PA8-0003": "pass"}
    assert str(runs["started_at"].dtype).startswith("datetime64")


def test_traces_round_trip_through_parquet_and_root(recorded, out: Path) -> None:
    _url, store = recorded
    table = read_table(store, "traces", Selection(board="NR-PA8-0001"))
    stored = store.traces(table.rows[0]["run_id"])
    assert len(table.rows) == len(stored) > 0
    write_parquet(table, out / "t.parquet")
    write_root([table], out / "t.root")
    back = pq.read_table(out / "t.parquet").to_pylist()
    root = read_root(out / "t.root", "traces")
    for i, t in enumerate(stored):
        want = np.asarray(t.volts, dtype=np.float64)
        assert np.array_equal(np.asarray(back[i]["samples_V"]), want)
        assert np.array_equal(root["samples_V"][i], want)
        assert back[i]["step"] == root["step"][i] == t.path
        assert root["dt_s"][i] == t.dt_s and back[i]["n_samples"] == want.size
        assert root["channel"][i] == back[i]["channel"] == t.labels.get("channel")


def test_root_measurements_are_ttrees_equal_to_the_store(recorded, out: Path) -> None:
    url, store = recorded
    path = out / "m.root"
    result = _invoke("export", "--db", url, "--run", "2", "--format", "root", "--out", str(path))
    assert result.exit_code == 0, result.output
    with uproot.open(path) as f:  # reference reader: uproot
        assert f.classnames()["measurements;1"] == "TTree"
    got = read_root(path, "measurements")
    want = export_rows(store, run_id=2)
    assert len(got["run_id"]) == len(want) > 0
    for i, w in enumerate(want):
        for col in EXPORT_COLUMNS:
            g = got[col][i]
            if col == "started_at":
                assert g.isoformat() == w[col]
            else:
                assert _same(g, w[col]), (col, g, w[col])


def test_exported_transfer_points_give_the_stored_gain(recorded) -> None:
    """The series are the points the stored fit was made on: numpy's least-squares line through
    the exported (amplitude, height) points reproduces the stored gain (numpy.polyfit as the
    reference; the engine's fit is the same ordinary least squares)."""
    url, store = recorded
    df = results.series(url, run=1)
    gains = {(m.channel, m.output): m.value for m in store.measurements(run_id=1) if m.quantity == "gain"}
    transfer = df[df["series"] == "transfer"]
    assert set(zip(transfer["channel"], transfer["output"], strict=True)) == set(gains)
    for (ch, output), curve in transfer.groupby(["channel", "output"]):
        slope, _ = np.polyfit(curve["x"].to_numpy(float), curve["y"].to_numpy(float), 1)
        assert slope == pytest.approx(gains[(ch, output)], rel=1e-6)


def test_exported_s_curve_points_give_the_stored_threshold(recorded) -> None:
    """S-curve counts fitted with ε(thr) = norm.sf(thr, μ, σ) (REFERENCES.md "Threshold scans",
    scipy as the reference) give back the stored 50 % threshold within a tenth of σ."""
    url, store = recorded
    df = results.series(url, run=1)
    thresholds = {m.channel: m.value for m in store.measurements(run_id=1) if m.quantity == "threshold_mV"}
    s_curves = df[df["series"] == "s_curve"]
    assert set(s_curves["channel"]) == set(thresholds)
    for ch, curve in s_curves.groupby("channel"):
        x, k, n = curve["x"].to_numpy(float), curve["y"].to_numpy(float), int(curve["trials"].iloc[0])
        assert ((k >= 0) & (k <= n)).all()
        (mu, sigma), _ = optimize.curve_fit(lambda t, m, s: stats.norm.sf(t, m, s), x, k / n, p0=(x.mean(), 1.0))
        assert mu == pytest.approx(thresholds[ch], abs=0.1 * abs(sigma))


def test_export_filters_and_refusals(recorded, out: Path) -> None:
    url, _ = recorded
    text = _invoke("export", "--db", url, "--batch", "NR-B08").output
    assert {line.split(",")[6] for line in text.splitlines()[1:]} == {"NR-PA8-0003"}
    no_out = _invoke("export", "--db", url, "--format", "parquet")
    assert no_out.exit_code == 2 and "--out" in no_out.output
    csv_traces = _invoke("export", "--db", url, "--what", "traces", "--format", "csv")
    assert csv_traces.exit_code == 2 and "sample array" in csv_traces.output
    missing = _invoke("export", "--db", url, "--what", "series", "--run", "99")
    assert missing.exit_code == 2 and "no run 99" in missing.output


def test_a_missing_library_names_the_extra() -> None:
    with pytest.raises(MissingExtra, match=r"pip install 'benchwright\[data\]'"):
        need("benchwright_no_such_module", "data", "Parquet export")


def test_transfer_residuals_are_the_distance_to_the_stored_line(recorded) -> None:
    """residual = height − (gain · amplitude + offset) with the stored gain and offset_mV
    (the definition of a residual from the best-fit line, IEEE Std 1241 / REFERENCES.md)."""
    url, store = recorded
    df = results.series(url, run=1)
    fit = {(m.channel, m.output, m.quantity): m.value for m in store.measurements(run_id=1)}
    transfer = df[df["series"] == "transfer"]
    assert transfer["residual"].notna().all()
    for _, p in transfer.iterrows():
        line = fit[(p["channel"], p["output"], "gain")] * p["x"] + fit[(p["channel"], p["output"], "offset_mV")]
        assert p["residual"] == pytest.approx(p["y"] - line, abs=1e-6 * max(1.0, abs(p["y"])))


def test_mean_pulse_series_is_the_stored_pulse(recorded) -> None:
    """The exported mean pulse of each channel is the one the engine stored with its timing step:
    its maximum (numpy.argmax as the reference) sits at the peak landmark the engine recorded,
    within one sample, and after the trigger."""
    from sequencer.reports.evidence import gather_evidence, snapshot_run

    url, store = recorded
    df = results.series(url, run=1)
    pulses = df[df["series"] == "pulse"]
    snap = snapshot_run(store, 1)
    stored = {ch: gather_evidence(snap, ch)[2] for ch in snap.channels}
    assert set(pulses["channel"]) == {ch for ch, p in stored.items() if p}
    for ch, curve in pulses.groupby("channel"):
        (pulse,) = stored[ch]
        t, y = curve["x"].to_numpy(float), curve["y"].to_numpy(float)
        assert len(y) == len(pulse.samples_mV) and np.array_equal(y, np.asarray(pulse.samples_mV))
        assert pulse.peak_ns is not None and t[np.argmax(y)] > 0.0
        assert abs(t[np.argmax(y)] - pulse.peak_ns) <= pulse.dt_ns


def test_several_tables_in_one_root_file(recorded, out: Path) -> None:
    url, store = recorded
    path = out / "batch.root"
    result = _invoke("export", "--db", url, "--batch", "NR-B07", "--what", "measurements", "--what", "series",
                     "--what", "runs", "--format", "root", "--out", str(path))  # fmt: skip
    assert result.exit_code == 0, result.output
    with uproot.open(path) as f:
        trees = {k.split(";")[0] for k, v in f.classnames().items() if v == "TTree"}
    assert {"measurements", "series", "runs"} <= trees
    runs = read_root(path, "runs")
    assert runs["run_id"] == [r.id for r in store.list_runs(batch="NR-B07")]
    assert runs["procedure_version"] == ["2.0", "2.0"]  # versions stay text
    refused = _invoke("export", "--db", url, "--what", "series", "--what", "runs", "--format", "parquet",
                      "--out", str(out / "x.parquet"))  # fmt: skip
    assert refused.exit_code == 2 and "--format root" in refused.output


def test_a_stored_spectrum_exports_bin_centres_counts_and_model(tmp_path: Path) -> None:
    """A finger spectrum as the sensor analysis stores it (its own spectrum_series builder): the
    export gives one row per bin at the bin centre (numpy as the reference for the midpoints), the
    counts and the fitted model, in the step's path."""
    from datetime import UTC, datetime

    from sequencer.engine.steps.sensor_analysis import spectrum_series
    from sequencer.events import StepFinished, StepStarted
    from sequencer.store import Store
    from tests.sequencer.store.scenario import run_info

    edges = np.linspace(-5.0, 45.0, 26)  # mV, 25 bins
    counts = np.random.default_rng(3).poisson(40.0, 25).astype(float)
    model = counts + 0.5
    at = datetime(2026, 3, 2, 9, 0, tzinfo=UTC)
    url = f"sqlite:///{tmp_path / 'r.db'}"
    with Store.open(url) as store:
        run_id = store.create_run(run_info("NR-SP4-0001"), at)
        path = "sensor/ch2/fingers"
        store.handle(StepStarted(run_id, path, "analyse.fingers", 0, 1, at))
        series = spectrum_series(2, "finger spectrum", "mV", edges, counts, model)
        store.handle(StepFinished(run_id, path, "analyse.fingers", "completed", at, at, {}, {"series": [series]}))
    df = results.series(url, run=run_id)
    assert list(df["series"].unique()) == ["spectrum"] and set(df["step"]) == {path}
    assert np.allclose(df["x"].to_numpy(float), (edges[:-1] + edges[1:]) / 2.0)
    assert list(df["y"]) == list(counts) and list(df["fit"]) == list(model)
    assert set(df["x_unit"]) == {"mV"} and set(df["channel"]) == {2}


@pytest.mark.parametrize("what", ["measurements", "runs"])
def test_csv_versions_stay_text_with_the_documented_dtypes(recorded, what: str) -> None:
    # CSV carries no types.  pandas' reader infers a float from "2.0" whether or not the field is
    # quoted (seen with pandas 3.1: '"1.0"' reads as float64 too, so quoting would not help), so
    # issue 22's "pandas reads 1.0 as a float" is what the default read does; the fix is the dtype
    # the package documents (sequencer.results.csv_dtypes), checked here on the real export.
    guessed_quoted = pd.read_csv(io.StringIO('v\n"1.0"\n'))
    assert guessed_quoted["v"].dtype.kind == "f"
    url, _store = recorded
    result = _invoke("export", "--db", url, "--what", what, "--format", "csv")
    assert result.exit_code == 0, result.output
    guessed = pd.read_csv(io.StringIO(result.output))
    assert guessed["procedure_version"].dtype.kind == "f"  # the pitfall: 2.0, a float
    typed = pd.read_csv(io.StringIO(result.output), dtype=results.csv_dtypes(what))
    assert list(typed["procedure_version"].unique()) == ["2.0"]
    assert typed["procedure_version"].map(type).eq(str).all()
    assert typed["board"].tolist()[0].startswith("NR-PA8-")
    # numbers stay numbers: only the text columns are named
    assert "run_id" not in results.csv_dtypes(what)
    assert typed["run_id"].dtype.kind == "i"


def test_csv_dtypes_name_the_table() -> None:
    with pytest.raises(ValueError, match="one of runs, measurements"):
        results.csv_dtypes("measurement")


def test_trace_export_carries_each_traces_stored_meta(recorded, out: Path) -> None:
    """The capture's meta (``rails_mV``, the scope input's range kept for the clipping check,
    revision 0008) is exported with its trace: JSON from the command, Parquet and ROOT read back
    with their reference readers (pyarrow, uproot)."""
    import json

    from sequencer.engine.steps.scope import RAILS_META
    from tests.sequencer.reports.simulated_runs import CAPTURE_RAILS_MV

    url, store = recorded
    stored = store.traces(1)
    assert stored and all(dict(t.meta) == {RAILS_META: CAPTURE_RAILS_MV} for t in stored)
    done = _invoke("export", "--db", url, "--run", "1", "--what", "traces", "--format", "json")
    assert done.exit_code == 0, done.output
    rows = json.loads(done.stdout)
    assert len(rows) == len(stored)
    assert [json.loads(r["meta"]) for r in rows] == [dict(t.meta) for t in stored]
    table = read_table(store, "traces", Selection(run_id=1))
    write_parquet(table, out / "t.parquet")
    write_root([table], out / "t.root")
    back = pq.read_table(out / "t.parquet").to_pylist()
    root = read_root(out / "t.root", "traces")
    for i, t in enumerate(stored):
        assert json.loads(back[i]["meta"]) == json.loads(str(root["meta"][i])) == dict(t.meta)
