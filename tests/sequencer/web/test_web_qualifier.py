"""The run page prints the decision rule's qualifier with the verdict (``fail (within uncertainty)``,
ILAC-G8:09/2019's case of an interval straddling the limit) and, beside a value that could not be
measured, the reason stored with it (store revision 0006)."""

from __future__ import annotations

from pathlib import Path

import pytest

pytest.importorskip("starlette")
pytest.importorskip("httpx")

from starlette.testclient import TestClient

from sequencer.events import Measurement, MeasurementMade, StepFinished, StepStarted
from sequencer.store import Store
from sequencer.web.app import create_app
from sequencer.web.settings import ServeSettings
from tests.sequencer.store.scenario import T0, finished, run_info

REASON = "pulse of the wrong polarity (8 of 8 captures)"


def test_run_page_prints_qualifier_and_reason(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'r.db'}"
    with Store.open(url) as store:
        run_id = store.create_run(run_info(), T0)
        store.handle(StepStarted(run_id, "m", "analyse.noise", 0, 1, T0))
        for m in (
            Measurement("noise_in_mV", 0.61, "mV", 0.02, 1, "x1", None, None, 0.6, "fail",
                        qualifier="within uncertainty"),
            Measurement("gain", float("nan"), "V/V", None, 2, "x1", None, 0.95, 1.05, "fail",
                        reason=REASON),
            Measurement("noise_in_mV", 0.31, "mV", 0.02, 3, "x1", None, None, 0.6, "pass"),
        ):  # fmt: skip
            store.handle(MeasurementMade(run_id, "m", m))
        store.handle(StepFinished(run_id, "m", "analyse.noise", "completed", T0, T0))
        store.handle(finished(run_id))
        app = create_app(ServeSettings(db_url=url, poll_s=0.05, stream_s=5.0), store)
        with TestClient(app) as client:
            html = client.get(f"/runs/{run_id}").text
    table = html.split('id="measurements"')[1].split("</table>")[0]
    verdicts = [cell.split(">", 1)[1].split("<")[0] for cell in table.split('<td class="verdict')[1:]]
    assert verdicts == ["fail (within uncertainty)", "fail", "pass"]
    assert f'<span class="reason">({REASON})</span>' in table
    assert table.count('class="reason"') == 1  # only the value not measured has a reason
