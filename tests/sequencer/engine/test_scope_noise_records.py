"""scope.capture with noise_target (sequencer/engine/steps/scope.py): the scope is faked at the edge
and hands out white Gaussian records, for which the effective sample count is the sample count and
the RMS's relative standard uncertainty 1/sqrt(2 dof) (GUM JCGM 100:2008 E.4.3; dof = samples less
one mean a record).  Checks: the count the rule implies, every record handed on unaveraged, the stop
flag looked at before each capture, the budget, and the two targets refused together."""

from __future__ import annotations

from datetime import UTC, datetime
from types import SimpleNamespace

import numpy as np
import pytest

from drivers.trace import Trace
from sequencer.engine.context import RunContext, StopFlag
from sequencer.engine.records import RunOptions
from sequencer.engine.steps import handler_table
from sequencer.errors import RunAborted

from .plans import plan, step

CAPTURE = handler_table()["scope.capture"]


class NoiseScope:
    """Records of ``points`` white samples of 1 mV RMS; counts its captures."""

    def __init__(self, points: int, stop: StopFlag | None = None, stop_after: int = 0) -> None:
        self.rng = np.random.default_rng(3)
        self.points, self.captures = points, 0
        self.stop, self.stop_after = stop, stop_after

    def capture(self, inputs):
        self.captures += 1
        if self.stop is not None and self.captures == self.stop_after:
            self.stop.request("operator", "stop")
        return [Trace(volts=1e-3 * self.rng.standard_normal(self.points), dt_s=1e-9, t0_s=0.0,
                      source=f"CHAN{i}") for i in inputs]  # fmt: skip


def ctx_with(scope: NoiseScope, stop: StopFlag | None = None) -> RunContext:
    return RunContext(plan=plan([]), bench=SimpleNamespace(scope=scope), run_id=1,
                      emit=lambda e: None, options=RunOptions(),
                      clock=lambda: datetime(2026, 1, 1, tzinfo=UTC), stop=stop or StopFlag())  # fmt: skip


def test_records_until_the_target_each_handed_on():
    # 1000 white samples a record: dof 999 -> 2.24 %; 2 records 1998 -> 1.58 %; 3 -> 1.29 %
    scope = NoiseScope(1000)
    s = step("n/records", "scope.capture", inputs=[1], into=["baseline"], noise_target=1.5)
    result = CAPTURE(ctx_with(scope), s)
    assert scope.captures == 3 == result.results["captures"] == len(result.traces)
    assert {t.name for t in result.traces} == {"baseline"} and all(t.averages == 1 for t in result.traces)
    assert result.results["stopped"] == "target uncertainty reached"
    assert result.results["rms_relative_uncertainty"] == pytest.approx(1 / np.sqrt(2 * 2997), rel=0.05)


def test_the_budget_and_the_stop_flag_bound_it():
    scope = NoiseScope(100)
    s = step("n/records", "scope.capture", inputs=[1], into=["b"], noise_target=0.5, max_captures=4)
    result = CAPTURE(ctx_with(scope), s)
    assert scope.captures == 4 and result.results["stopped"] == "capture budget spent"
    assert not result.results["target_reached"]
    stop = StopFlag()
    scope = NoiseScope(100, stop=stop, stop_after=2)
    with pytest.raises(RunAborted):
        CAPTURE(ctx_with(scope, stop), s)
    assert scope.captures == 2  # looked at before the third


def test_a_pulse_target_and_a_noise_target_together_are_refused():
    s = step("x", "scope.capture", inputs=[1], into=["b"], noise_target=2.0,
             target_uncertainty=0.02)  # fmt: skip
    with pytest.raises(ValueError, match="not both"):
        CAPTURE(ctx_with(NoiseScope(100)), s)
