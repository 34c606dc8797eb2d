"""procedures/crosstalk.yaml against simulated boards whose coupling is known.

Truth: the board file's ``crosstalk_pct`` into each adjacent channel, 0 into any other (DESIGN.md
physics); tolerance 0.25 percentage points (the issue's).  With 3 channels the far control of
channel 1 is channel 3 and vice versa (the middle channel has no far channel).
"""

from __future__ import annotations

import pytest

from tests.integration.qualification_sim import channel, run_shipped, write_board

TOLERANCE_PP = 0.25  # the tolerance on crosstalk, percentage points
PAIRS = {
    (2, 1): "near",
    (3, 1): "far",
    (1, 2): "near",
    (3, 2): "near",
    (2, 3): "near",
    (1, 3): "far",
}


def _run(tmp_path, serial, pct):
    board = write_board(
        tmp_path, serial, [channel(), channel(gain_x1=1.03), channel()], crosstalk_pct=pct
    )
    return run_shipped("crosstalk", board, tmp_path / f"{serial}.db", channels=3)


@pytest.fixture(scope="module")
def half_percent(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("xt"), "NR-PA8-T301", 0.5)


def test_every_victim_aggressor_pair_is_measured(half_percent):
    pairs = {(c, a) for (c, out, a) in half_percent.values("crosstalk_pct")}
    assert pairs == set(PAIRS)
    assert {out for (_, out, _) in half_percent.values("crosstalk_pct")} == {"x1"}


@pytest.mark.parametrize(("victim", "aggressor"), sorted(PAIRS))
def test_a_half_percent_victim_is_seen(half_percent, victim, aggressor):
    m = half_percent.values("crosstalk_pct")[(victim, "x1", aggressor)]
    truth = 0.5 if PAIRS[(victim, aggressor)] == "near" else 0.0
    assert m.value == pytest.approx(truth, abs=TOLERANCE_PP)
    assert m.verdict == "pass"
    assert m.unit == "%"


def test_far_channel_shows_the_floor(half_percent):
    far = [
        m.value
        for (c, _, a), m in half_percent.values("crosstalk_pct").items()
        if PAIRS[(c, a)] == "far"
    ]
    assert all(abs(v) < 0.05 for v in far)


def test_high_crosstalk_fails_on_every_neighbour(tmp_path):
    result = _run(tmp_path, "NR-PA8-T302", 3.0)
    for (victim, _, aggressor), m in result.values("crosstalk_pct").items():
        if PAIRS[(victim, aggressor)] == "near":
            assert m.value == pytest.approx(3.0, abs=TOLERANCE_PP) and m.verdict == "fail"
        else:
            assert m.verdict == "pass"
    assert result.failed == 4
