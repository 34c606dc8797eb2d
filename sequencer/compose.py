"""Composition root, part two: how a run is put together from its parts.

``cli.py`` parses options and maps errors to exit codes; this module wires the procedure, the bench
(real or simulated), the store, the runner and its subscribers.  Together with ``cli.py`` it is the
only place that imports both the engine and the store.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

from drivers.bench import BenchSpec, bench_from_mapping, load_bench, open_bench
from sequencer.engine import (
    Caution,
    Runner,
    RunOptions,
    RunOutcome,
    bench_problems,
    describe_run,
)
from sequencer.engine.context import StopFlag
from sequencer.engine.log import RunLog
from sequencer.engine.preflight import hazard_steps
from sequencer.engine.progress import ProgressDisplay
from sequencer.errors import ConfigError, Location, OptionError, Problem, ProcedureError, StoreError
from sequencer.events import Event, RunFinished
from sequencer.heartbeat import Heartbeat
from sequencer.inputs import RunInput, is_released, text_digest
from sequencer.procedure import (
    Plan,
    Procedure,
    build_plan,
    unjudged_warnings,
)
from sequencer.procedure.board_choice import LabFiles, choose_board
from sequencer.procedure.textrules import MAX_NAME, text_problem
from sequencer.rerun_inputs import bench_inputs
from sequencer.store import Store, default_url
from sequencer.store.lease import DEFAULT_HEARTBEAT_S, new_token


@dataclass(frozen=True, kw_only=True)
class RunRequest:
    """Everything a run needs besides the plan and the bench."""

    operator: str = ""
    unattended: bool = False
    acknowledge: Callable[[Caution], bool] | None = None
    prompt: Callable[[str, bool], str] | None = None
    batch: str = ""
    repeat_of: int | None = None
    progress: bool = True
    log_path: Path | None = None
    handle_signals: bool = True
    extra_subscribers: Sequence[Callable[[Event], None]] = field(default_factory=tuple)
    previous_instruments: Sequence[Any] = ()     # of the run being repeated (--repeat)
    override_instrument_checks: bool = False     # run despite calibration past due / wrong identity
    take_over: bool = False                      # resume: take a run whose recorder looks live
    resume_caveats: Sequence[str] = ()           # resume: overrides the certificates must state
    heartbeat_s: float = DEFAULT_HEARTBEAT_S     # how often the run's lease is refreshed
    warn: Callable[[str], None] | None = None


@dataclass(frozen=True)
class RunResult:
    """A run that reached its end."""

    run_id: int
    outcome: RunOutcome


def open_store(db: str | None, env: Mapping[str, str]) -> Store:
    """The results store at ``db`` (an SQLAlchemy URL), else ``BENCHWRIGHT_DB``, else the default."""
    return Store.open(db or default_url(env))


def open_existing_store(db: str | None, env: Mapping[str, str], *, upgrade: bool = False) -> Store:
    """The results store for a command that only reads: a missing database is ``StoreError`` (exit 2,
    ``no database at URL``) and nothing is created; an older schema is refused, not upgraded.
    ``upgrade=True``: a command that goes on to write (``run --repeat``, ``resume``) carries an older
    schema forward first."""
    return Store.open(db or default_url(env), create=False, upgrade=upgrade)


def plan_for(
    procedure: Procedure,
    serial: str,
    *,
    board_type: str | None = None,
    stored: Sequence[RunInput] = (),
    lab: LabFiles | None = None,
    overrides: Mapping[str, Any] | None = None,
) -> Plan:
    """The plan of ``procedure`` for the board ``serial`` of the procedure's (or the given) type,
    judged by that type's limits (:func:`sequencer.procedure.board_choice.choose_board`).

    ``stored`` are the inputs of a recorded run (``--repeat``, ``resume``): its board-type and
    limit-set texts are used instead of today's files.
    """
    check_option_text("--board", serial)
    chosen, board, board_in = choose_board(procedure, serial, board_type, lab, stored=stored)
    return build_plan(chosen, board, overrides=overrides, board_input=board_in)


def check_sim_board(plan: Plan, sim_board: str) -> None:
    """Refuse, before any instrument is touched, a simulated board whose channel count or outputs
    differ from the run's board type (ConfigError: exit 2)."""
    from drivers.sim import load_sim_file
    from drivers.sim.board import OUTPUT_INDEX
    from drivers.sim.sensor import SensorSpec

    spec = load_sim_file(sim_board)
    problems = []
    if isinstance(spec, SensorSpec):  # a light sensor or module: one readout per sensor
        if len(spec.sensors) != plan.board.channels:
            problems.append(
                f"{len(spec.sensors)} sensors, but type {plan.board.board_type} has "
                f"{plan.board.channels} channels"
            )
    elif len(spec.channels) != plan.board.channels:
        problems.append(
            f"{len(spec.channels)} channels, but board type {plan.board.board_type} has "
            f"{plan.board.channels}"
        )
    missing = [o for o in plan.board.outputs if o not in OUTPUT_INDEX]
    if missing and not isinstance(spec, SensorSpec):
        problems.append(f"no output {', '.join(missing)} of board type {plan.board.board_type}")
    if problems:
        raise ConfigError(
            [Problem(Location(sim_board, 1, 1), f"board {spec.serial}: {p}") for p in problems]
        )


