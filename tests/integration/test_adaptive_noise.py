"""Noise records taken until the RMS is known well enough (scope.capture noise_target,
sequencer/analysis/noise_stats.py), validated against the fixed two records of procedures/noise.yaml
on simulated boards whose noise is known.

Two boards, each run twice on the same seed: fixed (two records of 2000 points) and adaptive (records
of 5000 points until the RMS's relative standard uncertainty, its samples' correlation counted, is at
most 1.9 %, about what the two fixed records give on a 4 ns board).  Board A: positive outputs, a
4 ns rise, noise from 0.25 to 0.9 mV, baselines up to -1.5 mV.  Board B: inverted outputs, a 12 ns
rise (noise correlated over about three times more samples), a 20 ns cable delay, other baselines.
Checks:
* the same values: noise_in_mV within 3 combined standard uncertainties (k = 3, common practice)
  with the same verdicts, both within 5 % of the board file's truth (test_qualification_noise.py's
  tolerance);
* at the same uncertainty or better: the adaptive uncertainty is at most the fixed one (x 1.05);
* the stopping rule did what it says, and board B's correlated noise needs more records than A's;
* less acquisition time on board A: a record costs one trigger period (0.1 ms at 10 kHz) whatever
  its length up to that (drivers/timing.py), so one long record replaces two short ones.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from drivers.sim import start_sim_bench
from sequencer import compose
from sequencer.procedure import build_plan, load_procedure
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, channel, small_board, write_board

A = [
    channel(noise_in_mV=0.25, gain_x1=1.02, gain_x5=5.1),
    channel(noise_in_mV=0.45, baseline_mV=-1.5),
    channel(noise_in_mV=0.90),  # noisy: above the 0.6 mV limit
]
B = [
    channel(noise_in_mV=0.30, baseline_mV=2.0),
    channel(noise_in_mV=0.55, gain_x5=4.9),
    channel(noise_in_mV=0.80, baseline_mV=-0.8),
]
BOARDS = {
    "A": (A, {}),
    "B": (B, {"polarity": "negative", "pulse": {"rise_ns": 12.0, "decay_ns": 40.0},
              "pulse_delay_ns": 20.0}),
}  # fmt: skip
TARGET = 0.019
ADAPTIVE = {"noise_target": f"{100 * TARGET} %", "points": 5000}


def _run(board: Path, db: Path, channels: int, overrides: dict) -> tuple[dict, float, list]:
    plan = build_plan(load_procedure(PROCEDURES / "noise.yaml"),
                      small_board(board.stem, channels), overrides=overrides)  # fmt: skip
    request = compose.RunRequest(operator="test", unattended=True, progress=False,
                                 handle_signals=False)  # fmt: skip
    with Store.open(f"sqlite:///{db}") as store, start_sim_bench(board) as sim:
        from drivers.bench import bench_from_mapping

        spec = bench_from_mapping(sim.bench_mapping(), source="<sim>")
        result = compose.execute(plan, spec, store, request)
        acquired = sim.pace.seconds("acquisition")
        values = {(m.channel, m.output): m for m in store.measurements(run_id=result.run_id)
                  if m.quantity == "noise_in_mV"}  # fmt: skip
        done = store.completed_steps(result.run_id)
        records = [s for p, s in done.items() if p.endswith("/records")]
    return values, acquired, records


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    """Board name -> (its channels, the fixed run, the adaptive run)."""
    out = {}
    for name, (channels, extra) in BOARDS.items():
        folder = tmp_path_factory.mktemp(f"adaptive_noise_{name}")
        board = write_board(folder, f"NR-PA8-T80{name}", channels, seed=41, **extra)
        out[name] = (channels, _run(board, folder / "fixed.db", len(channels), {}),
                     _run(board, folder / "adaptive.db", len(channels), ADAPTIVE))  # fmt: skip
    return out


@pytest.mark.parametrize("name", list(BOARDS))
def test_the_same_values_at_the_same_uncertainty_or_better(results, name):
    channels, (fixed, _, _), (adaptive, _, _) = results[name]
    assert fixed.keys() == adaptive.keys() and len(fixed) == 2 * len(channels)
    for (ch, output), f in fixed.items():
        a = adaptive[(ch, output)]
        assert f.verdict == a.verdict
        assert abs(a.value - f.value) <= 3 * math.hypot(f.uncertainty, a.uncertainty)
        spec = channels[ch - 1]
        truth = spec["noise_in_mV"] * spec[f"gain_{output}"] / {"x1": 1.0, "x5": 5.0}[output]
        assert a.value == pytest.approx(truth, rel=0.05)
        assert a.uncertainty <= 1.05 * f.uncertainty
        assert a.uncertainty / a.value <= TARGET * 1.001  # what the rule stopped at


@pytest.mark.parametrize("name", list(BOARDS))
def test_each_output_stopped_by_the_rule(results, name):
    channels, _, (_, _, records) = results[name]
    assert len(records) == 2 * len(channels)
    for step in records:
        r = step.results
        assert r["stopped"] == "target uncertainty reached" and r["target_reached"]
        assert r["rms_relative_uncertainty"] <= TARGET
        assert len(step.traces) == r["captures"]  # every record kept, none averaged


def test_correlated_noise_needs_more_records_and_a_long_record_saves_time(results):
    records = {n: [s.results["captures"] for s in r[2][2]] for n, r in results.items()}
    assert max(records["A"]) < min(records["B"])  # 12 ns rise: fewer independent samples a record
    _, (_, fixed_s, _), (_, adaptive_s, _) = results["A"]
    # acquisitions: 6 outputs x (DC level + records) x 0.1 ms; fixed: 2 records, adaptive: 1
    assert fixed_s == pytest.approx(6 * 3 * 1e-4)
    assert adaptive_s == pytest.approx(6 * (1 + 1) * 1e-4)
