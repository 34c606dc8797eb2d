"""The light read path (issue 21 item 4): an SQLite store read with the standard library's sqlite3
answers exactly what the SQLAlchemy path answers, and steps aside where it must.

Reference: SQLAlchemy itself -- the same database read through ``overview`` / ``export`` (the
``Store``) and through ``light.LightReader`` must give equal lines, counts, batches and export rows,
datetimes included.  Schema revision: alembic's own head (``ScriptDirectory.get_current_head``).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
import sqlalchemy as sa

from sequencer.errors import StoreError
from sequencer.store import Store
from sequencer.store.export import EXPORT_COLUMNS, export_rows
from sequencer.store.light import HEAD_REVISION, LightReader, sqlite_file
from sequencer.store.listing import StoreListing, open_listing
from sequencer.store.migrate import head_revision
from sequencer.store.overview import batch_lines, run_counts, run_lines
from tests.sequencer.reports.simulated_runs import RunSpec, record_run

from .scenario import run_info

T0 = datetime(2025, 3, 3, 8, 0, 0, 125000, tzinfo=UTC)  # microseconds: the stored text keeps them
SPECS = (
    RunSpec(board="NR-PA8-0001", batch="NR-B07", started_at=T0, full=False, channels=2),
    RunSpec(board="NR-PA8-0002", batch="NR-B07", started_at=T0 + timedelta(hours=1), full=False,
            channels=2, gain_scale={2: 1.3}),  # a gain outside its limits: verdict fail
    RunSpec(board="NR-PA8-0001", batch="NR-B08", started_at=T0 + timedelta(days=7), full=False,
            channels=2, status="aborted"),
    RunSpec(board="NR-PA8-0003", batch="", started_at=T0 + timedelta(days=8), full=False,
            channels=1, operator="a.berg"),
)
FILTERS = (
    {},
    {"board": "NR-PA8-0001"},
    {"batch": "NR-B07"},
    {"status": "aborted"},
    {"operator": "a.berg"},
    {"since": T0 + timedelta(hours=1)},  # inclusive: the second run starts exactly then
    {"until": T0 + timedelta(hours=1)},  # exclusive
    {"since": T0, "until": T0 + timedelta(days=7, microseconds=1), "board": "NR-PA8-0001"},
    {"board": "nobody"},
)


@pytest.fixture(scope="module")
def recorded(tmp_path_factory) -> str:
    url = f"sqlite:///{tmp_path_factory.mktemp('light') / 'results.db'}"
    with Store.open(url) as store:
        for spec in SPECS:
            record_run(store, spec)
    return url


def test_head_revision_constant_is_alembics_head() -> None:
    assert head_revision() == HEAD_REVISION


@pytest.mark.parametrize("filters", FILTERS, ids=[str(sorted(f)) for f in FILTERS])
@pytest.mark.parametrize("newest_first", [True, False])
def test_run_lines_and_counts_equal_the_sqlalchemy_path(recorded: str, filters: dict,
                                                        newest_first: bool) -> None:
    light = LightReader.open(recorded)
    assert light is not None
    with light, Store.open(recorded, create=False) as store, store.engine.connect() as conn:
        ours = light.run_lines(newest_first=newest_first, **filters)
        theirs = run_lines(conn, newest_first=newest_first, **filters)
        assert ours == theirs
        ids = [r.id for r in theirs]
        assert light.run_counts(ids) == run_counts(conn, ids, steps=False)
    if not filters:
        assert len(ours) == len(SPECS)
        assert all(r.started_at.tzinfo is not None for r in ours)


def test_batches_equal_the_sqlalchemy_path(recorded: str) -> None:
    light = LightReader.open(recorded)
    assert light is not None
    with light, Store.open(recorded, create=False) as store, store.engine.connect() as conn:
        ours = light.batch_lines()
        assert ours == batch_lines(conn)
    assert [b.batch for b in ours] == ["NR-B08", "NR-B07"]  # most recently started first
    assert (ours[1].runs, ours[1].boards) == (2, 2)


@pytest.mark.parametrize("filters", [*FILTERS[:3], *FILTERS[5:], {"run_id": 2},
                                     {"run_id": 2, "board": "NR-PA8-0001"}])
def test_export_rows_equal_the_sqlalchemy_path(recorded: str, filters: dict) -> None:
    filters = {k: v for k, v in filters.items() if k != "operator"}
    light = LightReader.open(recorded)
    assert light is not None
    with light, Store.open(recorded, create=False) as store:
        ours = light.export_rows(**filters)
        assert ours == export_rows(store, **filters)
    if filters == {"run_id": 2}:
        assert {r["verdict"] for r in ours} == {"pass", "fail"}
        assert list(ours[0]) == list(EXPORT_COLUMNS)


def test_a_missing_file_is_refused_and_not_created(tmp_path: Path) -> None:
    path = tmp_path / "nowhere.db"
    with pytest.raises(StoreError, match="no database at"):
        LightReader.open(f"sqlite:///{path}")
    assert not path.exists()


@pytest.mark.parametrize("url", [
    "postgresql+psycopg://postgres@127.0.0.1:5432/x", "sqlite://", "sqlite:///:memory:",
    "sqlite:///file:x.db?mode=ro&uri=true", "sqlite:///a%20b.db",
])
def test_other_urls_take_the_sqlalchemy_path(url: str) -> None:
    assert sqlite_file(url) is None
    assert LightReader.open(url) is None


def test_a_database_at_another_revision_is_left_to_the_store(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'old.db'}"
    with Store.open(url) as store, store.engine.begin() as conn:
        conn.execute(sa.text("UPDATE alembic_version SET version_num = '0004'"))
    assert LightReader.open(url) is None  # the Store upgrades it (or refuses a newer one)


def test_a_file_without_the_schema_is_left_to_the_store(tmp_path: Path) -> None:
    path = tmp_path / "other.db"
    import sqlite3

    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE t (x)")
    assert LightReader.open(f"sqlite:///{path}") is None
    with pytest.raises(StoreError, match="no benchwright tables"):
        open_listing(f"sqlite:///{path}")


def test_the_light_path_never_writes(recorded: str) -> None:
    light = LightReader.open(recorded)
    assert light is not None
    with light, pytest.raises(StoreError, match=r"readonly|read-only|query_only"):
        light._rows("DELETE FROM annotations")


def _stale_run(url: str) -> tuple[int, int]:
    """A run of this (live) process and one of another PC (another boot id) silent for 10 min."""
    with Store.open(url) as store:
        live = store.create_run(run_info("NR-PA8-0009"), datetime.now(UTC))
        gone = store.create_run(run_info("NR-PA8-0010"), datetime.now(UTC) - timedelta(minutes=10))
        with store.engine.begin() as conn:
            conn.execute(
                sa.text("UPDATE runs SET process_tag = 'another-boot:1', heartbeat_at = :b "
                        "WHERE id = :i"),
                {"b": datetime.now(UTC) - timedelta(minutes=10), "i": gone},
            )
    return live, gone


def test_a_running_run_whose_recorder_is_gone_is_judged_alike_on_both_paths(tmp_path: Path) -> None:
    """Both read paths judge the silent run gone (liveness.judge: 600 s > the 60 s limit) and the
    live one not; neither writes (the stored status stays running)."""
    url = f"sqlite:///{tmp_path / 'live.db'}"
    live, gone = _stale_run(url)
    with open_listing(url) as listing:
        assert isinstance(listing, LightReader)
        light_gone = listing.gone_recorders()
    with Store.open(url, create=False) as store:
        store_gone = StoreListing(store).gone_recorders()
        assert {r.id: r.status for r in store.list_runs()} == {live: "running", gone: "running"}
    assert set(light_gone) == set(store_gone) == {gone}
    assert light_gone[gone].state == store_gone[gone].state == "stale"
    assert light_gone[gone].reason == store_gone[gone].reason
    assert "no heartbeat" in light_gone[gone].reason
    # the writer (mark_stale, as resume and run call it) stores the very reason the readers show
    with Store.open(url) as store:
        assert store.mark_stale_runs_interrupted() == [gone]
        assert store.get_run(gone).reason == light_gone[gone].reason


def test_the_package_names_resolve_lazily_to_their_modules() -> None:
    import sequencer.store as package

    assert sorted(package.__all__) == sorted(package._WHERE)
    for name in package.__all__:
        assert getattr(package, name) is getattr(__import__(package._WHERE[name], fromlist=["x"]), name)
    with pytest.raises(AttributeError):
        package.NoSuchName  # noqa: B018


def test_the_light_stale_limit_is_the_stores() -> None:
    from sequencer.store import light, liveness

    assert light.DEFAULT_STALE_AFTER_S == liveness.DEFAULT_STALE_AFTER_S