def check_text_unchanged(store: Store, plan: Plan) -> str:
    """Compare the procedure's text with the texts stored under its name and version.

    Same text, or none stored: "" (nothing to say).  Another text under a released version
    (``sequencer.inputs.is_released``): refused, bump the version.  Under a draft version: the caveat
    to record with the run.
    """
    known = store.text_digests(plan.meta.name, plan.meta.version)
    digest = text_digest(plan.inputs)
    if not known or digest in known:
        return ""
    first = min(known.values())
    name, version = plan.meta.name, plan.meta.version
    if is_released(version):
        at = Location(plan.source_path or "<procedure>", 1, 1)
        raise ProcedureError([Problem(at, (
            f"procedure {name} version {version} differs from the text stored with run {first} "
            "(the file or an included fragment changed): bump the version"
        ))])
    return (f"procedure {name} version {version} (a draft) differs from the text stored with run "
            f"{first} under the same name and version")


def check_option_text(option: str, value: str, *, max_length: int = MAX_NAME) -> None:
    """A name given on the command line that the store keeps (a serial, an operator): one line
    of printable text within its column, else bad input naming the option."""
    problem = text_problem(value, option, max_length=max_length)
    if problem is not None:
        raise OptionError(problem)


def lab_for(
    env: Mapping[str, str], bench_path: str | None, *, allowed_visa_libraries: Sequence[str] = ()
) -> LabFiles:
    """The lab's folder of board types and limit sets for a run (``board_choice`` states the
    precedence): ``BENCHWRIGHT_LAB``, else the ``lab:`` of the bench file at ``bench_path``."""
    if not bench_path:
        return LabFiles.from_env(env)
    spec = load_bench(bench_path, allowed_visa_libraries=allowed_visa_libraries)
    return LabFiles.named(env, spec.lab, spec.source)


MISSING_BENCH = "give --bench FILE (a real bench) or --sim BOARD.yaml (a simulated board)"


@contextlib.contextmanager
def bench_for(
    bench_path: str | None,
    sim_board: str | None,
    *,
    allowed_visa_libraries: Sequence[str] = (),
    realtime: bool = False,
    report: Callable[[str], None] | None = None,
    sim_bench_name: str | None = None,
) -> Iterator[BenchSpec]:
    """The bench spec from a bench file, or a simulated bench started in-process for the run.

    ``allowed_visa_libraries``: library paths allowed on the command line (see drivers.benchfile).
    ``realtime``: the simulated instruments take the time a real bench would (drivers/timing.py).
    ``report``: told, after a run on the simulator, how long a real bench would have taken.
    ``sim_bench_name``: the simulated bench's name (recorded with the run; benches sharing one
    database are told apart by it), else the simulator's default.
    """
    if bench_path and sim_board:
        raise OptionError("give --bench FILE or --sim BOARD.yaml, not both")
    if bench_path:
        yield load_bench(bench_path, allowed_visa_libraries=allowed_visa_libraries)
        return
    if not sim_board:
        raise OptionError(MISSING_BENCH)
    from drivers.sim import start_sim_bench

    named = {} if sim_bench_name is None else {"bench_name": sim_bench_name}
    with start_sim_bench(sim_board, realtime=realtime, **named) as sim:
        spec = bench_from_mapping(sim.bench_mapping(), source=f"<simulated bench for {sim_board}>")
        yield replace(spec, text=simulated_bench_text(sim_board, sim.bench_mapping()))
        if report is not None:
            report(describe_bench_time(sim.pace))


def describe_bench_time(pace: Any) -> str:
    """One line: the time the simulated bench accounted (what a real bench would take)."""
    parts = ", ".join(f"{kind} {seconds:.1f} s" for kind, seconds in pace.breakdown().items() if seconds)
    return (f"bench time (timing model, drivers/timing.py): {pace.seconds():.1f} s"
            f" = {parts or 'nothing'}")  # fmt: skip


def bench_timing(spec: BenchSpec) -> Any:
    """The bench timing model of a bench file: each instrument's ``timing:`` under its role."""
    from drivers.timing import BenchTiming

    return BenchTiming(roles={role: inst.timing for role, inst in spec.instruments.items()})


