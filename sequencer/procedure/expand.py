"""Expansion of a procedure into a :class:`~.plan_model.Plan` for one board.

Paths: ``setup/...`` and ``cleanup/...`` for those blocks; a group or named step adds its name; a
channel loop adds ``ch3``; an output loop ``x5``; a sweep ``amp=40mV`` per variable (``a=1,b=2`` for a
zipped sweep); a leaf adds its name or the last part of its kind (``capture``; ``capture-2`` for a
second unnamed capture in the same list).  A duplicate path is a located error.
"""

from __future__ import annotations

import contextlib
import dataclasses
import itertools
import math
from collections.abc import Iterable, Iterator, Mapping
from typing import Any

from drivers.errors import Problem
from sequencer.errors import ProcedureError
from sequencer.inputs import RunInput, procedure_digest

from .checking import suggest
from .convert import ConversionError, convert_arg
from .estimate import estimate_steps
from .kinds import KINDS
from .model import ChannelLoop, Group, Include, Leaf, OutputLoop, Parameter, Procedure, Step, Sweep
from .plan_checks import StepChecks, check_unique
from .plan_model import BoardInfo, Plan, PlannedStep, ProcedureMeta
from .textrules import step_texts_fit
from .units import Quantity, clean, label_value
from .values import ListOf, Template, TemplateError, as_param, as_text, resolve

MAX_STEPS = 100_000
#: Loop and sweep iterations a plan may visit, steps or not (a sweep whose body is all
#: ``when: false`` makes no step but still costs its iterations).  Nested loops count as the
#: product of their lengths, known before the inner one is expanded even once.
MAX_ITERATIONS = 10 * MAX_STEPS


class _TooMany(Exception):
    pass


def board_namespace(board: BoardInfo) -> dict[str, Any]:
    """What expressions see as ``board``."""
    return {
        "serial": board.serial,
        "type": board.board_type,
        "channels": board.channels,
        "outputs": list(board.outputs),
        "nominal_gain": dict(board.nominal_gain),
        "polarity": {out: board.sign(out) for out in board.outputs},
    }


def _label(value: Any) -> Any:
    if isinstance(value, Quantity):
        return label_value(value)
    if isinstance(value, float):
        return clean(value)
    return value


def _plain(value: Any) -> Any:
    """A parameter value for ``Plan.parameters`` (JSON-friendly)."""
    if isinstance(value, Quantity):
        return str(value)
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return value


