"""Checks of planned steps that need resolved values: channels and outputs of the board, names captured
before an analysis reads them, sweep variables an analysis names, and unique paths."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.errors import Problem

from .checking import suggest
from .model import Leaf
from .plan_model import BoardInfo, PlannedStep

CAPTURE_REFS = ("traces", "counts", "reading", "aggressor", "victim")
SWEEP_REFS = ("x", "amplitude")
CHANNEL_ARGS = ("channel", "victim_channel", "aggressor_channel")
PRODUCING_ARGS = ("into", "enter")


class StepChecks:
    """Follows the plan in order: what has been captured and which sweep variables were met."""

    def __init__(self, board: BoardInfo, problems: list[Problem]) -> None:
        self.board = board
        self.problems = problems
        self.produced: set[str] = set()
        self.swept: set[str] = set()
        self.out_of_range: set[object] = set()  # locations already reported (a sweep repeats)

    def _add(self, step: Leaf, key: str, message: str) -> None:
        self.problems.append(Problem(step.args[key].location, f"{step.kind}: {message}"))

    def check(self, step: Leaf, args: Mapping[str, Any], labels: Mapping[str, Any]) -> None:
        """Problems of one leaf with its resolved ``args``; then note what it produces."""
        board = self.board
        for key in CHANNEL_ARGS:
            if key in step.args and not 1 <= args[key] <= board.channels:
                self._add(
                    step,
                    key,
                    f"{key} {args[key]} outside 1..{board.channels} of {board.board_type}",
                )
        if "output" in step.args and args["output"] not in board.outputs:
            hint = suggest(args["output"], board.outputs)
            self._add(step, "output", f"{board.board_type} has no output {args['output']!r}{hint}")
        self._input_range(step, args)
        if step.kind.startswith("analyse."):
            for key in CAPTURE_REFS:
                if key in step.args and args[key] not in self.produced:
                    hint = suggest(args[key], self.produced)
                    self._add(
                        step, key, f"nothing captured into {args[key]!r} before this step{hint}"
                    )
            for key in SWEEP_REFS:
                if key in step.args and args[key] not in self.swept:
                    hint = suggest(args[key], self.swept)
                    self._add(
                        step,
                        key,
                        f"{args[key]!r} is not a sweep variable met before this step{hint}",
                    )
        for key in PRODUCING_ARGS:
            value = args.get(key)
            if value is not None:
                self.produced.update(value if isinstance(value, tuple) else (value,))
        self.swept.update(k for k in labels if k not in ("channel", "output"))
        if step.kind == "counter.scan":  # an adaptive scan sweeps its thresholds itself
            self.swept.add(args.get("x") or "thr")

    def _input_range(self, step: Leaf, args: Mapping[str, Any]) -> None:
        """A pulser or threshold setting outside the range the board type declares for it (once
        per place in the file, however many times a loop repeats it)."""
        peaks = _peaks(step.kind, args)
        if peaks is None:
            return
        which, key, low, high = peaks
        allowed, declared = (
            (self.board.input_range_mV, self.board.input_range_at)
            if which == "input"
            else (self.board.threshold_range_mV, self.board.threshold_range_at)
        )
        if allowed is None or (allowed[0] <= low and high <= allowed[1]):
            return
        where = step.args[key].location if key in step.args else step.location
        if where in self.out_of_range:
            return
        self.out_of_range.add(where)
        shown = f"{high:g} mV" if low == high else f"{low:g} to {high:g} mV"
        self.problems.append(
            Problem(
                where,
                f"{step.kind}: {shown} is outside the {which} range {allowed[0]:g} to "
                f"{allowed[1]:g} mV of board type {self.board.board_type} ({which}_range at "
                f"{declared})",
            )
        )


def _peaks(kind: str, args: Mapping[str, Any]) -> tuple[str, str, float, float] | None:
    """(which range, argument, lowest, highest) voltage a step asks of the board, in mV."""
    if kind == "pulser.amplitude":
        return "input", "mV", args["mV"], args["mV"]
    if kind == "pulser.sine":
        offset = args.get("offset", 0.0)
        return "input", "amplitude", offset - args["amplitude"], offset + args["amplitude"]
    if kind == "threshold.level":
        return "threshold", "mV", args["mV"], args["mV"]
    return None


def check_unique(steps: list[PlannedStep], problems: list[Problem]) -> None:
    """A path met twice is a problem at the second step."""
    first: dict[str, PlannedStep] = {}
    for step in steps:
        if step.path not in first:
            first[step.path] = step
            continue
        other = first[step.path].location
        line = f" (first at line {other.line})" if other else ""
        assert step.location is not None
        problems.append(
            Problem(
                step.location,
                f"duplicate step path {step.path!r}{line}: give the step a distinct 'name:'",
            )
        )
