"""The web view over a real SQLite store through Starlette's test client: every page renders and
names its database, links lead somewhere, filters filter, the token is enforced off loopback,
and the live stream pushes what a bench stores."""

from __future__ import annotations

import json
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from html.parser import HTMLParser
from pathlib import Path

import pytest

pytest.importorskip("starlette")
pytest.importorskip("httpx")

from starlette.testclient import TestClient

from sequencer.store import Store
from sequencer.web.app import create_app
from sequencer.web.live import Outlines, live_snapshot
from sequencer.web.settings import ServeSettings, is_loopback
from tests.sequencer.reports.simulated_runs import T0, RunSpec, record_run

from .live_runs import LiveRun


class Links(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.hrefs: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        href = dict(attrs).get("href")
        if tag == "a" and href and href.startswith("/"):
            self.hrefs.append(href)


def links(html: str) -> list[str]:
    parser = Links()
    parser.feed(html)
    return parser.hrefs


@pytest.fixture(scope="module")
def db(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Store, LiveRun]]:
    url = f"sqlite:///{tmp_path_factory.mktemp('web') / 'results.db'}"
    with Store.open(url) as store:
        record_run(store, RunSpec(board="NR-PA8-0001", channels=3, seed=1))
        record_run(store, RunSpec(board="NR-PA8-0002", channels=3, seed=2,
                                  started_at=T0 + timedelta(hours=1), gain_scale={2: 1.3}))  # fmt: skip
        for week in range(1, 4):
            record_run(store, RunSpec(board="NR-PA8-0001", channels=3, seed=10 + week, full=False,
                                      started_at=T0 + timedelta(weeks=week)))  # fmt: skip
        live = LiveRun(store, datetime.now(UTC) - timedelta(seconds=30))
        live.advance(8)
        yield url, store, live


@pytest.fixture
def client(db) -> Iterator[TestClient]:
    url, store, _ = db
    app = create_app(ServeSettings(db_url=url, poll_s=0.05, stream_s=120.0), store)
    with TestClient(app) as c:
        yield c


def test_every_linked_page_renders_and_names_the_database(db, client) -> None:
    url, _, _ = db
    shown = url.split("///")[-1]
    seen: set[str] = set()
    todo = ["/", "/live", "/batches"]
    while todo and len(seen) < 120:
        href = todo.pop(0)
        if href in seen or href.startswith("/static"):
            continue
        seen.add(href)
        page = client.get(href)
        assert page.status_code == 200, (href, page.text[:300])
        assert shown in page.text, href  # the page says which database it shows
        todo += [h for h in links(page.text) if h not in seen]
    kinds = {h.split("?")[0].split("/")[1] for h in seen}
    assert {"runs", "batches", "boards", "trend", "live"} <= kinds


def test_runs_filter_by_verdict_board_batch_operator_and_date(client) -> None:
    def run_ids(query: str) -> set[str]:
        html = client.get(f"/?{query}").text
        return {h.split("/")[-1] for h in links(html) if h.startswith("/runs/")}

    assert run_ids("verdict=fail") == {"2"}  # NR-PA8-0002's channel 2: gain 30 % high
    assert run_ids("board=NR-PA8-0001") == {"1", "3", "4", "5"}
    assert run_ids("batch=NR-B09") == {"6"}
    assert run_ids("operator=m.okafor") == {"6"}
    assert run_ids("status=running") == {"6"}
    assert run_ids("verdict=open") == {"6"}
    assert run_ids(f"since={(T0 + timedelta(weeks=2)).date()}&until={(T0 + timedelta(weeks=3)).date()}") == {"4", "5"}
    assert client.get("/?since=yesterday").status_code == 400


def test_run_page_shows_measurements_limits_and_curves(client) -> None:
    html = client.get("/runs/2").text
    assert "fail" in html and "0.9 … 1.1" in html  # the gain limits of the invented limit set
    assert 'id="curves"' in html  # transfer curves and S-curves, drawn in the browser
    curves = json.loads(html.split('id="curves">')[1].split("</script>")[0])
    assert {c["series"] for c in curves} == {"transfer", "s_curve", "pulse"}
    assert client.get("/runs/999").status_code == 404


def test_live_snapshot_progress_eta_and_current_step(db) -> None:
    _, store, live = db
    now = live.started_at + timedelta(seconds=40)
    snap = live_snapshot(store, live.run_id, Outlines(), now=now)
    total = len(live.plan.steps)
    assert (snap["done"], snap["total"], snap["status"]) == (live.done, total, "running")
    assert snap["current_step"] == live.plan.steps[live.done].path
    # the pace so far: 40 s for the steps done, so the steps left take (total - done) × 40 s / done
    assert snap["eta_s"] == pytest.approx((total - live.done) * 40.0 / live.done, abs=0.1)
    assert [r["channel"] for r in snap["grid"]["rows"]] == list(range(1, 9))  # PA8: 8 channels
    # the last step was stored at started + 2 s × done; 40 s after the start it has been quiet since
    assert snap["quiet_s"] == pytest.approx(40.0 - 2.0 * live.done, abs=0.1)


