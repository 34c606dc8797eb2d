"""Expansion into a plan: paths, labels, conditions, sweeps, estimates, safety figures, determinism."""

from __future__ import annotations

from pathlib import Path

import pytest

from sequencer.errors import ProcedureError
from sequencer.procedure import (
    board_info,
    build_plan,
    format_plan,
    load_procedure,
    load_procedure_text,
)

ROOT = Path(__file__).resolve().parents[3]
DATA = Path(__file__).parent / "data"
PA8 = board_info("PA8", "NR-PA8-0001")


def plan_of(text: str, board=PA8, **kw):
    return build_plan(load_procedure_text(text, "t.yaml"), board, **kw)


HEAD = "name: t\nversion: 1\nboard_type: PA8\n"


def test_quick_gain_paths_labels_and_args():
    plan = build_plan(load_procedure(ROOT / "procedures/examples/quick-gain.yaml"), PA8)
    by_path = {s.path: s for s in plan.steps}
    # the scan runs to top = 160 mV out: x5 (nominal gain 5.0, board file) to 32 mV in
    step = by_path["gain/ch3/x5/amp=32mV/capture"]
    assert step.kind == "scope.capture" and step.labels == {
        "channel": 3,
        "output": "x5",
        "amp": pytest.approx(32.0),
    }
    assert dict(step.args) == {"inputs": (1,), "into": ("pulses",)}
    assert by_path["gain/ch3/x5/amp=32mV/amplitude"].args == {"mV": pytest.approx(32.0)}
    assert by_path["gain/ch3/x1/amp=160mV/amplitude"].args == {"mV": pytest.approx(160.0)}
    # range = 2.4 x top 160 mV = 384 mV on either output
    assert by_path["gain/ch3/x5/input"].args["range"] == pytest.approx(384.0)
    assert by_path["setup/timebase"].args == {
        "sample_rate": 1e9,
        "points": 1000,
        "pretrigger": 100.0,
    }
    # 8 channels x 2 outputs x 5 amplitudes x 3 steps per amplitude
    assert sum(s.kind == "scope.capture" for s in plan.steps) == 80
    assert [s.block for s in plan.steps][:6] == ["setup"] * 6 and plan.steps[-1].block == "cleanup"
    assert len({s.path for s in plan.steps}) == len(plan.steps)


def test_plans_are_deterministic():
    for path in (ROOT / "procedures/examples/quick-gain.yaml", DATA / "full.yaml"):
        a = build_plan(load_procedure(path), PA8)
        b = build_plan(load_procedure(path), PA8)
        assert [(s.path, s.kind, dict(s.args), dict(s.labels), s.estimate_s) for s in a.steps] == [
            (s.path, s.kind, dict(s.args), dict(s.labels), s.estimate_s) for s in b.steps
        ]
        assert format_plan(a) == format_plan(b)


def test_when_skips_the_missing_neighbour_of_the_edge_channel():
    plan = build_plan(load_procedure(DATA / "full.yaml"), PA8)
    paths = [s.path for s in plan.steps if s.path.startswith("xtalk/")]
    assert "xtalk/ch2/x1/route-right" in paths and "xtalk/ch8/x1/route" in paths
    assert not any(
        p.startswith("xtalk/ch8/x1/") and p.endswith(("route-right", "capture", "crosstalk"))
        for p in paths
    )
    crosstalk = next(s for s in plan.steps if s.path == "xtalk/ch2/x1/crosstalk")
    assert crosstalk.args["victim_channel"] == 3 and crosstalk.args["aggressor_channel"] == 2


def test_cartesian_and_zipped_sweeps():
    plan = build_plan(load_procedure(DATA / "full.yaml"), PA8)
    levels = [s for s in plan.steps if s.kind == "threshold.level"]
    # product: first variable outermost; range 2..6 mV step 2 mV includes the stop
    assert [(s.labels["amp"], s.labels["thr"]) for s in levels] == [
        (20.0, 2.0),
        (20.0, 4.0),
        (20.0, 6.0),
        (60.0, 2.0),
        (60.0, 4.0),
        (60.0, 6.0),
    ]
    assert levels[0].path == "scurve/amp=20mV/thr=2mV/level"
    shapes = [s for s in plan.steps if s.kind == "pulser.shape"]
    assert [s.path for s in shapes] == ["width=10ns,rate=1kHz/shape", "width=20ns,rate=2kHz/shape"]
    assert [s.labels["width"] for s in shapes] == [10.0, 20.0]  # labels of times in ns


