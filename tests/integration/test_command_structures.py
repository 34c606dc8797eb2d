"""The same board qualified through each simulated command structure gives the same figures.

The scope speaks either the generic structure or a waveform subsystem (source select, 10-field
preamble with references, unsigned little-endian words, at most 10 000 points per request); the bias
supply either the generic one or a source-measure unit (reading elements, ON/OFF, compliance,
interlock as a status bit, no slew command: ramped in software).  Each is driven only by its shipped
dialect file (drivers/dialects/), chosen per role in the board file (``command_sets``).

Truth: gain = the board file's gain_x1 within 2 % (the gain tests' tolerance); leakage = V / R plus
the simulated meter's offset within 5 % (the leakage tests' tolerance); between structures the
figures agree within the same tolerances (the noise differs only in which samples are drawn).
"""

from __future__ import annotations

import pytest

from drivers.bench import bench_from_mapping, open_bench
from drivers.check import check_bench
from drivers.sim import start_sim_bench
from sequencer.store import Store
from tests.integration.qualification_sim import channel, run_shipped, write_board

WAVE = {"scope": "wavescope"}
SMU = {"bias": "sourcemeter"}
GAIN_TOLERANCE = 0.02
LEAKAGE_TOLERANCE = 0.05
VOLTS = 10.0


def board(tmp_path, serial, command_sets):
    sets = {"command_sets": command_sets} if command_sets else {}
    return write_board(tmp_path, serial, [channel(gain_x1=1.02), channel(gain_x1=0.97)], **sets)


def test_every_query_of_the_foreign_structures_reads_back(tmp_path):
    path = board(tmp_path, "NR-PA8-T901", {**WAVE, **SMU})
    with start_sim_bench(path) as sim:
        spec = bench_from_mapping(sim.bench_mapping())
        assert spec.instruments["scope"].dialect == "wavescope"
        assert spec.instruments["bias"].dialect == "sourcemeter"
        text = "\n".join(check_bench(spec))
        assert "FAILED" not in text and " ERROR " not in text, text
        assert "bias.interlock_closed" in text and "'STATus:OPERation:CONDition?' -> True" in text
        assert "bias.set_ramp_rate absent" in text and "software" in text
        with open_bench(spec, roles=["bias"]) as bench:
            assert bench.bias.software_ramp and not bench.bias.output_on()


def test_a_long_record_comes_in_chunks_with_the_same_volts(tmp_path):
    generic = board(tmp_path / "g", "NR-PA8-T902", {})
    wave = board(tmp_path / "w", "NR-PA8-T902", WAVE)
    traces = []
    for path in (generic, wave):
        with start_sim_bench(path) as sim, open_bench(bench_from_mapping(sim.bench_mapping()),
                                                      roles=["scope"]) as bench:  # fmt: skip
            bench.scope.set_input(1, range_mV=1000.0)
            bench.scope.set_timebase(sample_rate_hz=1e9, points=25_000, pretrigger_ns=100.0)
            traces.append(bench.scope.capture([1])[0])
    a, b = traces
    # same record length, time base and calibration: 25 000 points came as 3 requests of <= 10 000
    assert len(a.volts) == len(b.volts) == 25_000
    assert (b.dt_s, b.t0_s) == pytest.approx((a.dt_s, a.t0_s))
    assert b.volts == pytest.approx(a.volts, abs=1e-12)  # same seed, same codes, same volts


@pytest.mark.slow
def test_gain_and_leakage_agree_through_every_structure(tmp_path):
    figures = {}
    for name, sets in (("generic", {}), ("foreign", {**WAVE, **SMU})):
        path = board(tmp_path / name, "NR-PA8-T903", sets)
        gain = run_shipped("gain-linearity", path, tmp_path / f"{name}-g.db", channels=2)
        leak = run_shipped("bias-leakage", path, tmp_path / f"{name}-l.db", channels=2,
                           overrides={"volts": f"{VOLTS} V"})  # fmt: skip
        gains = gain.values("gain")
        figures[name] = (gains[(1, "x1", None)].value, gains[(2, "x1", None)].value,
                         leak.measurements[0].value)  # fmt: skip
        with Store.open(leak.db_url) as store:
            kinds = [e.kind for e in store.safety_events(leak.run_id)]
        assert kinds[-1] == "safe_state" or "safe_state" in kinds
    g1, g2, leak_nA = figures["foreign"]
    assert g1 == pytest.approx(1.02, rel=GAIN_TOLERANCE)
    assert g2 == pytest.approx(0.97, rel=GAIN_TOLERANCE)
    assert leak_nA == pytest.approx(VOLTS / 5000 * 1e3, rel=LEAKAGE_TOLERANCE)  # V/MΩ = µA
    for ours, theirs in zip(figures["foreign"], figures["generic"], strict=True):
        assert ours == pytest.approx(theirs, rel=GAIN_TOLERANCE)
