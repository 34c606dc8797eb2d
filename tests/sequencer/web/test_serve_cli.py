"""`benchwright serve` as a user starts it: a real process on a free loopback port, answering HTTP
and naming its database; stopped by the test (SIGTERM), every wait with a deadline."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

pytest.importorskip("uvicorn")

from sequencer.store import Store
from tests.sequencer.reports.simulated_runs import RunSpec, record_run

DEADLINE_S = 120.0


def test_serve_prints_its_address_and_answers(tmp_path: Path) -> None:
    db = tmp_path / "results.db"
    with Store.open(f"sqlite:///{db}") as store:
        record_run(store, RunSpec(board="NR-PA8-0007", channels=2, full=False))
    proc = subprocess.Popen(
        [sys.executable, "-m", "sequencer", "serve", "--db", f"sqlite:///{db}", "--port", "0"],
        stderr=subprocess.PIPE, stdout=subprocess.DEVNULL, text=True,
        env={**os.environ, "NO_PROXY": "*", "no_proxy": "*"},
    )  # fmt: skip
    try:
        deadline = time.monotonic() + DEADLINE_S
        line = ""
        while time.monotonic() < deadline and "serving" not in line:
            line = proc.stderr.readline() if proc.stderr else ""
            if not line and proc.poll() is not None:
                break
        found = re.search(r"read-only at (http://127\.0\.0\.1:\d+/)", line)
        assert found, line
        opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))
        page = ""
        while time.monotonic() < deadline and not page:
            try:
                page = opener.open(found.group(1), timeout=30).read().decode()
            except OSError:
                time.sleep(0.2)  # uvicorn still starting: the socket queues, the app may not be up
        assert "NR-PA8-0007" in page and str(db) in page
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=60)