def test_linspace_values_are_clean():
    plan = plan_of(
        HEAD + "steps:\n  - sweep: {a: {linspace: [0.1 V, 0.3 V, 5]}}\n    do:\n"
        "      - pulser.amplitude: '{a}'\n"
    )
    assert [s.args["mV"] for s in plan.steps] == [100.0, 150.0, 200.0, 250.0, 300.0]
    assert plan.steps[1].path == "a=0.15V/amplitude"


def test_bias_meta_and_ramp_estimates_track_the_setpoint():
    plan = build_plan(load_procedure(DATA / "full.yaml"), PA8)
    assert plan.meta.max_bias_volts == 30.0 and plan.meta.max_ramp_V_per_s == 5.0
    ramps = [s for s in plan.steps if s.kind == "bias.ramp"]
    assert ramps[0].args == {"volts": 30.0, "rate": 2.0}  # rate from defaults.ramp_rate
    assert all(s.hazard for s in ramps)
    # |30 V - 0 V| / 2 V/s = 15 s and |0 V - 30 V| / 5 V/s = 6 s, each plus the 0.5 s settling check
    assert [s.estimate_s for s in ramps] == pytest.approx([15.5, 6.5])
    off = [s for s in plan.steps if s.kind == "bias.output"]
    assert [s.hazard for s in off] == [True, False]


def test_capture_and_count_estimates():
    plan = plan_of(
        HEAD + "steps:\n  - scope.timebase: {sample_rate: 1 GS/s, points: 5000}\n"
        "  - scope.average: 10\n  - pulser.rate: 100 Hz\n  - scope.capture: {inputs: [1, 2], into: [a, b]}\n"
        "  - counter.gate: 0.25 s\n  - counter.count: {channel: 1, into: n}\n  - wait: 2 s\n"
    )
    capture, count, wait = plan.steps[3], plan.steps[5], plan.steps[6]
    # the timing model's defaults (drivers/timing.py): 1 ms a message, 10 MB/s, no re-arm time.
    # Acquisition = averages / trigger rate when the period exceeds the record (averaging N
    # triggered records takes N trigger periods: standard): 10 x max(5000 / 1e9 s, 1 / 100 Hz);
    # one message to start it, then 2 inputs x (preamble + data queries + 5000 x 2 B / 10 MB/s)
    assert capture.estimate_s == pytest.approx(10 * 0.01 + 0.001 + 2 * (2 * 0.001 + 0.001))
    assert count.estimate_s == pytest.approx(0.25 + 2 * 0.001)  # the gate + start + fetch
    assert wait.estimate_s == 2.0
    text = format_plan(plan)
    assert "scope.capture" in text and "estimated duration" in text and "7 steps" in text


def test_a_repeated_setting_costs_nothing_and_a_board_file_timing_is_used():
    from drivers.timing import BenchTiming, InstrumentTiming
    from sequencer.procedure.estimate import EstimateSettings, estimate_plan

    plan = plan_of(
        HEAD + "steps:\n  - pulser.rate: 100 Hz\n  - pulser.rate: 100 Hz\n  - pulser.rate: 1 kHz\n"
        "  - switch.inject: 2\n"
    )
    assert [s.estimate_s for s in plan.steps] == pytest.approx([0.001, 0.0, 0.001, 0.001 + 0.002])
    slow = BenchTiming(roles={"pulser": InstrumentTiming(round_trip_s=0.01),
                              "switch": InstrumentTiming(relay_settle_s=0.05)})  # fmt: skip
    again = estimate_plan(plan, EstimateSettings(timing=slow))
    assert [s.estimate_s for s in again.steps] == pytest.approx([0.01, 0.0, 0.01, 0.001 + 0.05])


