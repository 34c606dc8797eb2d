"""The web view in a real browser: Debian's headless Chromium driven by selenium through Debian's
chromedriver (nothing downloaded).  Loads each page, follows links, watches a run on the
simulated bench fill the live grid, and keeps a screenshot of the run page as an artifact.

Skipped, with the reason, when the browser, its driver or selenium is missing (``.ci/run``
installs ``chromium`` and ``chromium-driver``).  Every wait has a deadline; no test asserts how
fast anything was.
"""

from __future__ import annotations

import os
import shutil
import socket
import tempfile
import threading
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
if not (CHROMIUM.exists() and CHROMEDRIVER.exists()):
    pytest.skip("Debian's chromium and chromium-driver are not installed "
                "(apt-get install chromium chromium-driver)", allow_module_level=True)  # fmt: skip
webdriver = pytest.importorskip("selenium.webdriver", reason="selenium is not installed")
uvicorn = pytest.importorskip("uvicorn", reason="uvicorn (extra [web]) is not installed")

from selenium.webdriver.common.by import By  # noqa: E402
from selenium.webdriver.support.ui import WebDriverWait  # noqa: E402

from sequencer import compose  # noqa: E402
from sequencer.events import StepFinished  # noqa: E402
from sequencer.procedure import load_procedure  # noqa: E402
from sequencer.store import Store  # noqa: E402
from sequencer.web.app import create_app  # noqa: E402
from sequencer.web.settings import ServeSettings  # noqa: E402
from tests.sequencer.reports.simulated_runs import T0, RunSpec, record_run  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
BOARD_FILE = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
WAIT_S = 240.0  # deadline for anything to show up on a loaded machine (never asserted as speed)
ARTIFACTS = Path(os.environ.get("BENCHWRIGHT_ARTIFACTS", tempfile.gettempdir())) / "benchwright-browser"


def _short_procedure(folder: Path) -> Path:
    """The shipped quick-gain procedure with a 3-point scan and no averaging: a run of a few
    hundred steps on the simulated bench."""
    text = (ROOT / "procedures" / "examples" / "quick-gain.yaml").read_text(encoding="utf-8")
    text = text.replace("{linspace: [20 mV, 100 mV, 5]}", "{linspace: [20 mV, 100 mV, 3]}")
    text = text.replace("averages: 16 ", "averages: 1  ").replace("settle: 20 ms", "settle: 1 ms ")
    path = folder / "quick-gain-short.yaml"
    path.write_text(text, encoding="utf-8")
    return path


class Served:
    """uvicorn serving the app on a free loopback port, in a thread, until ``stop``."""

    def __init__(self, app: Any) -> None:
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(64)
        self.url = f"http://127.0.0.1:{self.sock.getsockname()[1]}"
        config = uvicorn.Config(app, log_level="warning", access_log=False, lifespan="off")
        self.server = uvicorn.Server(config)
        self.thread = threading.Thread(target=self.server.run, kwargs={"sockets": [self.sock]}, daemon=True)
        self.thread.start()

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=30)
        self.sock.close()


@pytest.fixture(scope="module")
def site(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Store, Path, str]]:
    base = tmp_path_factory.mktemp("browser")
    url = f"sqlite:///{base / 'results.db'}"
    with Store.open(url) as store:
        record_run(store, RunSpec(board="NR-PA8-0001", channels=3, seed=1))
        record_run(store, RunSpec(board="NR-PA8-0002", channels=3, seed=2,
                                  started_at=T0 + timedelta(hours=1), gain_scale={2: 1.3}))  # fmt: skip
        for week in range(1, 4):
            record_run(store, RunSpec(board="NR-PA8-0001", channels=3, seed=10 + week, full=False,
                                      started_at=T0 + timedelta(weeks=week)))  # fmt: skip
        served = Served(create_app(ServeSettings(db_url=url, poll_s=0.2), store))
        try:
            yield served.url, store, base, url
        finally:
            served.stop()


@pytest.fixture(scope="module")
def browser(site) -> Iterator[Any]:
    _, _, base, _ = site
    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run",
                 "--disable-dev-shm-usage", "--window-size=1400,1000",
                 f"--user-data-dir={base / 'chromium-profile'}"):  # fmt: skip
        options.add_argument(flag)
    service = webdriver.ChromeService(executable_path=str(CHROMEDRIVER))
    driver = webdriver.Chrome(options=options, service=service)
    driver.set_page_load_timeout(WAIT_S)
    try:
        yield driver
    finally:
        driver.quit()


def _wait(driver: Any, condition: Any, what: str) -> Any:
    return WebDriverWait(driver, WAIT_S, poll_frequency=0.2).until(condition, message=what)


def _links(driver: Any) -> list[str]:
    return [a.get_attribute("href") for a in driver.find_elements(By.CSS_SELECTOR, "main a[href]")]


