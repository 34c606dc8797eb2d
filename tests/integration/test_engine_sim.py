"""Whole runs of the engine over real TCP sockets to the simulated bench (drivers.sim)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim import board_from_mapping, start_sim_bench
from sequencer.engine import Runner, RunOptions
from sequencer.errors import RunAborted
from sequencer.events import MeasurementMade, SafetyEvent, StepFinished
from sequencer.procedure.plan_model import Limit
from tests.sequencer.engine.plans import plan, step

BOARD = Path(__file__).resolve().parents[2] / "drivers" / "sim" / "boards" / "example-pa8.yaml"
AMPS = (5.0, 10.0, 20.0, 30.0, 40.0)


def board(faults=()):
    data = yaml.safe_load(BOARD.read_text())
    data["faults"] = list(faults)
    return board_from_mapping(data)


def gain_plan(*, channel=3, output="x5", with_bias=True, soak_s=0.0):
    scope = {"channel": channel, "output": output}
    steps = [
        step(
            "setup/timebase",
            "scope.timebase",
            block="setup",
            sample_rate=1e9,
            points=1000,
            pretrigger=200.0,
        ),
        step("setup/input", "scope.input", block="setup", input=1, range=1200.0),
        step("setup/trigger", "scope.trigger", block="setup", source="EXTernal"),
        step("setup/average", "scope.average", block="setup", count=16),
        step("setup/pulser", "pulser.output", block="setup", on=True),
        step(f"gain/ch{channel}/inject", "switch.inject", channel=channel),
        step(
            f"gain/ch{channel}/{output}/route",
            "switch.route",
            labels=scope,
            channel=channel,
            output=output,
            input=1,
        ),
    ]
    for a in AMPS:
        lab = {**scope, "amp": a}
        base = f"gain/ch{channel}/{output}/amp={a:g}mV"
        steps += [
            step(f"{base}/set", "pulser.amplitude", labels=lab, mV=a),
            step(f"{base}/capture", "scope.capture", labels=lab, inputs=[1], into=["pulse"]),
        ]
    steps.append(
        step(
            f"gain/ch{channel}/{output}/analyse",
            "analyse.transfer",
            labels=scope,
            traces="pulse",
            x="amp",
            n_baseline=150,
        )
    )
    if with_bias:
        steps += [
            step("hv/up", "bias.ramp", volts=3.0, rate=10.0),
            step("hv/soak", "wait", seconds=soak_s),
            step("hv/read", "bias.read", into="hv"),
            step("hv/leakage", "analyse.leakage", reading="hv"),
            step("hv/down", "bias.ramp", volts=0.0),
        ]
    steps += [
        step("cleanup/pulser", "pulser.output", block="cleanup", on=False),
        step("cleanup/relays", "switch.open_all", block="cleanup"),
        step("cleanup/bias", "bias.output", block="cleanup", on=False),
    ]
    return plan(
        steps,
        limits=[Limit("gain", 4.5, 5.5, "V/V", output="x5")],
        hazards=("bias",) if with_bias else (),
        max_bias_volts=3.0 if with_bias else 0.0,
    )


def run_on_sim(p, faults=(), timeout_ms=None, **opts):
    with start_sim_bench(board(faults)) as sim:
        mapping = sim.bench_mapping()
        if timeout_ms is not None:  # keep the no-reply test quick
            for entry in mapping["instruments"].values():
                entry["timeout_ms"] = timeout_ms
        with open_bench(bench_from_mapping(mapping)) as bench:
            return _run(p, sim, bench, opts)


def _run(p, sim, bench, opts):
    events = []
    options = RunOptions(
        operator="integration", unattended=True, ramp_poll_s=0.02, interlock_interval_s=0.05, **opts
    )
    try:
        out = Runner(p, bench, run_id=1, subscribers=[events.append], options=options).run()
    except RunAborted as exc:
        out = exc
    # a second session watches the supply the run drove: the end state is read back
    with open_bench(bench_from_mapping(sim.bench_mapping()), roles=["bias"]) as watcher:
        end = (watcher.bias.output_on(), watcher.bias.voltage())
    return out, events, end


def test_gain_scan_and_leakage_over_sockets():
    out, events, (on, volts) = run_on_sim(gain_plan())
    assert out.status == "completed", out
    ms = {e.measurement.quantity: e.measurement for e in events if isinstance(e, MeasurementMade)}
    # board file truth: channel 3 gain_x5 = 5.01, saturation 1510 mV; DESIGN.md physics
    # h = S tanh(g A / S): the expected best-fit slope is numpy's line through that model
    g, sat = 5.01, 1510.0
    expected = np.polyfit(AMPS, sat * np.tanh(g * np.asarray(AMPS) / sat), 1)[0]
    assert ms["gain"].value == pytest.approx(expected, rel=0.01)
    assert ms["gain"].verdict == "pass" and ms["gain"].channel == 3
    # I = V / R: 3 V over 5000 MOhm = 0.6 nA (Ohm's law, board file bias_resistance_Mohm)
    assert ms["leakage_nA"].value == pytest.approx(0.6, rel=0.05)
    assert on is False and abs(volts) < 0.1
    assert any(isinstance(e, SafetyEvent) and e.kind == "safe_state" for e in events)


def test_interlock_fault_aborts_with_safe_state():
    fault = {"kind": "interlock_open", "after_s": 0.8}
    out, events, (on, volts) = run_on_sim(gain_plan(soak_s=5.0), faults=[fault])
    assert isinstance(out, RunAborted) and out.cause == "interlock", out
    assert "interlock" in str(out)
    assert on is False and abs(volts) < 0.1
    finished = {e.path: e.status for e in events if isinstance(e, StepFinished)}
    assert finished["cleanup/relays"] == "completed"  # cleanup ran


@pytest.mark.slow  # the drivers' resync waits its 10 s *OPC? timeout; quick variant: tests/sequencer/engine
def test_scope_no_reply_names_instrument_command_and_step():
    # the scope's 10th message: *IDN?, two set-up messages at open, four of setup (each setting
    # and its error query in one message), then 3 per capture (start + *OPC? + error query,
    # preamble, data): the second capture of the scan
    fault = {"kind": "no_reply", "role": "scope", "after_commands": 9}
    out, events, (_on, _) = run_on_sim(gain_plan(with_bias=False), faults=[fault], timeout_ms=300)
    assert isinstance(out, RunAborted) and out.cause == "instrument"
    text = str(out)
    assert text.startswith("scope at TCPIP0::127.0.0.1::") and "no reply" in text
    assert "[step gain/ch3/x5/" in text and "\n" not in text
    assert events[-1].status == "aborted" and events[-1].reason == text