def sim_timing(sim_board: str) -> Any:
    """The ``timing:`` section of a simulated board file (the defaults for a sensor file)."""
    from drivers.sim import load_sim_file
    from drivers.sim.board import BoardSpec
    from drivers.timing import DEFAULT_TIMING

    spec = load_sim_file(sim_board)
    return spec.timing if isinstance(spec, BoardSpec) else DEFAULT_TIMING


SIM_MARK = "# benchwright simulated board: "


def simulated_bench_text(sim_board: str, mapping: Mapping[str, Any]) -> str:
    """The bench text recorded for a run on the simulator: the board file it simulated (so resume
    can start the same simulator again) and the addresses it had."""
    import yaml

    return f"{SIM_MARK}{Path(sim_board).resolve()}\n" + yaml.safe_dump(dict(mapping), sort_keys=False)


def recorded_bench(
    run_id: int,
    bench_text: str,
    *,
    allowed_visa_libraries: Sequence[str] = (),
    dialects: Mapping[str, str] | None = None,
) -> contextlib.AbstractContextManager[BenchSpec]:
    """The bench a run was recorded on: its bench file, or the simulator of the same board file.

    The recorded text is checked like a file: a VISA library path in it needs the same permission.
    ``dialects`` (role -> text, :func:`stored_dialects`) are the dialects the run used, read in place
    of the files the bench names (which may have changed or gone); see :func:`rerun_dialects`.
    """
    first = bench_text.splitlines()[0] if bench_text else ""
    if first.startswith(SIM_MARK):
        board = first.removeprefix(SIM_MARK).strip()
        if not Path(board).is_file():
            raise StoreError(f"run {run_id} ran on a simulator of {board}, which is gone; give --sim or --bench")
        return bench_for(None, board)
    if not bench_text:
        raise StoreError(f"run {run_id} kept no bench file; give --bench or --sim")
    from drivers.benchfile import parse_bench_text

    return contextlib.nullcontext(
        parse_bench_text(
            bench_text, f"<bench of run {run_id}>", allowed_visa_libraries=allowed_visa_libraries,
            dialect_texts=dialects,
        )
    )


def sim_board_serial(sim_board: str) -> tuple[str, str]:
    """(serial, board_type) written in a simulated board (or sensor) file."""
    from drivers.sim import load_sim_file

    board = load_sim_file(sim_board)
    return board.serial, getattr(board, "board_type", "")


def preflight(plan: Plan, spec: BenchSpec) -> None:
    """Refuse (bad input, exit 2) a plan that asks more of the bench than its file allows."""
    problems = bench_problems(plan, spec)
    if problems:
        raise ProcedureError(problems)


def execute(
    plan: Plan,
    spec: BenchSpec,
    store: Store,
    request: RunRequest,
    *,
    resume_run: int | None = None,
) -> RunResult:
    """Run ``plan`` on the bench ``spec``, recording into ``store``.

    A new run is created, or ``resume_run`` is reopened and its completed steps are replayed.
    Raises ``RunAborted`` (after the engine's cleanup and safe state) when the run is stopped.
    """
    preflight(plan, spec)
    check_option_text("--operator", request.operator)
    with open_bench(spec, roles=roles_needed(plan, spec)) as bench:
        completed = None
        info = None
        overridden = check_instruments(bench.check(date.today()), spec, request)
        stop = StopFlag()
        log = open_log(request.log_path, stop)
        token = new_token()
        if resume_run is None:
            info = describe_run(
                plan, bench, operator=request.operator, batch=request.batch, repeat_of=request.repeat_of
            )
            caveat = check_text_unchanged(store, plan)
            if request.warn is not None:
                for line in ([caveat] if caveat else []) + unjudged_warnings(plan):
                    request.warn(line)
            info = replace(info, bench_text=spec.text, inputs=plan.inputs + bench_inputs(spec),
                           caveats=info.caveats + ((caveat,) if caveat else ()) + overridden)
            if request.warn is not None:
                for line in identity_changes(request.previous_instruments, info.instruments):
                    request.warn(line)
            run_id = store.create_run(info, started_at=datetime.now(UTC), lease_token=token)
        else:
            run_id = resume_run
            completed = store.completed_steps(run_id)
            store.reopen_run(run_id, lease_token=token, take_over=request.take_over)
            for line in (*overridden, *request.resume_caveats):
                store.add_caveat(run_id, f"on resume: {line}")
        recorder = store.writing_behind()  # step N written while step N+1 runs (store/behind.py)
        subscribers: list[Callable[[Event], None]] = [recorder]
        closers: list[Callable[[], None]] = [lambda: recorder.close(raise_failure=False)]
        if request.progress:
            display = ProgressDisplay(plan, force_terminal=_plain_progress(plan, request))
            subscribers.append(display)
            closers.append(display.close)
        if log is not None:
            subscribers.append(log)
            closers.append(log.close)
        subscribers.extend(request.extra_subscribers)
        options = RunOptions(
            acknowledge=request.acknowledge,
            unattended=request.unattended,
            operator=request.operator,
            handle_signals=request.handle_signals,
            prompt=request.prompt,
        )
        heartbeat = Heartbeat(
            lambda: store.beat(run_id, token),
            lambda why: stop.request("lease", why),
            request.heartbeat_s,
        )
        try:
            runner = Runner(
                plan, bench, run_id=run_id, subscribers=subscribers, options=options,
                completed=completed, info=info, stop=stop,
            )
            with recorder, heartbeat:
                outcome = runner.run()
        finally:
            for close in closers:
                close()
    return RunResult(run_id=run_id, outcome=outcome)


