"""The runner: executes a plan through the drivers and emits the run's events.

Order: preflight (roles, bias limits, acknowledgement possible) → setup and main steps → on abort
the bias safe state first → the cleanup block (always) → the bias safe state (verified by
read-back) → ``RunFinished``.  An abort raises ``RunAborted`` after all of that, with one line that
names the instrument, the command and the step path.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from datetime import UTC, datetime
from typing import Any

from drivers.errors import BenchwrightError, InstrumentFault, ReadStopped
from sequencer.errors import RunAborted
from sequencer.events import (
    Event,
    MeasurementMade,
    RunFinished,
    RunInfo,
    RunStarted,
    StepFinished,
    StepStarted,
    StepStatus,
    TraceCaptured,
)
from sequencer.procedure.kinds import KINDS
from sequencer.procedure.plan_model import Plan, PlannedStep

from .context import Reading, RunContext, StopFlag
from .faults import FAULTS, describe_fault
from .overlap import Held, Overlap, defers, may_overlap
from .preflight import check_plan_against_bench, hazard_steps
from .provenance import describe_run
from .records import RunOptions, RunOutcome, StepResult
from .replay import reexecuted_on_resume, result_from_store, yields_data
from .safety import BiasGuard
from .signals import stop_on_signals
from .steps import handler_table
from .steps.analysis import failed_analysis


def with_qualifiers(result: StepResult) -> dict[str, Any]:
    """The step's results, with the decision rule's qualifiers of its measurements (the store keeps
    them with the step; the verdict column stays pass/fail/info)."""
    out = dict(result.results)
    if not result.measurements:
        return out
    marked = [
        {"quantity": m.quantity, "channel": m.channel, "output": m.output,
         "aggressor": m.aggressor, "qualifier": m.qualifier}
        for m in result.measurements
        if m.qualifier
    ]
    if marked:
        out["qualifiers"] = marked
    return out


def utc_now() -> datetime:
    """The default clock: aware UTC time."""
    return datetime.now(UTC)


class Runner:
    """Runs one plan on one bench (``run()`` once)."""

    def __init__(
        self,
        plan: Plan,
        bench: Any,
        *,
        run_id: int,
        subscribers: Sequence[Callable[[Event], None]],
        options: RunOptions,
        completed: Mapping[str, StepResult] | None = None,  # Store.completed_steps
        clock: Callable[[], datetime] = utc_now,
        info: RunInfo | None = None,
        stop: StopFlag | None = None,
    ) -> None:
        self.plan = plan
        self.bench = bench
        self.run_id = run_id
        self.subscribers = tuple(subscribers)
        self.options = options
        self.completed = dict(completed or {})
        self.clock = clock
        self.info = info
        self.handlers = handler_table()
        self.stop = stop if stop is not None else StopFlag()  # shared with whoever may stop it
        self._ctx: RunContext | None = None
        self._overlap = Overlap()  # an analysis computing while the next steps run (overlap.py)
        self._total = len(plan.steps)

    # -- events -------------------------------------------------------------------------------
    def emit(self, event: Event) -> None:
        for subscriber in self.subscribers:
            subscriber(event)

    # -- the run ------------------------------------------------------------------------------
    def run(self) -> RunOutcome:
        """Execute the plan; ``RunOutcome`` at the normal end, else ``RunAborted`` (after cleanup
        and the bias safe state)."""
        with stop_on_signals(self.stop, enabled=self.options.handle_signals):
            self.bench.watch_stop(self._read_should_stop)
            try:
                return self._run()
            finally:
                self._overlap.close()
                self.bench.watch_stop(None)

    def _read_should_stop(self) -> bool:
        """Long reads (binary blocks) and dialect waits give up when a stop was requested, except
        while the bias is brought to its safe state and in the cleanup block."""
        ctx = self._ctx
        if ctx is None or not self.stop.requested:
            return False
        return not ctx.in_cleanup and not (ctx.guard is not None and ctx.guard.securing)

    def _run(self) -> RunOutcome:
        ctx = RunContext(
            plan=self.plan,
            bench=self.bench,
            run_id=self.run_id,
            emit=self.emit,
            options=self.options,
            clock=self.clock,
            stop=self.stop,
        )
        ctx.guard = guard = BiasGuard(ctx)
        self._ctx = ctx
        info = self.info or describe_run(self.plan, self.bench, operator=self.options.operator)
        self.emit(RunStarted(run_id=self.run_id, info=info, at=self.clock()))
        failure: RunAborted | None = None
        try:
            self._preflight()
            body = [s for s in self.plan.steps if s.block != "cleanup"]
            for index, step in enumerate(body):
                self._step(ctx, step, index)
            self._publish(ctx)
            ctx.step = None
        except BaseException as exc:
            failure = self._as_abort(exc, ctx.path)
            if not isinstance(exc, BenchwrightError | KeyboardInterrupt):
                failure.__cause__ = exc
        unsafe = guard.make_safe(ctx.path) if failure is not None else ""
        if failure is not None:
            self._publish_after_abort(ctx)
        try:
            cleanup_error = self._cleanup(ctx, aborted=failure is not None)
        except BaseException as exc:  # a subscriber failed on a cleanup step's failure: the
            cleanup_error = self._as_abort(exc, ctx.path)  # safe state below still runs
        if failure is not None or guard.touched:
            unsafe = unsafe or guard.make_safe("")
        if failure is None and (cleanup_error or unsafe):
            failure = cleanup_error or RunAborted("bias safe state not confirmed", cause="unsafe")
        unrecorded = _unrecorded_note(guard.unrecorded)
        if failure is not None:
            reason = str(failure) + (f"; {unsafe}" if unsafe else "")
            reason += f"; {unrecorded}" if unrecorded else ""
            self.emit(
                RunFinished(run_id=self.run_id, status="aborted", at=self.clock(), reason=reason)
            )
            final = RunAborted(reason, cause=failure.cause)
            final.step_path = failure.step_path
            raise final from (failure.__cause__ or failure)
        self.emit(RunFinished(run_id=self.run_id, status="completed", at=self.clock()))
        ms = ctx.measurements
        return RunOutcome(
            status="completed",
            failed=sum(m.verdict == "fail" for m in ms),
            measurements=len(ms),
            warnings=(unrecorded,) if unrecorded else (),
        )

    def _preflight(self) -> None:
        problems = check_plan_against_bench(self.plan, self.bench.spec)
        looked: set[str] = set()  # each role once (a plan holds hundreds of steps of few roles)
        for step in self.plan.steps:
            role = KINDS[step.kind].role if step.kind in KINDS else None
            if role is None or role in looked:
                continue
            looked.add(role)
            if role in self.bench.spec.instruments and self.bench.role(role) is None:
                problems.append(f"role {role!r} is not open on the bench (step {step.path})")
                break
        for path, done in self.completed.items():
            step = next((s for s in self.plan.steps if s.path == path), None)
            if step is not None and step.kind != done.kind:
                problems.append(
                    f"resume: step {path} was {done.kind!r}, the plan has {step.kind!r}"
                )
        if problems:
            raise RunAborted("precondition failed: " + "; ".join(problems), cause="precondition")
        if (
            not self.options.unattended
            and self.options.acknowledge is None
            and hazard_steps(self.plan)
        ):
            raise RunAborted(
                "the procedure makes a voltage live but there is no terminal to "
                "acknowledge the caution and --yes was not given; no voltage applied",
                cause="operator",
            )

    def _step(self, ctx: RunContext, step: PlannedStep, index: int) -> None:
        fresh = step.path not in self.completed
        overlap = self._overlap  # (its ``held``: an analysis and the steps after it, unpublished)
        if overlap.held and (overlap.done() or not (fresh and may_overlap(step))):
            self._publish(ctx)  # (replaces overlap.held)
        ctx.step = step
        ctx.checkpoint()
        ctx.guard.at_step()
        started = self.clock()
        if fresh and (overlap.held or defers(step)):
            self._hold(ctx, Held(step=step, index=index, started=started))
            return
        self._announce(step, index, started)
        done = self.completed.get(step.path)
        if done is not None and not reexecuted_on_resume(step):
            if yields_data(step.kind):
                self._absorb(ctx, step, result_from_store(step, done), publish=False)
            status = "replayed"
            result = None
        else:
            result = self._execute(ctx, step)
            self._absorb(ctx, step, result, publish=done is None)
            status = "completed" if done is None else "replayed"
        self._finished(step, started, self.clock(), status, result)

    def _finished(
        self, step: PlannedStep, started: datetime, finished: datetime, status: StepStatus,
        result: StepResult | None,
    ) -> None:  # fmt: skip
        self.emit(
            StepFinished(
                run_id=self.run_id,
                path=step.path,
                kind=step.kind,
                status=status,
                started_at=started,
                finished_at=finished,
                settings=dict(step.args),
                labels=dict(step.labels),
                results={} if result is None else with_qualifiers(result),
                error=str(result.results.get("error", "")) if result is not None else "",
            )
        )

    # -- an analysis computing while the next steps run (overlap.py) ----------------------------
    def _hold(self, ctx: RunContext, item: Held) -> None:
        """Start an analysis on the worker, or run a step after it and keep its result."""
        if not self._overlap:
            self._overlap.start(item, lambda: (self._execute(ctx, item.step), self.clock()))
            return
        self._overlap.held.append(item)
        item.result = self._execute(ctx, item.step)  # raising: announced at publication only
        item.finished = self.clock()

    def _publish(self, ctx: RunContext) -> None:
        """Wait for the held analysis, then emit its events and the held steps', in plan order
        (an analysis that raised is raised here, at its own step)."""
        if not self._overlap:
            return
        first = self._overlap.held[0]
        ctx.step = first.step
        self._announce(first.step, first.index, first.started)  # before its failure, if any
        for item in self._overlap.take():
            ctx.step = item.step
            if item is not first:
                self._announce(item.step, item.index, item.started)
            if item.result is None or item.finished is None:
                continue  # the step that raised: started, never finished (as without overlap)
            self._absorb(ctx, item.step, item.result, publish=True)
            self._finished(item.step, item.started, item.finished, "completed", item.result)

    def _publish_after_abort(self, ctx: RunContext) -> None:
        """On an abort (after the bias safe state): what was measured is still recorded."""
        path = ctx.step
        try:
            self._publish(ctx)
        except BaseException:  # the abort is the news; an analysis failing now adds nothing
            self._overlap.held.clear()
        ctx.step = path

    def _execute(self, ctx: RunContext, step: PlannedStep) -> StepResult:
        handler = self.handlers[step.kind]
        if step.kind.startswith("analyse."):
            try:
                return handler(ctx, step)
            except ValueError as exc:
                return failed_analysis(ctx, step, exc)
        return handler(ctx, step)

    def _absorb(
        self, ctx: RunContext, step: PlannedStep, result: StepResult, *, publish: bool
    ) -> None:
        """Feed a step's output to the context (and, when ``publish``, to the subscribers)."""
        for item in result.traces:
            ctx.add_trace(item)
            if publish:
                t = item
                self.emit(  # the event carries the record's fields, plus where it was captured
                    TraceCaptured(
                        run_id=self.run_id,
                        path=step.path,
                        name=item.name,
                        samples=t.volts,
                        dt_s=t.dt_s,
                        t0_s=t.t0_s,
                        source=t.source,
                        averages=t.averages,
                        labels=dict(item.labels),
                        meta=dict(t.meta),
                    )
                )
        readings = result.results.get("readings")
        if readings:
            for name, value in dict(readings).items():
                ctx.add_reading(Reading(name=name, value=value, labels=dict(step.labels)))
        for m in result.measurements:
            ctx.add_measurement(m)
            if publish:
                self.emit(MeasurementMade(run_id=self.run_id, path=step.path, measurement=m))

    def _cleanup(self, ctx: RunContext, *, aborted: bool) -> RunAborted | None:
        """Run the cleanup block; the first error is returned, every error recorded."""
        first: RunAborted | None = None
        ctx.in_cleanup = True
        steps = [s for s in self.plan.steps if s.block == "cleanup"]
        offset = len(self.plan.steps) - len(steps)
        for index, step in enumerate(steps, start=offset):
            if aborted and _raises_voltage(step):
                self._skip(step, index, "skipped after an abort: it would raise the bias")
                continue
            try:
                self._step(ctx, step, index)
            except BaseException as exc:
                abort = self._as_abort(exc, step.path)
                first = first or abort
                now = self.clock()
                self.emit(
                    StepFinished(
                        run_id=self.run_id,
                        path=step.path,
                        kind=step.kind,
                        status="failed",
                        started_at=now,
                        finished_at=now,
                        settings=dict(step.args),
                        labels=dict(step.labels),
                        error=str(abort),
                    )
                )
        ctx.step = None
        return first

    def _announce(self, step: PlannedStep, index: int, at: datetime) -> None:
        self.emit(StepStarted(run_id=self.run_id, path=step.path, kind=step.kind, index=index,
                              total=self._total, at=at))

    def _skip(self, step: PlannedStep, index: int, why: str) -> None:
        now = self.clock()
        self._announce(step, index, now)
        self.emit(
            StepFinished(
                run_id=self.run_id,
                path=step.path,
                kind=step.kind,
                status="skipped",
                started_at=now,
                finished_at=now,
                settings=dict(step.args),
                labels=dict(step.labels),
                error=why,
            )
        )

    def _as_abort(self, exc: BaseException, path: str) -> RunAborted:
        if isinstance(exc, RunAborted):
            return (
                exc
                if exc.step_path or not path
                else RunAborted(exc.reason, cause=exc.cause, step_path=path)
            )
        if isinstance(exc, KeyboardInterrupt):
            return RunAborted("stopped by SIGINT", cause="signal", step_path=path)
        if isinstance(exc, ReadStopped) and self.stop.requested:  # the stop is the news
            return RunAborted(self.stop.reason, cause=self.stop.cause, step_path=path)
        if isinstance(exc, InstrumentFault):
            exc.at_step(path)  # attached once, where the engine meets the fault
        cause = "instrument" if isinstance(exc, FAULTS) else "error"
        return RunAborted(
            describe_fault(exc, self.bench.spec.instruments), cause=cause, step_path=path
        )


def _unrecorded_note(unrecorded: list[str]) -> str:
    """'' or one line saying which safety events the subscribers (the store) did not take."""
    if not unrecorded:
        return ""
    return f"{len(unrecorded)} safety event(s) not recorded (first: {unrecorded[0]})"


def _raises_voltage(step: PlannedStep) -> bool:
    if step.kind == "bias.ramp":
        return float(step.args["volts"]) != 0.0
    return step.kind == "bias.output" and bool(step.args["on"])
