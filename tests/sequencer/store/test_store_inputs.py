"""The inputs of a run, stored content-addressed (schema revision 0003), and the upgrade of a
database written by the release before it: every row of every table is kept."""

from __future__ import annotations

import dataclasses

import pytest
import sqlalchemy as sa

from sequencer.inputs import RunInput, text_digest
from sequencer.store import Store
from sequencer.store.connect import open_engine
from sequencer.store.migrate import current_revisions, head_revision, upgrade_to

from .scenario import T0, finished, run_info, safety, step_events

FRAGMENT = "name: scan\nsteps: []\n"
INPUTS = (
    RunInput("procedure", "pa8-gain.yaml", "name: pa8-gain\n"),
    RunInput("include", "parts/scan.yaml", FRAGMENT),
    RunInput("limits", "@limits/PA8.yaml", "board_type: PA8\nlimits: []\n"),
    RunInput("board_type", "PA8", "board_type: PA8\nchannels: 8\n"),
    RunInput("bench", "bench", "bench: bench-2\n"),
    RunInput("dialect", "scope", "scope: {}\n"),
)


def _tables(engine: sa.Engine) -> dict[str, list[tuple]]:
    """Every row of every table, ordered by its first column."""
    with engine.connect() as conn:
        names = [n for n in sa.inspect(conn).get_table_names() if n != "alembic_version"]
        return {
            n: sorted(
                (tuple(str(v) for v in row) for row in conn.execute(sa.text(f"SELECT * FROM {n}"))),
            )
            for n in names
        }


def test_inputs_are_stored_once_and_read_back(store):
    info = dataclasses.replace(run_info(), inputs=INPUTS)
    a = store.create_run(info, T0)
    b = store.create_run(info, T0)
    assert store.run_inputs(a) == INPUTS == store.run_inputs(b)
    with store.engine.connect() as conn:
        # content-addressed: the fragment's text is one document however many runs use it
        count = conn.execute(
            sa.text("SELECT count(*) FROM documents WHERE text = :t"), {"t": FRAGMENT}
        ).scalar_one()
    assert count == 1


def test_inputs_are_append_only(store):
    run = store.create_run(dataclasses.replace(run_info(), inputs=INPUTS), T0)
    for statement in ("UPDATE run_inputs SET name = 'x'", "DELETE FROM run_inputs"):
        with pytest.raises(sa.exc.DatabaseError), store.engine.begin() as conn:
            conn.execute(sa.text(statement))
    assert len(store.run_inputs(run)) == len(INPUTS)


def test_text_digests_tell_a_changed_fragment_apart(store):
    first = store.create_run(dataclasses.replace(run_info(), inputs=INPUTS), T0)
    changed = tuple(
        RunInput(i.kind, i.name, FRAGMENT + "# edited\n") if i.kind == "include" else i
        for i in INPUTS
    )
    bench_only = tuple(
        RunInput(i.kind, i.name, "bench: bench-3\n") if i.kind == "bench" else i for i in INPUTS
    )
    second = store.create_run(dataclasses.replace(run_info(), inputs=changed), T0)
    store.create_run(dataclasses.replace(run_info(), inputs=bench_only), T0)
    found = store.text_digests("pa8-gain", "1.2")
    # another bench is the same procedure text; an edited fragment is not
    assert found == {text_digest(INPUTS): first, text_digest(changed): second}
    assert store.text_digests("pa8-gain", "1.3") == {}


def test_caveats_are_kept_with_the_run(store):
    run = store.create_run(dataclasses.replace(run_info(), caveats=("overridden: scope",)), T0)
    assert store.caveats(run) == ["overridden: scope"]
    assert store.caveats(store.create_run(run_info(), T0)) == []


def test_upgrade_of_a_database_written_by_the_previous_release_keeps_every_row(db_url):
    """Today's release writes schema 0002: rows are recorded here, the schema taken back to 0002
    (what that release could store: no inputs, no lease columns), then opening with this version
    upgrades it."""
    from alembic import command

    from sequencer.store.connect import writer
    from sequencer.store.migrate import _config

    engine = open_engine(db_url)
    try:
        upgrade_to(engine)
        old = Store(engine)  # the constructor does not migrate
        run_ids = []
        for board in ("NR-PA8-0001", "NR-PA8-0002"):
            run_id = old.create_run(run_info(board), T0)
            old.handle(safety(run_id, "bias/0"))
            for k, path in enumerate(("scan/0", "scan/1")):
                for event in step_events(run_id, path, index=k, n_traces=2, seed=k):
                    old.handle(event)
            old.add_note(run_id, "cable re-seated", "i.lindqvist")
            old.handle(finished(run_id))
            run_ids.append(run_id)
        with writer(engine).begin() as conn:
            command.downgrade(_config(conn), "0002")
        before = _tables(engine)
        with engine.connect() as conn:
            assert current_revisions(conn) == ("0002",)
    finally:
        engine.dispose()
    assert sum(len(rows) for rows in before.values()) > 20
    with Store.open(db_url) as store:
        with store.engine.connect() as conn:
            assert current_revisions(conn) == (head_revision(),)
        after = _tables(store.engine)
        # columns added since (0005: runs.lease_token, runs.heartbeat_at) come after the old ones
        kept = {n: [r[: len(before[n][0])] for r in rows] if before[n] else rows
                for n, rows in after.items() if n in before}
        assert kept == before
        assert {r[-2:] for r in after["runs"]} == {("", "None")}  # no lease: empty token, no beat
        assert after["run_inputs"] == []
        for run_id in run_ids:
            assert store.get_run(run_id).status == "completed"
            assert len(store.measurements(run_id=run_id)) == 6
            assert store.run_inputs(run_id) == ()
        # and the upgraded database takes new runs with their inputs
        new = store.create_run(dataclasses.replace(run_info(), inputs=INPUTS), T0)
        assert store.run_inputs(new) == INPUTS
