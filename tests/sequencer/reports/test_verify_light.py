"""verify through the standard library's sqlite3 (``store.light_records``, issue 21 item 4): the
same records as the Store, the same certificates, and tampering on either side still found.

Reference: SQLAlchemy itself -- the same database read through the ``Store`` and through
``LightRecords`` must give equal records (traces sample for sample) and certificates with the
same SHA-256 (``certificate_data.data_sha256``).
"""

from __future__ import annotations

import dataclasses
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.inputs import RunInput
from sequencer.reports.certificate_data import data_sha256, gather_certificates
from sequencer.store import Store
from sequencer.store.light_records import LightRecords, open_records
from tests.sequencer.test_cli_start import PROBE

from .simulated_runs import PROCEDURE_TEXT, RunSpec, record_run
from .test_verify import _copy_db, _tamper_db

CAVEATS = ("procedure text changed since version 2.0 was first run", "instrument checks overridden")


@pytest.fixture(scope="module")
def with_caveats(tmp_path_factory):
    """A run that also stored its texts and two caveats (the certified run stores neither)."""
    db = tmp_path_factory.mktemp("caveats") / "results.db"
    spec = RunSpec(channels=2, full=False, caveats=CAVEATS,
                   inputs=(RunInput("procedure", "pa8-qualify.yaml", PROCEDURE_TEXT),
                           RunInput("limits", "PA8.yaml", "gain: {low: 1, high: 2}\n")))
    with Store.open(f"sqlite:///{db}") as store:
        yield store, record_run(store, spec), db


def _plain(value):
    """A record as comparable text: NaN equal to NaN, arrays by their bytes and dtype."""
    if isinstance(value, np.ndarray):
        return (str(value.dtype), value.shape, value.tobytes())
    if isinstance(value, float) and math.isnan(value):
        return "nan"
    if hasattr(value, "__dataclass_fields__"):
        return (type(value).__name__, {k: _plain(getattr(value, k)) for k in value.__dataclass_fields__})
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return value


def test_light_records_equal_the_stores(certified, with_caveats):
    store, run_id, _, db = certified
    other, other_id, other_db = with_caveats
    with LightRecords.open(f"sqlite:///{other_db}") as light:
        for query in ("caveats", "run_inputs", "get_run"):
            ours, theirs = getattr(light, query)(other_id), getattr(other, query)(other_id)
            assert ours and _plain(ours) == _plain(theirs), query
        assert light.caveats(other_id) == list(CAVEATS)
        ours = {d.channel: data_sha256(d) for d in gather_certificates(light, other_id)}
        assert ours == {d.channel: data_sha256(d) for d in gather_certificates(other, other_id)}
    with LightRecords.open(f"sqlite:///{db}") as light:
        run = store.get_run(run_id)
        assert _plain(light.get_run(run_id)) == _plain(run)
        assert run.started_at.tzinfo is not None and light.get_run(run_id).started_at == run.started_at
        for query, args in [
            ("runs_of_batch", (run.batch,)),
            ("measurements", (run_id,)),
            ("completed_steps", (run_id,)),
            ("safety_events", (run_id,)),
            ("quantity_series", (run.board, "gain")),
        ]:
            ours, theirs = getattr(light, query)(*args), getattr(store, query)(*args)
            assert ours, query  # the scenario stores some of each: a comparison of two empties proves nothing
            assert _plain(ours) == _plain(theirs), query
        steps = light.completed_steps(run_id)
        assert sum(len(s.traces) for s in steps.values()) > 0  # traces decoded, not skipped
        assert len(light.safety_events(run_id)) == len(store.safety_events(run_id))
        ours = {d.channel: data_sha256(d) for d in gather_certificates(light, run_id)}
        theirs = {d.channel: data_sha256(d) for d in gather_certificates(store, run_id)}
        assert len(ours) == 8 and ours == theirs
        with pytest.raises(Exception, match=f"no run {run_id + 99}"):
            light.get_run(run_id + 99)


def test_open_records_leaves_what_it_cannot_read_to_the_store(certified):
    _, _, _, db = certified
    with open_records(f"sqlite:///{db}") as light:
        assert isinstance(light, LightRecords)
    with open_records(f"sqlite:///{db}?timeout=20") as full:  # driver options: the Store's
        assert isinstance(full, Store)


