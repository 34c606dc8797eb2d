"""The engine's own records: run options, the caution shown before voltage goes live, step results.

Settings are frozen keyword-only dataclasses (STYLE.md rule 10); the CLI builds ``RunOptions`` from
its flags and hands it to :class:`~sequencer.engine.runner.Runner`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

from sequencer.records import StepResult as StepResult  # re-exported: the one step-result record

DEFAULT_INTERLOCK_INTERVAL_S = 0.25
"""How often the interlock watcher reads the bias supply while a voltage is live."""
DEFAULT_RAMP_POLL_S = 0.05
"""Interval between read-backs while a bias ramp runs."""
DEFAULT_RAMP_TOLERANCE_V = 0.1
"""A ramp is done when the measured voltage is this close to the setpoint."""
DEFAULT_RAMP_MARGIN_S = 5.0
"""Time allowed beyond |ΔV| / rate before a ramp counts as stuck."""

SAFETY_TEXT = "keep the enclosure closed; follow your lab's safety rules and local codes"


@dataclass(frozen=True, kw_only=True)
class Caution:
    """What the operator is asked to acknowledge before the first step that makes a voltage live."""

    live: tuple[str, ...]  # e.g. ("bias supply at TCPIP0::...::SOCKET (SiPM bias)",)
    max_volts: float  # largest voltage any step requests, V
    max_ramp_V_per_s: float  # largest ramp rate, V/s
    steps: tuple[str, ...]  # paths of the steps that make it live
    advice: str = SAFETY_TEXT

    def text(self) -> str:
        """The caution as a few lines of plain text."""
        return (
            f"CAUTION: this procedure makes a voltage live: {', '.join(self.live)}.\n"
            f"Maximum {self.max_volts:g} V, ramped at up to {self.max_ramp_V_per_s:g} V/s "
            f"({len(self.steps)} step(s), first {self.steps[0] if self.steps else '-'}).\n"
            f"{self.advice[0].upper()}{self.advice[1:]}."
        )


@dataclass(frozen=True, kw_only=True)
class RunOptions:
    """How a run is carried out.

    ``acknowledge`` shows the :class:`Caution` and returns True when the operator accepts it (the
    CLI supplies a terminal prompt; None = no terminal).  ``unattended`` (``--yes``) is a recorded
    acknowledgement without a prompt.  Without either, a procedure with a hazard is refused.
    """

    acknowledge: Callable[[Caution], bool] | None = None
    unattended: bool = False
    operator: str = ""
    interlock_interval_s: float = DEFAULT_INTERLOCK_INTERVAL_S
    ramp_poll_s: float = DEFAULT_RAMP_POLL_S
    ramp_tolerance_V: float = DEFAULT_RAMP_TOLERANCE_V
    ramp_margin_s: float = DEFAULT_RAMP_MARGIN_S
    handle_signals: bool = True
    prompt: Callable[[str, bool], str] | None = None  # (message, wants_value) -> typed text


@dataclass(frozen=True, kw_only=True)
class RunOutcome:
    """A run that reached its end (an aborted run raises ``RunAborted`` instead)."""

    status: Literal["completed"]
    failed: int  # measurements with verdict fail
    measurements: int  # all measurements of the run (replayed ones included)
    warnings: tuple[str, ...] = ()  # e.g. safety events the results database did not take


EMPTY_RESULT = StepResult()