def test_an_adaptive_scan_is_estimated_at_its_typical_gates():
    plan = plan_of(
        HEAD + "steps:\n  - counter.gate: 0.05 s\n"
        "  - counter.scan: {channel: 1, centre: 30 mV, window: 7 mV, trials: 500, target: 0.02 mV,"
        " target_sigma: 0.02 mV, into: s}\n"
    )
    # 5 coarse gates + 6 typical ones (tests/integration/test_adaptive_scans.py sees 3-5), each the
    # gate and three messages (level, start, fetch)
    assert plan.steps[1].estimate_s == pytest.approx(11 * (0.05 + 3 * 0.001))


def test_overrides_replace_parameters():
    text = HEAD + "parameters: {amp: 40 mV}\nsteps:\n  - pulser.amplitude: '{amp}'\n"
    assert plan_of(text, overrides={"amp": "25 mV"}).steps[0].args == {"mV": 25.0}
    assert plan_of(text).parameters == {"amp": "40 mV"}
    with pytest.raises(ProcedureError, match="override 'amps': no such parameter"):
        plan_of(text, overrides={"amps": 1})


def test_board_values_in_expressions():
    small = board_info("PA8", "X")
    from dataclasses import replace

    four = replace(small, channels=4)
    text = (
        HEAD
        + "steps:\n  - for_channels: all\n    do:\n      - scope.average: '{board.channels * channel}'\n"
    )
    assert [s.args["count"] for s in plan_of(text, board=four).steps] == [4, 8, 12, 16]


def test_plan_carries_source_and_limits():
    path = ROOT / "procedures/examples/quick-gain.yaml"
    plan = build_plan(load_procedure(path), PA8)
    import hashlib

    assert plan.source_text == path.read_text()
    # README "what procedure_sha256 means": SHA-256 of the sorted "<kind> <name> <sha256>\n" lines
    # of the procedure, its fragments and limit set (no board-type text given here); hashlib is the
    # reference
    limits = (ROOT / "procedures/limits/PA8.yaml").read_bytes()
    lines = sorted([
        f"procedure quick-gain {hashlib.sha256(path.read_bytes()).hexdigest()}\n",
        f"limits @limits/PA8.yaml {hashlib.sha256(limits).hexdigest()}\n",
    ])
    assert plan.sha256 == hashlib.sha256("".join(lines).encode()).hexdigest()
    assert plan.limit_for("gain", "x5").low == 4.75


def test_a_capture_to_a_target_uncertainty_is_estimated_at_its_most_captures():
    plan = plan_of(
        HEAD + "steps:\n  - scope.timebase: {sample_rate: 1 GS/s, points: 5000}\n"
        "  - scope.average: 10\n  - pulser.rate: 100 Hz\n"
        "  - scope.capture: {inputs: [1], into: [a], target_uncertainty: 0.05 mV, max_captures: 6}\n"
    )
    # the one-input capture of test_capture_and_count_estimates, at most 6 times (an upper bound:
    # the captures stop earlier when the height's standard error reaches the target); the
    # preamble is read once, then kept (drivers/roles/preamble_cache.py)
    one = 10 * 0.01 + 0.001 + (0.001 + 0.001)
    assert plan.steps[3].estimate_s == pytest.approx(6 * one + 0.001)


def test_noise_records_to_a_target_and_a_kept_preamble():
    plan = plan_of(
        HEAD + "steps:\n  - scope.timebase: {sample_rate: 1 GS/s, points: 5000}\n"
        "  - pulser.rate: 100 Hz\n"
        "  - scope.capture: {inputs: [1], into: [a], noise_target: 2 %, max_captures: 4}\n"
        "  - scope.capture: {inputs: [1], into: [b]}\n"
        "  - scope.input: {input: 1, range: 50 mV}\n"
        "  - scope.capture: {inputs: [1], into: [c]}\n"
    )
    # one acquisition = one trigger period (10 ms); start, data query, 10 kB at 10 MB/s
    one = 0.01 + 0.001 + (0.001 + 0.001)
    records, again, _, after = (s.estimate_s for s in plan.steps[2:])
    assert records == pytest.approx(4 * one + 0.001)  # at most 4, one preamble
    assert again == pytest.approx(one)  # nothing set since: the preamble is kept
    assert after == pytest.approx(one + 0.001)  # a new range: read again