def _verify(db_url: str, certificate: Path):
    attach_commands()
    return CliRunner().invoke(cli, ["verify", "--db", db_url, str(certificate)])


@pytest.mark.parametrize("options", ["", "?timeout=20"])  # light path, Store path
def test_verify_command_on_both_paths_passes_untouched_and_names_tampering(certified, tmp_path, options):
    _, run_id, paths, db = certified
    for suffix in (".pdf", ".html"):
        path = next(p for p in paths if p.suffix == suffix and p.stem.endswith("CH02"))
        done = _verify(f"sqlite:///{db}{options}", path)
        assert done.exit_code == 0, done.output
        assert "matches the database" in done.output
    copy = _copy_db(db, tmp_path)
    _tamper_db(copy, run_id, 2, "gain", "x5")
    for suffix in (".pdf", ".html"):
        path = next(p for p in paths if p.suffix == suffix and p.stem.endswith("CH02"))
        done = _verify(f"sqlite:///{copy}{options}", path)
        assert done.exit_code == 1
        assert "DOES NOT MATCH" in done.stderr and "(certificate != database)" in done.stderr
    html = next(p for p in paths if p.suffix == ".html" and p.stem.endswith("CH04"))
    edited = tmp_path / html.name
    data_start = html.read_text(encoding="utf-8")
    edited.write_text(data_start.replace('"operator":"i.lindqvist"', '"operator":"someone else"'),
                      encoding="utf-8")
    assert edited.read_text(encoding="utf-8") != data_start
    done = _verify(f"sqlite:///{db}{options}", edited)
    assert done.exit_code == 1
    assert "embedded data does not match the SHA-256" in done.stderr


def test_verify_of_an_sqlite_file_imports_no_database_toolkit(certified):
    _, _, paths, db = certified
    html = next(p for p in paths if p.suffix == ".html")
    for options, toolkit in (("", set()), ("?timeout=20", {"sqlalchemy", "alembic"})):
        done = subprocess.run([sys.executable, "-c", PROBE, "verify", "--db", f"sqlite:///{db}{options}",
                               str(html)], capture_output=True, text=True, timeout=120, check=True)
        seen = json.loads(done.stdout.strip().splitlines()[-1])
        assert seen["code"] == 0, done.stderr
        assert "sqlite3" in seen["modules"]
        # control: the Store path (driver options) does load them, so the probe can see them
        assert {"sqlalchemy", "alembic"} & set(seen["modules"]) == toolkit
        assert [m for m in ("matplotlib", "scipy", "pyvisa") if m in seen["modules"]] == []
        if not options:  # the light path decodes no trace, so needs no numpy (~0.3 G instructions)
            assert "numpy" not in seen["modules"]


class _AlwaysTraces:
    """A reader that hands every step back with its traces, whatever the caller asked for."""

    def __init__(self, reader):
        self._reader = reader
        self.asked: list[bool] = []

    def __getattr__(self, name):
        return getattr(self._reader, name)

    def completed_steps(self, run_id, *, traces=True):
        self.asked.append(traces)
        return self._reader.completed_steps(run_id)


def test_certificates_read_no_trace_and_print_nothing_derived_from_one(certified):
    """verify reads no trace: no certificate field may then come from the ``traces`` table, or a
    trace edited in the database would go unnoticed.  Control: the same run gathered with every
    trace decoded gives certificates with the same SHA-256, on both readers."""
    store, run_id, _, db = certified
    with LightRecords.open(f"sqlite:///{db}") as light:
        for reader in (store, light):
            with_traces = _AlwaysTraces(reader)
            full = {d.channel: data_sha256(d) for d in gather_certificates(with_traces, run_id)}
            assert with_traces.asked == [False]  # the reports ask for none
            assert sum(len(s.traces) for s in reader.completed_steps(run_id).values()) > 0
            assert full == {d.channel: data_sha256(d) for d in gather_certificates(reader, run_id)}
            lean = reader.completed_steps(run_id, traces=False)
            assert sum(len(s.traces) for s in lean.values()) == 0
            whole = reader.completed_steps(run_id)
            assert lean.keys() == whole.keys()
            for path, step in lean.items():  # everything else as read with the traces
                assert _plain(dataclasses.replace(step, traces=whole[path].traces)) == _plain(whole[path])
