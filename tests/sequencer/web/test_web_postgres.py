"""The web view and the open formats on a real PostgreSQL schema (the multi-bench lab database):
the listing counts, the live snapshot and the pandas export give what the store holds."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

pytest.importorskip("starlette")
pytest.importorskip("pandas")

from starlette.testclient import TestClient

from sequencer import results
from sequencer.store import Store
from sequencer.web.app import create_app
from sequencer.web.settings import ServeSettings
from tests.sequencer.reports.simulated_runs import T0, RunSpec, record_run
from tests.sequencer.store.conftest import pg_admin, pg_url  # noqa: F401

from .live_runs import LiveRun

pytestmark = pytest.mark.postgres


def test_pages_live_view_and_export_on_postgresql(pg_url: str) -> None:  # noqa: F811
    with Store.open(pg_url) as store:
        record_run(store, RunSpec(board="NR-PA8-0002", channels=2, seed=2, gain_scale={2: 1.3}))
        record_run(store, RunSpec(board="NR-PA8-0001", channels=2, seed=1, started_at=T0 + timedelta(hours=1)))
        live = LiveRun(store, datetime.now(UTC) - timedelta(seconds=20))
        live.advance(5)
        live.advance(1, gain=1.02, channel=1)
        app = create_app(ServeSettings(db_url=pg_url), store)
        with TestClient(app) as c:
            for path in ("/", "/runs/1", "/live", "/batches", "/batches/NR-B07", "/boards/NR-PA8-0001",
                         "/trend?board=NR-PA8-0001&quantity=gain&channel=1&output=x1"):  # fmt: skip
                assert c.get(path).status_code == 200, path
            assert "fail" in c.get("/?verdict=fail").text
            snap = c.get(f"/runs/{live.run_id}/live.json").json()
        assert (snap["done"], snap["total"]) == (6, len(live.plan.steps))
        assert snap["current_step"] == live.plan.steps[6].path
        frame = results.measurements(pg_url, run=1)
        assert list(frame["value"]) == [m.value for m in store.measurements(run_id=1)]
        runs = results.runs(pg_url)
        assert dict(zip(runs["run_id"], runs["verdict"], strict=True)) == {1: "fail", 2: "pass", live.run_id: ""}
