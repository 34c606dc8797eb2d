"""procedures/pulse-shape.yaml against simulated boards whose shapers are known.

Truth (REFERENCES.md, Spieler 2005 ch. 4): unipolar CR-RC^n peaks at n·tau; bipolar CR^2-RC^n has
its positive peak at (n+1-sqrt(n+1))·tau and its zero crossing at (n+1)·tau.  The fast pulse's
10-90 % rise is the board file's ``pulse.rise_ns``.  Tolerances: peaking time 5 % (the issue's);
zero crossing and rise time 5 % (ours).
"""

from __future__ import annotations

import math

import pytest

from sequencer.store import Store
from tests.integration.qualification_sim import channel, run_shipped, write_board

TOLERANCE = 0.05  # the tolerance on peaking time; used for the rise time too


def _run(tmp_path, serial, shaper, rise_ns=4.0):
    board = write_board(
        tmp_path,
        serial,
        [channel(), channel(gain_x1=0.97)],
        shaper=shaper,
        pulse={"rise_ns": rise_ns, "decay_ns": 40.0},
    )
    return run_shipped("pulse-shape", board, tmp_path / f"{serial}.db", channels=2)


def test_unipolar_shaper_and_rise_time(tmp_path):
    result = _run(
        tmp_path, "NR-PA8-T501", {"order": 4, "tau_ns": 50, "kind": "unipolar"}, rise_ns=6.0
    )
    for ch in (1, 2):
        peak = result.values("peaking_time_ns")[(ch, "shaped", None)]
        assert peak.value == pytest.approx(4 * 50.0, rel=TOLERANCE)  # n·tau
        assert peak.verdict == "pass"
        for output in ("x1", "x5"):
            rise = result.values("rise_time_ns")[(ch, output, None)]
            assert rise.value == pytest.approx(6.0, rel=TOLERANCE)
            assert rise.verdict == "pass"


def test_bipolar_shaper_peak_and_zero_crossing(tmp_path):
    n, tau = 3, 40.0
    result = _run(tmp_path, "NR-PA8-T502", {"order": n, "tau_ns": tau, "kind": "bipolar"})
    expected_peak = (n + 1 - math.sqrt(n + 1)) * tau  # 80 ns
    for ch in (1, 2):
        peak = result.values("peaking_time_ns")[(ch, "shaped", None)]
        assert peak.value == pytest.approx(expected_peak, rel=TOLERANCE)
        assert peak.verdict == "fail"  # a PA8 must peak at 200 ns
    with Store.open(result.db_url) as store:
        crossings = [
            s.results["zero_crossing_ns"]
            for s in store.completed_steps(result.run_id).values()
            if s.kind == "analyse.peaking"
        ]
    assert len(crossings) == 2
    for zc in crossings:
        assert zc == pytest.approx((n + 1) * tau, rel=TOLERANCE)  # (n+1)·tau = 160 ns