def test_the_stream_pushes_each_stored_step_and_ends_with_the_run(db, client) -> None:
    _, _, live = db
    events: list[tuple[str, dict]] = []
    with client.stream("GET", f"/runs/{live.run_id}/events") as stream:
        kind = ""
        for line in stream.iter_lines():
            if line.startswith("event: "):
                kind = line[7:]
            elif line.startswith("data: "):
                events.append((kind, json.loads(line[6:])))
                if len(events) == 1:
                    live.advance(1, gain=1.004, channel=1)
                elif len(events) == 2:
                    live.advance(1, gain=1.31, channel=2)
                elif len(events) == 3:
                    live.finish()
    kinds = [k for k, _ in events]
    assert kinds == ["snapshot", "snapshot", "snapshot", "snapshot", "finished"]
    first, second, third = (e for _, e in events[:3])
    assert second["done"] == first["done"] + 1 and third["done"] == first["done"] + 2
    grid = third["grid"]
    column = grid["columns"].index("gain x1")
    assert grid["rows"][0]["cells"][column]["verdict"] == "pass"
    assert grid["rows"][1]["cells"][column]["verdict"] == "fail"
    assert grid["rows"][2]["cells"][column] is None  # channel 3 not measured yet
    assert events[3][1]["status"] == "completed" and events[4][1]["status"] == "completed"


def test_off_loopback_every_request_needs_the_token(db) -> None:
    url, store, _ = db
    assert is_loopback("127.0.0.1") and is_loopback("::1") and not is_loopback("0.0.0.0")
    with pytest.raises(ValueError, match="token"):
        ServeSettings(db_url=url, host="0.0.0.0")
    app = create_app(ServeSettings(db_url=url, host="0.0.0.0", token="s3cret-token"), store)
    with TestClient(app, follow_redirects=False) as c:
        for path in ("/", "/runs/1", "/live/events", "/static/bench.js", "/runs/1/live.json"):
            assert c.get(path).status_code == 401, path
        assert c.get("/?token=wrong").status_code == 401
        assert c.get("/", headers={"Authorization": "Bearer s3cret-token"}).status_code == 200
        moved = c.get("/runs/1?token=s3cret-token&x=1")
        assert moved.status_code == 303 and moved.headers["location"] == "/runs/1?x=1"
        assert c.get("/batches").status_code == 200  # the cookie set by the redirect
        c.cookies.clear()
        assert c.get("/batches").status_code == 401


def test_a_page_of_many_runs_is_paged(db, client) -> None:
    html = client.get("/?limit=2").text
    assert len([h for h in links(html) if h.startswith("/runs/")]) == 2
    assert "offset=2" in html  # a link to the older runs
    assert client.get("/?limit=two").status_code == 400


def test_read_only_by_construction(tmp_path: Path) -> None:
    """Serving a database that does not exist is refused, and nothing is created."""
    from click.testing import CliRunner

    from sequencer.cli import attach_commands, cli

    attach_commands()
    missing = tmp_path / "none.db"
    result = CliRunner().invoke(cli, ["serve", "--db", f"sqlite:///{missing}", "--port", "0"])
    assert result.exit_code == 2 and not missing.exists()


def test_certificates_are_listed_and_checked_against_the_database(db, tmp_path: Path) -> None:
    """The same check as `benchwright verify`: an untouched certificate matches, an edited printed
    field does not (and is checked again because the file changed)."""
    import re

    from sequencer.reports import certify_run

    url, store, _ = db
    folder = tmp_path / "certs"
    written = certify_run(store, 1, folder, workers=1)
    app = create_app(ServeSettings(db_url=url, certificates=(folder,)), store)
    with TestClient(app) as c:
        page = c.get("/runs/1").text
        names = sorted(p.name for p in written)
        assert sorted(re.findall(r'data-name="([^"]+)"', page)) == names
        checks = c.get("/runs/1/certificates").json()
        assert sorted(x["name"] for x in checks) == names and all(x["ok"] for x in checks)
        html = next(p for p in written if p.suffix == ".html")
        text = html.read_text(encoding="utf-8")
        edited = re.sub(r'(data-field="judgement">)([^<]*)', r"\1All fine, trust me.", text, count=1)
        assert edited != text
        html.write_text(edited, encoding="utf-8")
        again = {x["name"]: x for x in c.get("/runs/1/certificates").json()}
        assert not again[html.name]["ok"] and again[html.name]["differences"]
        assert sum(x["ok"] for x in again.values()) == len(names) - 1
        pdf = next(p for p in written if p.suffix == ".pdf")
        got = c.get(f"/certificates/{pdf.name}")
        assert got.status_code == 200 and got.content[:5] == b"%PDF-"  # PDF header (ISO 32000)
        assert c.get("/certificates/..%2Fresults.db").status_code == 404
        assert c.get("/certificates/results.db").status_code == 404


def test_the_list_of_running_runs_is_pushed(db, client) -> None:
    _, store, _ = db
    other = LiveRun(store, datetime.now(UTC) - timedelta(seconds=10))
    other.advance(3)
    try:
        running = {r.id for r in store.list_runs(status="running")}
        with client.stream("GET", "/live/events") as stream:
            for line in stream.iter_lines():
                if line.startswith("data: "):
                    runs = json.loads(line[6:])
                    break
        assert {r["run_id"] for r in runs} == running and other.run_id in running
        mine = next(r for r in runs if r["run_id"] == other.run_id)
        assert (mine["done"], mine["total"]) == (3, len(other.plan.steps))
        assert mine["current_step"] == other.plan.steps[3].path
    finally:
        other.finish()
