"""Progress display and run log subscribers."""

from __future__ import annotations

import io
import re

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
    assert len(lines) == 3 and lines[2] == "run 5 completed after 25 steps"
    # the time left depends on this machine's pace: its text is checked in test_pace_time_left
    assert re.fullmatch(r"10 of 25 steps done(, (about|less than) .+ left at the pace so far)?; at s/9", lines[0])
    assert re.fullmatch(r"20 of 25 steps done(, (about|less than) .+ left at the pace so far)?; at s/19", lines[1])
    assert "\x1b" not in out.getvalue()  # nothing animated


def test_pace_time_left():
    from sequencer.pace import describe_left, time_left

    assert time_left(10, 25, 20.0) == 30.0  # 2 s a step so far, 15 steps left
    assert time_left(0, 25, 20.0) is None and time_left(30, 25, 5.0) == 0.0
    assert describe_left(30.0) == "about 30 s left"
    assert describe_left(190.0) == "about 3 min 10 s left"
    assert describe_left(3725.0) == "about 1 h 02 min left"
    assert describe_left(None) == "" and describe_left(0.4) == "less than 1 s left"


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


def test_run_log_shows_a_traces_meta():
    # the input's rails a capture was taken with (what the clipping check needs) are in the log line
    import numpy as np

    from sequencer.engine.log import format_event
    from sequencer.events import TraceCaptured

    line = format_event(TraceCaptured(
        run_id=1, path="noise/ch1/x1/capture", name="baseline", samples=np.zeros(100), dt_s=1e-9,
        t0_s=0.0, source="CHAN1", averages=16, meta={"rails_mV": "-50.0,50.0"},
    ))
    assert line == ("- trace baseline at noise/ch1/x1/capture: 100 samples, dt 1e-09 s, CHAN1 x16, "
                    "rails_mV -50.0,50.0")
