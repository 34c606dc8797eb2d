"""The web view: a page of 1,000 runs, and how soon a stored step reaches the browser.

* ``web_runs_page``: ``GET /?limit=1000`` through the ASGI application in process (routing, the
  slim run listing, the grouped counts, the Jinja2 template), best of ``REPEATS``, on a database of
  1,000 runs recorded through the store's API.  Baseline: the bare store query for the same runs,
  ``Store.list_runs()``.  Goal (issue 20): under 200 ms.
* ``web_live_latency``: a real uvicorn server on 127.0.0.1 and a client reading a run's
  server-sent events; a writer stores one step at a time and the time until the client has the
  snapshot that counts it is taken, median of ``LIVE_SAMPLES``.  Baseline: one ``live_snapshot``
  read of the store (what each poll costs); the server polls every ``POLL_S``.  Goal: within 1 s.
"""

from __future__ import annotations

import json
import socket
import statistics
import tempfile
import threading
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from sequencer.events import (
    Measurement,
    MeasurementMade,
    RunFinished,
    RunInfo,
    StepFinished,
    StepStarted,
)
from sequencer.store import Store

N_RUNS = 1000
REPEATS = 5
PAGE_GOAL_S = 0.200
LIVE_GOAL_S = 1.0
LIVE_SAMPLES = 15
POLL_S = 0.25
T0 = datetime(2026, 1, 5, 8, 0, tzinfo=UTC)


def _info(i: int) -> RunInfo:
    return RunInfo(
        procedure="pa8-gain", procedure_version="1.2", procedure_text="steps: []\n",
        procedure_sha256="0" * 64, procedure_path="procedures/pa8-gain.yaml", bench="bench-2",
        board=f"NR-PA8-{i % 200:04d}", board_type="PA8", operator="bench", software_version="0.1.0",
        batch=f"NR-B{i // 100:02d}",
    )  # fmt: skip


def _step(store: Store, run_id: int, path: str, at: datetime, values: int) -> None:
    store.handle(StepStarted(run_id, path, "analyse.transfer", 0, 1, at))
    for k in range(values):
        gain = 1.0 + 0.001 * k
        m = Measurement("gain", gain, "V/V", 0.002, k % 8 + 1, "x1", None, 0.9, 1.1, "pass")
        store.handle(MeasurementMade(run_id, path, m))
    store.handle(StepFinished(run_id, path, "analyse.transfer", "completed", at, at))


def _fill(store: Store) -> None:
    for i in range(N_RUNS):
        at = T0 + timedelta(minutes=i)
        run_id = store.create_run(_info(i), at)
        _step(store, run_id, "gain/analyse", at, 8)
        store.handle(RunFinished(run_id, "completed", at + timedelta(seconds=30)))


def _best(fn: Any) -> float:
    times = []
    for _ in range(REPEATS):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def bench_page(store: Store, url: str) -> dict[str, Any]:
    from starlette.testclient import TestClient

    from sequencer.web.app import create_app
    from sequencer.web.settings import ServeSettings

    app = create_app(ServeSettings(db_url=url, page_size=N_RUNS), store)
    with TestClient(app) as client:
        page = client.get(f"/?limit={N_RUNS}")
        assert page.status_code == 200 and page.text.count('class="run-row"') == N_RUNS
        ours = _best(lambda: client.get(f"/?limit={N_RUNS}"))
    baseline = _best(lambda: store.list_runs())
    return {"name": "web_runs_page", "ours": ours, "baseline": baseline, "unit": "s (1,000 runs)",
            "ratio": ours / baseline, "goal": "< 0.2 s (baseline: Store.list_runs)",
            "verdict": "met" if ours < PAGE_GOAL_S else "short"}  # fmt: skip


def bench_live(store: Store, url: str) -> dict[str, Any]:
    import httpx
    import uvicorn

    from sequencer.web.app import create_app
    from sequencer.web.live import Outlines, live_snapshot
    from sequencer.web.settings import ServeSettings

    run_id = store.create_run(_info(N_RUNS), datetime.now(UTC))
    app = create_app(ServeSettings(db_url=url, poll_s=POLL_S, stream_s=600.0), store)
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    sock.listen(16)
    server = uvicorn.Server(uvicorn.Config(app, log_level="warning", access_log=False, lifespan="off"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    latencies: list[float] = []
    try:
        base = f"http://127.0.0.1:{sock.getsockname()[1]}"
        with httpx.Client(timeout=30.0, trust_env=False) as client, \
                client.stream("GET", f"{base}/runs/{run_id}/events") as stream:  # fmt: skip
            lines = stream.iter_lines()
            done = _next_done(lines)
            for k in range(LIVE_SAMPLES):
                stored_at = time.perf_counter()
                _step(store, run_id, f"gain/s{k}/analyse", datetime.now(UTC), 2)
                while _next_done(lines) <= done:
                    pass
                latencies.append(time.perf_counter() - stored_at)
                done += 1
        outlines = Outlines()
        baseline = _best(lambda: live_snapshot(store, run_id, outlines))
    finally:
        store.handle(RunFinished(run_id, "completed", datetime.now(UTC)))
        server.should_exit = True
        thread.join(timeout=30)
        sock.close()
    ours = statistics.median(latencies)
    return {"name": "web_live_latency", "ours": ours, "baseline": baseline, "unit": "s (median)",
            "ratio": ours / baseline, "goal": f"< 1 s from stored to received (poll {POLL_S} s; baseline: one snapshot read)",
            "verdict": "met" if ours < LIVE_GOAL_S else "short", "max_s": max(latencies)}  # fmt: skip


def _next_done(lines: Any) -> int:
    """The step count of the next snapshot on the stream."""
    for line in lines:
        if line.startswith("data: "):
            data = json.loads(line[6:])
            if "done" in data:
                return int(data["done"])
    raise RuntimeError("the event stream ended")


def run() -> list[dict]:
    with tempfile.TemporaryDirectory(prefix="bench_web_") as tmp:
        url = f"sqlite:///{Path(tmp) / 'web.db'}"
        with Store.open(url) as store:
            _fill(store)
            return [bench_page(store, url), bench_live(store, url)]
