"""A clipped capture stays clipped across an interruption (issue 16): the capture's rails are stored
with its trace (``traces.meta``, revision 0008), so the analysis of a resumed run, which replays the
captures from the store, refuses them for the same reason the uninterrupted run gave.

Whole runs of the engine over real sockets to the simulated bench, recorded in a real SQLite store.
Physics from the board file (example-pa8.yaml, DESIGN.md): channel 3 gain_x5 ≈ 5, so a 20 mV
injection gives a ≈100 mV pulse, beyond the +50 mV rail of a 100 mV range at zero offset.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim import start_sim_bench
from sequencer.engine import Runner, RunOptions
from sequencer.engine.context import StopFlag
from sequencer.errors import RunAborted
from sequencer.events import MeasurementMade, StepFinished
from sequencer.store import Store
from tests.integration.test_engine_sim import board
from tests.sequencer.engine.plans import plan, step
from tests.sequencer.store.scenario import run_info

AMPS = (20.0, 30.0, 40.0)
ANALYSE = "gain/ch3/x5/analyse"


def clipping_plan():
    scope = {"channel": 3, "output": "x5"}
    steps = [
        step("setup/timebase", "scope.timebase", block="setup", sample_rate=1e9, points=1000,
             pretrigger=200.0),
        step("setup/input", "scope.input", block="setup", input=1, range=100.0),  # rails ±50 mV
        step("setup/trigger", "scope.trigger", block="setup", source="EXTernal"),
        step("setup/pulser", "pulser.output", block="setup", on=True),
        step("gain/ch3/inject", "switch.inject", channel=3),
        step("gain/ch3/x5/route", "switch.route", labels=scope, channel=3, output="x5", input=1),
    ]  # fmt: skip
    for a in AMPS:
        lab = {**scope, "amp": a}
        steps += [
            step(f"gain/ch3/x5/amp={a:g}mV/set", "pulser.amplitude", labels=lab, mV=a),
            step(f"gain/ch3/x5/amp={a:g}mV/capture", "scope.capture", labels=lab, inputs=[1],
                 into=["pulse"]),
        ]  # fmt: skip
    steps += [
        step(ANALYSE, "analyse.transfer", labels=scope, traces="pulse", x="amp", n_baseline=150),
        step("cleanup/pulser", "pulser.output", block="cleanup", on=False),
        step("cleanup/relays", "switch.open_all", block="cleanup"),
    ]
    return plan(steps)


def _run(store: Store, run_id: int, *, completed=None, stop_after: str = "") -> tuple[list, str]:
    """One runner over a fresh simulated bench, recorded in ``store``; ``stop_after``: the operator
    stops the run when that step has finished (as Ctrl-C would).  Its events and how it ended."""
    events: list = []
    stop = StopFlag()

    def watch(event) -> None:
        events.append(event)
        if isinstance(event, StepFinished) and event.path == stop_after:
            stop.request("operator", "stopped by the test after the last capture")

    options = RunOptions(operator="integration", unattended=True)
    with start_sim_bench(board()) as sim, open_bench(bench_from_mapping(sim.bench_mapping())) as bench:
        runner = Runner(clipping_plan(), bench, run_id=run_id, subscribers=[store.handle, watch],
                        options=options, completed=completed, stop=stop)  # fmt: skip
        try:
            ended = runner.run().status
        except RunAborted as exc:
            ended = f"aborted ({exc.cause})"
    return events, ended


def _reasons(events: list) -> list[str]:
    return [e.measurement.reason for e in events
            if isinstance(e, MeasurementMade) and e.path == ANALYSE]  # fmt: skip


def test_a_resumed_run_refuses_the_clipped_captures_like_the_live_run(tmp_path: Path) -> None:
    with Store.open(f"sqlite:///{tmp_path / 'results.db'}") as store:
        live_id = store.create_run(run_info("NR-PA8-0001"), datetime.now(UTC))
        events, ended = _run(store, live_id)
        live = _reasons(events)
        assert ended == "completed" and live and all(r.startswith("clipped: ") for r in live), live

        cut_id = store.create_run(run_info("NR-PA8-0002"), datetime.now(UTC))
        last_capture = f"gain/ch3/x5/amp={AMPS[-1]:g}mV/capture"
        first, ended = _run(store, cut_id, stop_after=last_capture)
        assert ended == "aborted (operator)" and _reasons(first) == []
        assert store.get_run(cut_id).status == "aborted"
        store.reopen_run(cut_id)
        resumed, ended = _run(store, cut_id, completed=store.completed_steps(cut_id))
        assert ended == "completed"
    replayed = {e.path for e in resumed if isinstance(e, StepFinished) and e.status == "replayed"}
    assert last_capture in replayed  # the captures came from the store, not from the bench
    assert _reasons(resumed) == live  # same refusal, same words
