"""Amplitude scans whose captures stop at a target uncertainty (scope.capture target_uncertainty,
sequencer/analysis/averaging.py) validated against the fixed count of procedures/gain-linearity.yaml
on a simulated board whose gains are known.

Both runs play the same board (same seed).  The fixed run captures 256 averages once per point; the
adaptive one captures 32 averages at a time until the height's standard error of the mean (GUM
Type A, JCGM 100:2008 §4.2.3) reaches 0.02 mV, with 3 to 8 captures (8 x 32 = the fixed 256).
Instrument time is what the bench's clock accounted for the scope's acquisitions
(drivers/sim/clock.py), not wall time.  Checks:
* the same values: gain, offset and INL agree within 3 combined standard uncertainties (k = 3:
  common practice), with the same verdicts, and the healthy gains agree with the board file within
  1 % (the tolerance of test_qualification_gain.py);
* the stopping rule did what it says: a point that stopped early reached the target, one that did
  not took the whole budget;
* less acquisition time than the fixed count, and exactly the captures taken times 32 averages
  at the pulser's 10 kHz (the timing model: acquisition = averages / trigger rate);
* on a second board with inverted outputs, a 20 ns cable delay and DC levels of a few mV (judged
  as PA8N), the same values and verdicts too, and its true (negative) gains within 1 %.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import pytest

from drivers.sim import start_sim_bench
from sequencer import compose
from sequencer.procedure import build_plan, load_board_type, load_procedure
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, channel, small_board, write_board

BOARD = [
    channel(gain_x1=0.97, gain_x5=5.10),
    channel(gain_x1=1.03, gain_x5=4.88, baseline_mV=-0.3, noise_in_mV=0.6),  # twice as noisy
    channel(gain_x1=1.00, gain_x5=5.00, saturation_mV=300),  # saturates early: fails INL
]
TARGET_MV = 0.02
ADAPTIVE = {"averages": 32, "target_uncertainty": f"{TARGET_MV} mV", "min_captures": 3,
            "max_captures": 8}  # fmt: skip
PULSER_HZ = 10_000.0  # parts/setup.yaml's pulser rate
POINTS = 3 * 2 * 8  # channels x outputs x amplitudes


def _run(board: Path, db: Path, overrides: dict) -> tuple[dict, float, list]:
    plan = build_plan(load_procedure(PROCEDURES / "gain-linearity.yaml"),
                      small_board("NR-PA8-T701", len(BOARD)), overrides=overrides)  # fmt: skip
    request = compose.RunRequest(operator="test", unattended=True, progress=False,
                                 handle_signals=False)  # fmt: skip
    with Store.open(f"sqlite:///{db}") as store, start_sim_bench(board) as sim:
        from drivers.bench import bench_from_mapping

        spec = bench_from_mapping(sim.bench_mapping(), source="<sim>")
        result = compose.execute(plan, spec, store, request)
        acquired = sim.pace.seconds("acquisition")
        values = {
            (m.quantity, m.channel, m.output): m for m in store.measurements(run_id=result.run_id)
        }
        done = store.completed_steps(result.run_id).values()
        captures = [s for s in done if s.kind == "scope.capture"]
    return values, acquired, captures


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("adaptive_amplitude")
    board = write_board(folder, "NR-PA8-T701", BOARD, seed=21)
    return _run(board, folder / "fixed.db", {}), _run(board, folder / "adaptive.db", ADAPTIVE)


@pytest.mark.parametrize("ch", [1, 2, 3])
@pytest.mark.parametrize("output", ["x1", "x5"])
@pytest.mark.parametrize("quantity", ["gain", "offset_mV", "inl_pct"])
def test_the_same_values_within_their_uncertainties(runs, ch, output, quantity):
    (fixed, _, _), (adaptive, _, _) = runs
    f, a = fixed[(quantity, ch, output)], adaptive[(quantity, ch, output)]
    assert f.verdict == a.verdict
    u = math.hypot(f.uncertainty, a.uncertainty)
    assert abs(a.value - f.value) <= 3 * u, (f.value, a.value, u)


@pytest.mark.parametrize("ch", [1, 2])
@pytest.mark.parametrize("output", ["x1", "x5"])
def test_the_healthy_gains_agree_with_the_board_file(runs, ch, output):
    _, (adaptive, _, _) = runs
    truth = BOARD[ch - 1][f"gain_{output}"]
    assert adaptive[("gain", ch, output)].value == pytest.approx(truth, rel=0.01)


def test_each_point_stopped_by_the_rule(runs):
    _, (_, _, steps) = runs
    assert len(steps) == POINTS
    for s in steps:
        r = s.results
        assert 3 <= r["captures"] <= 8
        if r["captures"] < 8:
            assert r["target_reached"] and r["height_sem_mV"] <= TARGET_MV
            assert r["stopped"] == "target uncertainty reached"
        elif not r["target_reached"]:
            assert r["stopped"] == "capture budget spent" and r["height_sem_mV"] > TARGET_MV
    # the quiet x1 outputs stop early; some point somewhere needs the whole budget
    assert any(s.results["captures"] == 3 for s in steps)
    assert any(s.results["captures"] == 8 for s in steps)


def test_less_acquisition_time_than_the_fixed_count(runs):
    (_, fixed_s, _), (_, adaptive_s, steps) = runs
    assert fixed_s == pytest.approx(POINTS * 256 / PULSER_HZ)
    taken = sum(s.results["captures"] for s in steps)
    assert adaptive_s == pytest.approx(taken * 32 / PULSER_HZ)
    assert adaptive_s < fixed_s


# A board unlike the first (issue 21: validated on boards with other polarity, baselines, delays
# and noise): inverted fast outputs, a 20 ns cable delay, DC levels of a few mV, a noisier channel.
INVERTED = [
    channel(gain_x1=1.01, gain_x5=4.95, baseline_mV=-3.0),
    channel(gain_x1=0.98, gain_x5=5.05, baseline_mV=4.0, noise_in_mV=0.5),
]


@pytest.fixture(scope="module")
def inverted_runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("adaptive_amplitude_inverted")
    board = write_board(folder, "NR-PA8-T702", INVERTED, seed=23, polarity="negative",
                        pulse_delay_ns=20.0)  # fmt: skip
    plan_runs = []
    for name, overrides in (("fixed", {}), ("adaptive", ADAPTIVE)):
        inverted = dataclasses.replace(load_board_type("PA8N"), serial="NR-PA8-T702",
                                       channels=len(INVERTED))  # judged by its own polarity
        plan = build_plan(load_procedure(PROCEDURES / "gain-linearity.yaml"), inverted,
                          overrides=overrides)  # fmt: skip
        request = compose.RunRequest(operator="test", unattended=True, progress=False,
                                     handle_signals=False)  # fmt: skip
        with Store.open(f"sqlite:///{folder / name}.db") as store, start_sim_bench(board) as sim:
            from drivers.bench import bench_from_mapping

            spec = bench_from_mapping(sim.bench_mapping(), source="<sim>")
            result = compose.execute(plan, spec, store, request)
            plan_runs.append({(m.quantity, m.channel, m.output): m
                              for m in store.measurements(run_id=result.run_id)})  # fmt: skip
    return plan_runs


def test_an_inverted_delayed_board_gives_the_same_values_and_its_true_gains(inverted_runs):
    fixed, adaptive = inverted_runs
    assert fixed.keys() == adaptive.keys() and len(fixed) == 3 * 2 * len(INVERTED)
    for key, f in fixed.items():
        a = adaptive[key]
        assert f.verdict == a.verdict, key
        assert f.measured and a.measured, (key, f.reason, a.reason)
        assert abs(a.value - f.value) <= 3 * math.hypot(f.uncertainty, a.uncertainty), key
    for ch, spec in enumerate(INVERTED, start=1):
        for output in ("x1", "x5"):  # negative-going outputs: negative gains, within 1 %
            truth = -spec[f"gain_{output}"]
            assert adaptive[("gain", ch, output)].value == pytest.approx(truth, rel=0.01)
