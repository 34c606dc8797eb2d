"""Progress display and run log subscribers."""

from __future__ import annotations

import io

from sequencer.engine import Runner, RunOptions
from sequencer.engine.log import RunLog
from sequencer.engine.progress import ProgressDisplay

from .plans import plan, step
from .scripted import BenchState, scripted_bench


def test_progress_not_a_terminal_prints_a_line_per_n_steps():
    p = plan([step(f"s/{i}", "wait", estimate_s=0.5, seconds=0.0) for i in range(25)])
    out = io.StringIO()
    display = ProgressDisplay(p, stream=out, every=10)
    Runner(
        p, scripted_bench(BenchState()), run_id=5, subscribers=[display], options=RunOptions()
    ).run()
    lines = out.getvalue().splitlines()
    assert lines == [
        "10 steps done, at s/9",
        "20 steps done, at s/19",
        "run 5 completed after 25 steps",
    ]
    assert "\x1b" not in out.getvalue()  # nothing animated


def test_progress_quiet():
    p = plan([step("s", "wait", seconds=0.0)])
    out = io.StringIO()
    Runner(
        p,
        scripted_bench(BenchState()),
        run_id=5,
        subscribers=[ProgressDisplay(p, stream=out, every=0)],
        options=RunOptions(),
    ).run()
    assert out.getvalue() == ""


def test_progress_on_a_terminal_shows_the_bar():
    p = plan([step("gain/ch3/x5/amp=40mV/capture", "wait", estimate_s=1.0, seconds=0.0)])
    out = io.StringIO()
    display = ProgressDisplay(p, stream=out, force_terminal=True)
    Runner(
        p, scripted_bench(BenchState()), run_id=5, subscribers=[display], options=RunOptions()
    ).run()
    text = out.getvalue()
    assert "gain/ch3/x5/amp=40mV/capture" in text and "1/1" in text


def test_run_log_one_line_per_event(tmp_path):
    p = plan([step("a", "pulser.amplitude", mV=40.0), step("w", "wait", seconds=0.0)])
    path = tmp_path / "run.log"
    with RunLog(path) as log:
        Runner(
            p,
            scripted_bench(BenchState()),
            run_id=9,
            subscribers=[log],
            options=RunOptions(operator="C"),
        ).run()
    lines = path.read_text().splitlines()
    assert len(lines) == 1 + 2 * 2 + 1  # started, 2 x (step started, finished), finished
    assert "run 9 started: engine-test 1 board NR-PA8-0001" in lines[0] and "operator C" in lines[0]
    assert lines[-1].endswith("run 9 completed")