class _Expander:
    def __init__(self, board: BoardInfo, ramp_rate: float | None, problems: list[Problem]) -> None:
        self.board = board
        self.ramp_rate = ramp_rate
        self.problems = problems
        self.steps: list[PlannedStep] = []
        self.checks = StepChecks(board, problems)
        self.iterations = 0
        self.nesting = 1  # product of the lengths of the loops around the current step

    @contextlib.contextmanager
    def _iterating(self, step: Step, count: int) -> Iterator[None]:
        """Account for ``count`` iterations of ``step``'s body before expanding any of them: the
        loops around it would repeat them, so the product is refused at once when too large."""
        self.iterations += count
        if self.iterations > MAX_ITERATIONS or self.nesting * count > MAX_ITERATIONS:
            self.problems.append(
                Problem(
                    step.location,
                    f"the plan's loops and sweeps would run more than {MAX_ITERATIONS:,} "
                    f"iterations ({count:,} here, inside loops of {self.nesting:,})",
                )
            )
            raise _TooMany
        outer = self.nesting
        self.nesting = outer * max(count, 1)
        try:
            yield
        finally:
            self.nesting = outer

    def run(
        self,
        steps: tuple[Step, ...],
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        for step in steps:
            if step.when is not None and not self._condition(step, env):
                continue
            inner = (*path, step.name) if step.name and not isinstance(step, Leaf) else path
            handler = _HANDLERS[type(step)]
            handler(self, step, env, labels, inner, block)

    def _condition(self, step: Step, env: Mapping[str, Any]) -> bool:
        assert step.when is not None
        value = self._resolve(step.when, env)
        if value is None:
            return False
        if not isinstance(value, bool):
            self.problems.append(
                Problem(
                    step.when.location, f"when: the condition gave {value!r}, not true or false"
                )
            )
            return False
        return value

    def _resolve(self, template: Template, env: Mapping[str, Any]) -> Any:
        try:
            return resolve(template, env)
        except TemplateError as exc:
            self.problems.append(exc.problem)
            return None

    def leaf(
        self,
        step: Leaf,
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        spec = KINDS[step.kind]
        args: dict[str, Any] = {}
        for arg in spec.args:
            template = step.args.get(arg.name)
            if template is None:
                if arg.default is not None:
                    args[arg.name] = arg.default
                continue
            value = self._resolve(template, env)
            if value is None:
                return
            try:
                args[arg.name] = convert_arg(value, arg)
            except ConversionError as exc:
                self.problems.append(Problem(template.location, f"{step.kind}: {exc}"))
                return
        if step.kind == "bias.ramp" and "rate" not in args and self.ramp_rate is not None:
            args["rate"] = self.ramp_rate
        if step.kind == "bias.ramp" and "rate" in step.args and args["rate"] <= 0:
            self.problems.append(
                Problem(step.args["rate"].location, "bias.ramp: rate must be above 0 V/s")
            )
            return
        if not step_texts_fit(step, args, "/".join((*path, step.segment)), self.problems):
            return
        self.checks.check(step, args, labels)
        hazard = spec.hazard and not (step.kind == "bias.output" and args.get("on") is False)
        if len(self.steps) >= MAX_STEPS:
            self.problems.append(
                Problem(step.location, f"the plan has more than {MAX_STEPS} steps")
            )
            raise _TooMany
        self.steps.append(
            PlannedStep(
                path="/".join((*path, step.segment)),
                kind=step.kind,
                args=args,
                labels=dict(labels),
                block=block,
                hazard=hazard,
                location=step.location,
            )
        )

    def _loop_values(
        self, template: Template | None, env: dict[str, Any], valid: list[Any], what: str, of: str
    ) -> list[Any] | None:
        """The values of a channel or output loop (all when ``template`` is None), each checked."""
        if template is None:
            return valid
        values = self._resolve(template, env)
        if values is None:
            return None
        values = values if isinstance(values, list) else [values]
        for i, value in enumerate(values):
            if isinstance(value, bool) or value not in valid:
                items = template.items if isinstance(template, ListOf) else ()
                at = items[i].location if len(items) == len(values) else template.location
                hint = suggest(value, [str(v) for v in valid])
                self.problems.append(Problem(at, f"{what}: {value!r} is not {of}{hint}"))
                return None
        return values

    def group(
        self,
        step: Group,
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        self.run(step.body, env, labels, path, block)

    def sweep(
        self,
        step: Sweep,
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        columns: list[list[Any]] = []
        for _, template in step.variables:
            values = self._resolve(template, env)
            if values is None:
                return
            columns.append(as_param(values if isinstance(values, list) else [values]))
        names = [name for name, _ in step.variables]
        if step.mode == "zip":
            if len({len(c) for c in columns}) > 1:
                lengths = ", ".join(f"{n}: {len(c)}" for n, c in zip(names, columns, strict=True))
                self.problems.append(
                    Problem(step.location, f"a zipped sweep needs lists of one length ({lengths})")
                )
                return
            count = len(columns[0]) if columns else 0
            rows: Iterable[tuple[Any, ...]] = zip(*columns, strict=True)
        else:
            count = math.prod(len(c) for c in columns)  # counted before anything is expanded
            if count > MAX_STEPS:
                shape = " x ".join(str(len(c)) for c in columns)
                self.problems.append(
                    Problem(
                        step.location,
                        f"the sweep has {shape} = {count:,} combinations, above {MAX_STEPS:,}",
                    )
                )
                raise _TooMany
            rows = itertools.product(*columns)
        with self._iterating(step, count):
            for row in rows:
                segments = [f"{n}={as_text(v)}" for n, v in zip(names, row, strict=True)]
                inner_path = (
                    (*path, ",".join(segments)) if step.mode == "zip" else (*path, *segments)
                )
                self.run(
                    step.body,
                    {**env, **dict(zip(names, row, strict=True))},
                    {**labels, **{n: _label(v) for n, v in zip(names, row, strict=True)}},
                    inner_path,
                    block,
                )

    def channels(
        self,
        step: ChannelLoop,
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        values = self._loop_values(
            step.channels,
            env,
            list(range(1, self.board.channels + 1)),
            "for_channels",
            f"a channel of {self.board.board_type} (1..{self.board.channels})",
        )
        self._loop(step.body, "channel", values, "ch{}", env, labels, path, block)

    def outputs(
        self,
        step: OutputLoop,
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        values = self._loop_values(
            step.outputs,
            env,
            list(self.board.outputs),
            "for_outputs",
            f"an output of {self.board.board_type}",
        )
        self._loop(step.body, "output", values, "{}", env, labels, path, block)

    def _loop(
        self,
        body: tuple[Step, ...],
        name: str,
        values: list[Any] | None,
        segment: str,
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        """Expand ``body`` once per value, bound to ``name`` and named by ``segment`` in the path."""
        if not values or not body:
            return
        with self._iterating(body[0], len(values)):
            for value in values:
                self.run(
                    body,
                    {**env, name: value},
                    {**labels, name: value},
                    (*path, segment.format(value)),
                    block,
                )

    def include(
        self,
        step: Include,
        env: dict[str, Any],
        labels: dict[str, Any],
        path: tuple[str, ...],
        block: str,
    ) -> None:
        given = {}
        for key, template in step.arguments.items():
            value = self._resolve(template, env)
            if value is None:
                return
            given[key] = as_param(value)
        sub_env = _parameters(
            step.procedure.parameters, {"board": env["board"]}, given, self.problems
        )
        if sub_env is not None:
            self.run(step.procedure.steps, sub_env, labels, path, block)


_HANDLERS = {
    Leaf: _Expander.leaf,
    Group: _Expander.group,
    Sweep: _Expander.sweep,
    ChannelLoop: _Expander.channels,
    OutputLoop: _Expander.outputs,
    Include: _Expander.include,
}


def _parameters(
    parameters: tuple[Parameter, ...],
    env: dict[str, Any],
    given: Mapping[str, Any],
    problems: list[Problem],
) -> dict[str, Any] | None:
    env = dict(env)
    before = len(problems)
    for parameter in parameters:
        if parameter.name in given:
            env[parameter.name] = given[parameter.name]
            continue
        try:
            env[parameter.name] = as_param(resolve(parameter.value, env))
        except TemplateError as exc:
            problems.append(exc.problem)
    return env if len(problems) == before else None


def build_plan(
    procedure: Procedure,
    board: BoardInfo,
    *,
    overrides: Mapping[str, Any] | None = None,
    board_input: RunInput | None = None,
) -> Plan:
    """The ordered, fully resolved steps of ``procedure`` for ``board``; :class:`ProcedureError` if not.

    ``board_input`` is the board-type file's text (kind ``board_type``): it joins the procedure's
    files in the plan's inputs and in ``sha256`` (``sequencer.inputs.procedure_digest``).
    """
    problems: list[Problem] = []
    given = {}
    for key, value in (overrides or {}).items():
        parameter = procedure.parameter(key)
        if parameter is None:
            known = [p.name for p in procedure.parameters]
            problems.append(
                Problem(
                    procedure.location, f"override {key!r}: no such parameter{suggest(key, known)}"
                )
            )
            continue
        given[key] = as_param(value)
    env = _parameters(procedure.parameters, {"board": board_namespace(board)}, given, problems)
    ramp_rate = _ramp_rate(procedure, env or {}, problems)
    expander = _Expander(board, ramp_rate, problems)
    if env is not None and not problems:
        try:
            for block, steps, prefix in (
                ("setup", procedure.setup, ("setup",)),
                ("main", procedure.steps, ()),
                ("cleanup", procedure.cleanup, ("cleanup",)),
            ):
                expander.run(steps, env, {}, prefix, block)
        except _TooMany:
            pass
    check_unique(expander.steps, problems)
    if problems:
        raise ProcedureError(list(dict.fromkeys(problems)))
    estimates = estimate_steps(expander.steps)
    steps = tuple(
        dataclasses.replace(s, estimate_s=e) for s, e in zip(expander.steps, estimates, strict=True)
    )
    ramps = [s.args for s in steps if s.kind == "bias.ramp"]
    meta = ProcedureMeta(
        name=procedure.name,
        version=procedure.version,
        description=procedure.description,
        board_type=procedure.board_type,
        roles=procedure.roles,
        hazards=procedure.hazards,
        max_bias_volts=max((abs(a["volts"]) for a in ramps), default=0.0),
        max_ramp_V_per_s=max((a.get("rate", 0.0) for a in ramps), default=0.0),
    )
    parameters = {p.name: _plain(env[p.name]) for p in procedure.parameters} if env else {}
    inputs = procedure.inputs() + ((board_input,) if board_input is not None else ())
    return Plan(
        meta=meta,
        board=board,
        steps=steps,
        limits=procedure.limits,
        parameters=parameters,
        source_text=procedure.source_text,
        source_path=procedure.source_path,
        sha256=procedure_digest(inputs),
        inputs=inputs,
    )


def _ramp_rate(
    procedure: Procedure, env: Mapping[str, Any], problems: list[Problem]
) -> float | None:
    if procedure.ramp_rate is None:
        return None
    try:
        rate = convert_arg(resolve(procedure.ramp_rate, env), KINDS["bias.ramp"].arg("rate"))  # type: ignore[arg-type]
    except TemplateError as exc:
        problems.append(exc.problem)
        return None
    except ConversionError as exc:
        problems.append(Problem(procedure.ramp_rate.location, f"defaults: {exc}"))
        return None
    if rate <= 0:
        problems.append(
            Problem(procedure.ramp_rate.location, "defaults: ramp_rate must be above 0 V/s")
        )
        return None
    return rate