def open_log(path: Path | None, stop: StopFlag) -> RunLog | None:
    """The ``--log`` file, opened before the run is recorded; a write that fails later (a full
    device) stops the run like a signal would: safe state, run ``aborted``, exit 3."""
    if path is None:
        return None
    try:
        return RunLog(path, on_failure=lambda why: stop.request("log", why))
    except OSError as exc:
        raise OptionError(f"--log: cannot open {path}: {exc.strerror or exc}") from None


def check_instruments(problems: Sequence[str], spec: BenchSpec, request: RunRequest) -> tuple[str, ...]:
    """Calibration past due or an identity that does not match ``expect_id`` refuses the run (bad
    input, exit 2) before any step; with the explicit override, the caveats to record with the run."""
    if not problems:
        return ()
    if not request.override_instrument_checks:
        raise ConfigError([
            Problem(spec.place_of(p), f"{p}: refused before the run (fix the bench, or run with "
                        "--override-instrument-checks, which every certificate of the run will state)")
            for p in problems
        ])
    who = request.operator or "the operator"
    lines = tuple(f"instrument check overridden by {who}: {p}" for p in problems)
    if request.warn is not None:
        for line in lines:
            request.warn(line)
    return lines


def identity_changes(before: Sequence[Any], now: Sequence[Any]) -> list[str]:
    """One line per role whose instrument identity (maker, model, serial) differs from ``before``."""
    was = {i.role: i for i in before}
    lines = []
    for inst in now:
        old = was.get(inst.role)
        if old is None:
            continue
        a = (old.maker, old.model, old.serial)
        b = (inst.maker, inst.model, inst.serial)
        if a != b:
            lines.append(
                f"{inst.role} is {' '.join(filter(None, b)) or inst.address} now, "
                f"was {' '.join(filter(None, a)) or old.address} in the repeated run"
            )
    return lines


def _plain_progress(plan: Plan, request: RunRequest) -> bool | None:
    """False (no animated bar) when the operator will be asked on the terminal during the run.

    An animated bar redirects the terminal through its renderer, which redraws over the safety
    caution and eats text in brackets (the ``[y/N]`` of the prompt); plain progress lines don't.
    """
    caution = request.acknowledge is not None and not request.unattended
    asks = (caution and bool(hazard_steps(plan))) or (
        request.prompt is not None and any(s.kind == "prompt" for s in plan.steps)
    )
    return False if asks else None


def roles_needed(plan: Plan, spec: BenchSpec) -> list[str]:
    """Roles the plan uses (declared or used by its steps) that the bench has."""
    from sequencer.procedure.kinds import KINDS

    used = set(plan.meta.roles)
    for step in plan.steps:
        role = KINDS[step.kind].role if step.kind in KINDS else None
        if role:
            used.add(role)
    missing = sorted(r for r in used if r not in spec.instruments)
    if missing:
        raise ConfigError(
            [
                Problem(
                    spec.where(),
                    f"the procedure needs role(s) {', '.join(missing)} that the bench file does not "
                    "define: add them under instruments:",
                )
            ]
        )
    return sorted(used)


def finish_if_running(store: Store, run_id: int, reason: str) -> None:
    """Mark a run aborted when the engine could not even start it (e.g. the bench did not answer)."""
    record = store.get_run(run_id)
    if record.status == "running":
        store.handle(RunFinished(run_id=run_id, status="aborted", at=datetime.now(UTC), reason=reason))


def check_store(store: Store, run_id: int) -> Any:
    """The run's record, or StoreError naming the missing run."""
    try:
        return store.get_run(run_id)
    except StoreError:
        raise
    except LookupError as exc:
        raise StoreError(f"no run {run_id} in the database") from exc