def test_each_page_loads_and_its_links_lead_somewhere(site, browser) -> None:
    url, _, _, _ = site
    visited: set[str] = set()
    for start in ("/", "/live", "/batches", "/boards/NR-PA8-0001", "/runs/2"):
        browser.get(url + start)
        assert "database:" in browser.find_element(By.ID, "database").text
        for href in _links(browser)[:12]:
            if href in visited:
                continue
            visited.add(href)
            browser.get(href)
            assert browser.find_elements(By.ID, "database"), href
            assert "Nothing to show" not in browser.find_element(By.TAG_NAME, "h1").text, href
            errors = [e["message"] for e in browser.get_log("browser") if e["level"] == "SEVERE"]
            assert errors == [], (href, errors)  # no script error, no failed request
    assert any("/trend?" in h for h in visited) and any("/batches/" in h for h in visited)


def test_trend_plot_is_drawn_and_answers_the_pointer(site, browser) -> None:
    url, _, _, _ = site
    browser.get(url + "/trend?board=NR-PA8-0001&quantity=gain&channel=1&output=x1")
    dots = _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, "#trend-plot circle.dot"), "trend points")
    assert len(dots) == 4  # the full run and three weekly runs of NR-PA8-0001
    titles = [d.find_element(By.TAG_NAME, "title").get_attribute("textContent") for d in dots]
    assert all(t.startswith("run ") for t in titles)


class Gate:
    """A run subscriber that holds the run after each of the first ``stops`` transfer analyses has
    been stored (the store is subscribed first), until the test lets it go: the browser then
    sees a known state of the grid, however fast or slow the machine."""

    def __init__(self, stops: int) -> None:
        self.stops = stops
        self.held = threading.Event()
        self.release = threading.Event()

    def __call__(self, event: Any) -> None:
        if isinstance(event, StepFinished) and event.kind == "analyse.transfer" and self.stops > 0:
            self.stops -= 1
            self.release.clear()
            self.held.set()
            self.release.wait(timeout=WAIT_S)

    def go_on(self) -> None:
        self.held.clear()
        self.release.set()


def test_a_run_on_the_simulated_bench_fills_the_live_grid(site, browser) -> None:
    url, store, base, db_url = site
    procedure = load_procedure(_short_procedure(base))
    plan = compose.plan_for(procedure, "NR-PA8-0104")
    gate = Gate(stops=2)
    request = compose.RunRequest(operator="a.berg", unattended=True, progress=False,
                                 handle_signals=False,
                                 extra_subscribers=(gate,))  # fmt: skip
    outcome: dict[str, Any] = {}

    def qualify() -> None:
        with Store.open(db_url) as own, compose.bench_for(None, str(BOARD_FILE)) as spec:
            outcome["result"] = compose.execute(plan, spec, own, request)

    worker = threading.Thread(target=qualify, daemon=True)
    worker.start()
    try:
        assert gate.held.wait(timeout=WAIT_S), "the run never reached its first transfer analysis"
        run_id = max(r.id for r in store.list_runs(status="running"))

        browser.get(f"{url}/live")
        _wait(browser, lambda d: f"/runs/{run_id}" in d.find_element(By.ID, "running-body").get_attribute("innerHTML"),
              "the running run in the live list")  # fmt: skip
        browser.get(f"{url}/runs/{run_id}")

        def judged(d: Any) -> int:
            return len(d.find_elements(By.CSS_SELECTOR, "#verdict-grid td.cell.pass, #verdict-grid td.cell.fail"))

        # held after channel 1, x1: gain, offset_mV and inl_pct judged (DESIGN.md quantity names)
        _wait(browser, lambda d: judged(d) == 3, "channel 1 x1 judged in the grid")
        assert len(browser.find_elements(By.CSS_SELECTOR, "#verdict-grid tbody tr")) == 8  # PA8
        progress = browser.find_element(By.ID, "progress-text").text
        assert f" of {len(plan.steps)} steps" in progress
        assert browser.find_element(By.ID, "current-step").text.startswith("now: gain/ch1/x5/")
        gate.go_on()
        # held again after channel 1, x5: the page, not reloaded, got three more by the stream
        assert gate.held.wait(timeout=WAIT_S)
        _wait(browser, lambda d: judged(d) == 6, "channel 1 x5 pushed to the open page")
        assert browser.find_element(By.ID, "run-status").text == "running"
        gate.go_on()
        worker.join(timeout=WAIT_S)
    finally:
        gate.stops = 0
        gate.go_on()
        worker.join(timeout=WAIT_S)
    assert not worker.is_alive() and "result" in outcome
    _wait(browser, lambda d: d.find_element(By.ID, "run-status").text == "completed", "the run completed")
    # analyse.transfer gives gain, offset_mV and inl_pct of x1 and x5 for 8 channels
    _wait(browser, lambda d: judged(d) == 8 * 6, "every channel, output and quantity judged")
    columns = [th.text for th in browser.find_elements(By.CSS_SELECTOR, "#verdict-grid thead th")][1:]
    assert sorted(columns) == sorted(f"{q} {o}" for q in ("gain", "offset_mV", "inl_pct") for o in ("x1", "x5"))
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    shot = ARTIFACTS / f"run-{run_id}.png"
    assert browser.save_screenshot(str(shot)) and shot.stat().st_size > 0
    print(f"\nscreenshot of the run page: {shot}")
    shutil.copy(shot, base / shot.name)
