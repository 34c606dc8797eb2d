"""The expanded plan: what the procedure layer hands to the engine.

Contract between ``sequencer.procedure`` (which builds it) and ``sequencer.engine`` (which executes it).
Every value in ``PlannedStep.args`` is resolved: numbers in the canonical unit of ``kinds.KINDS``,
expressions evaluated, loop variables substituted.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

from drivers.errors import Location
from sequencer.inputs import RunInput

from .decision import Decision, DecisionRule, decide

Block = Literal["setup", "main", "cleanup"]


@dataclass(frozen=True)
class BoardInfo:
    """What the plan needs to know of the board under test."""

    serial: str
    board_type: str
    channels: int
    outputs: tuple[str, ...] = ("x1", "x5", "shaped")
    nominal_gain: Mapping[str, float] = field(default_factory=dict)   # output -> V/V
    polarity: Mapping[str, int] = field(default_factory=dict)   # output -> +1 / -1 (absent: +1)
    source: str = ""                 # the board-type file it came from
    #: test-pulse amplitudes the board's injection input accepts, mV (None: not declared), and
    #: where the board-type file declares it (for messages)
    input_range_mV: tuple[float, float] | None = None
    input_range_at: str = ""
    #: discriminator thresholds the board's threshold inputs accept, mV, and where declared
    threshold_range_mV: tuple[float, float] | None = None
    threshold_range_at: str = ""

    def sign(self, output: str | None) -> int:
        """+1 for a positive-going output (the default), -1 for a negative-going one."""
        return -1 if output is not None and self.polarity.get(output, 1) < 0 else 1


@dataclass(frozen=True)
class Limit:
    """Acceptance window of one quantity, inclusive; either bound may be open (None)."""

    quantity: str
    low: float | None
    high: float | None
    unit: str
    output: str | None = None      # None = every output
    reason: str = ""
    rule: DecisionRule = field(default_factory=DecisionRule)   # the limit set's decision rule

    def decide(self, value: float, uncertainty: float | None) -> Decision:
        """Verdict and qualifier under the limit set's decision rule (``decision.decide``)."""
        return decide(value, uncertainty, self.low, self.high, self.rule)

    def judge(self, value: float) -> Literal["pass", "fail"]:
        """``pass`` when ``low <= value <= high`` (open bounds ignored); NaN fails."""
        if value != value:  # NaN
            return "fail"
        if self.low is not None and value < self.low:
            return "fail"
        if self.high is not None and value > self.high:
            return "fail"
        return "pass"


@dataclass(frozen=True)
class PlannedStep:
    """One leaf step of the plan."""

    path: str                       # stable and unique, e.g. "gain/ch3/x5/amp=40mV/capture"
    kind: str                       # a key of kinds.KINDS
    args: Mapping[str, Any]         # resolved, canonical units
    labels: Mapping[str, Any]       # loop and sweep variables in scope: channel, output, amp, ...
    block: Block = "main"
    estimate_s: float = 0.0
    hazard: bool = False
    location: Location | None = None   # where the step stands in its YAML file


@dataclass(frozen=True)
class ProcedureMeta:
    """Metadata of the procedure."""

    name: str
    version: str
    description: str = ""
    board_type: str = ""
    roles: tuple[str, ...] = ()
    hazards: tuple[str, ...] = ()   # e.g. ("bias",)
    max_bias_volts: float = 0.0     # largest bias voltage any step requests (0 = none)
    max_ramp_V_per_s: float = 0.0   # largest ramp rate any step requests


@dataclass(frozen=True)
class Plan:
    """An ordered, fully expanded procedure for one board."""

    meta: ProcedureMeta
    board: BoardInfo
    steps: tuple[PlannedStep, ...]           # setup, then main, then cleanup, in execution order
    limits: tuple[Limit, ...] = ()
    parameters: Mapping[str, Any] = field(default_factory=dict)
    source_text: str = ""                    # the procedure YAML text as read (stored with the run)
    source_path: str = ""
    sha256: str = ""                         # sequencer.inputs.procedure_digest(inputs), hex
    inputs: tuple[RunInput, ...] = ()        # every text the plan was built from (stored with the run)

    def limit_for(self, quantity: str, output: str | None) -> Limit | None:
        """The limit of ``quantity`` for ``output`` (an output-specific one wins over a general one)."""
        general = None
        for lim in self.limits:
            if lim.quantity != quantity:
                continue
            if lim.output is not None and lim.output == output:
                return lim
            if lim.output is None:
                general = lim
        return general

    @property
    def estimate_s(self) -> float:
        """Estimated duration of the whole plan in seconds."""
        return sum(s.estimate_s for s in self.steps)
