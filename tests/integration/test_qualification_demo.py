"""``benchwright demo``: the invented batch qualified end to end on the simulator.

The full demo qualifies five 8-channel boards (on two preamp benches), three scintillator modules
and two trigger-chain modules (short scans) on four simulated benches at once, with real-time bias
ramps, and draws 51 certificates: marked slow.  Its time goal (under a minute) is measured by
tests/benchmarks/bench_demo.py, not asserted here; here the benches' runs are checked to overlap.  The quick test checks the scenario itself:
invented serials, one fault of each kind, the batch file naming the shipped procedure, and a board
of the inverted board type PA8N judged as such (issue 15).
"""

from __future__ import annotations

import pytest
import yaml
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.demo import DEMO_BATCH, DEMO_MODULE_BATCH, DEMO_TRIGGER_BATCH, demo_dir
from sequencer.procedure import load_batch, load_procedure
from sequencer.store import Store


def test_the_scenario_has_one_fault_of_each_kind():
    batch = load_batch(demo_dir() / DEMO_BATCH)
    assert len(batch.boards) == 5
    assert all(b.serial.startswith(("NR-PA8-", "NR-PA8N-")) for b in batch.boards)
    assert [b.board_type for b in batch.boards].count("PA8N") == 1
    procedure = load_procedure(batch.procedure)
    assert procedure.name == "qualify-preamp" and "PA8N" in procedure.board_types
    boards = [yaml.safe_load((demo_dir() / f"{b.serial}.yaml").read_text()) for b in batch.boards]
    assert all(len(b["channels"]) == 8 for b in boards)
    (inverted,) = [b for b in boards if b["board_type"] == "PA8N"]
    assert inverted["polarity"] == "negative" and inverted["output_polarity"]["shaped"] == "negative"
    dc_fault = [c for c in inverted["channels"] if abs(c["baseline_mV"]) > 10.0]
    assert len(dc_fault) == 1
    dead = [b["serial"] for b in boards if any(c["dead"] for c in b["channels"])]
    saturating = [
        b["serial"] for b in boards if any(c["saturation_mV"] < 500 for c in b["channels"])
    ]
    crosstalk = [b["serial"] for b in boards if b["crosstalk_pct"] > 2.0]
    assert len(dead) == len(saturating) == len(crosstalk) == 1
    assert len({*dead, *saturating, *crosstalk}) == 3  # three different boards, one healthy


def test_the_module_scenario_has_a_sensor_off_and_a_poor_fibre():
    batch = load_batch(demo_dir() / DEMO_MODULE_BATCH)
    assert load_procedure(batch.procedure).name == "module-cosmics"
    modules = [yaml.safe_load((demo_dir() / f"{b.serial}.yaml").read_text()) for b in batch.boards]
    assert all(m["serial"].startswith("LX-M2-") and len(m["sensors"]) == 2 for m in modules)
    off = [m["serial"] for m in modules if any(s["breakdown_V"] > 52.0 for s in m["sensors"])]
    poor = [m["serial"] for m in modules if any(s.get("light_scale", 1) < 0.6 for s in m["sensors"])]
    assert len(off) == len(poor) == 1 and off != poor  # and one healthy module


def test_the_trigger_scenario_has_a_wide_coincidence_unit_and_a_missing_code():
    batch = load_batch(demo_dir() / DEMO_TRIGGER_BATCH)
    unit, digitizer = batch.boards
    assert load_procedure(batch.procedure_of(unit)).name == "coincidence-unit"
    assert load_procedure(batch.procedure_of(digitizer)).name == "digitizer"
    files = [yaml.safe_load((demo_dir() / f"{b.serial}.yaml").read_text()) for b in batch.boards]
    assert [f["board_type"] for f in files] == ["IDC4", "DGZ4"]
    # channel-less modules: the count alone
    assert all(f["channels"] == 4 for f in files)
    # IDC4 limits accept 18..22 ns for the 20 ns window (procedures/limits/IDC4.yaml)
    assert files[0]["coincidence"]["resolving_extra_ns"] > 2.0
    assert len(files[1]["converter"]["missing_codes"]) == 1
    # short scans for the demo's time (kept with each run), smaller than the shipped defaults
    assert batch.parameters_of(digitizer)["hist_points"] < 10**6


@pytest.mark.slow
def test_demo_runs_end_to_end(tmp_path):
    attach_commands()
    result = CliRunner().invoke(cli, ["demo", "--out", str(tmp_path / "demo")])
    assert result.exit_code == 0, result.output  # a demonstration: 0 although boards fail
    out = tmp_path / "demo"
    assert (out / "results.db").is_file()
    # 5 boards x 8 channels, then 3 modules x 2 sensors, then a coincidence unit (one module
    # certificate) and a digitizer (4 inputs)
    assert len(list((out / "certificates").glob("*.pdf"))) == 40 + 6 + 5
    assert len(list((out / "certificates").glob("*.html"))) == 40 + 6 + 5
    summary = (out / "batch-summary.txt").read_text()
    # 8 healthy + 7 (dead channel 5) + 7 (saturating channel 3) + 0 (crosstalk into every channel)
    # + 7 (PA8N, inverted outputs judged as such; channel 6 sits at -12 mV)
    assert "40 channels, 29 passed" in summary
    assert "LX-M2-0102" in summary and "LX-M2-0103" in summary  # the two failing modules
    # the trigger chain: both modules fail on their fault, the unit counted once
    assert "batch NR-2026-W14T: 2 boards, 5 channels, 0 passed" in summary
    assert "resolving_time_ns" in summary and "missing_codes" in summary
    assert str(out / "certificates") in result.output
    # four benches at once into the one database, each run recorded with its bench
    with Store.open(f"sqlite:///{out / 'results.db'}", create=False) as store:
        runs = store.list_runs()
    benches = {r.bench for r in runs}
    assert benches == {"demo-bench-preamp-1", "demo-bench-preamp-2", "demo-bench-modules",
                       "demo-bench-trigger"}
    long = ("demo-bench-preamp-1", "demo-bench-preamp-2", "demo-bench-modules")
    spans = [(min(r.started_at for r in runs if r.bench == b),
              max(r.ended_at for r in runs if r.bench == b)) for b in long]
    assert max(start for start, _ in spans) < min(end for _, end in spans)  # the three at once
