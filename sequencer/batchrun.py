"""The batch workflow: qualify the boards of a batch file in turn, with a running yield.

For each board of the batch (``sequencer.procedure.batch``), in file order:

1. skip it when it already has a *completed* run in this batch (unless ``requalify``);
2. ask the operator to mount it (``mount`` callback; not asked when unattended);
3. plan the batch's procedure for its serial and board type and run it, on the bench file or on a
   simulated bench started for it (``sim_dir``: the entry's ``sim_board`` if given, else
   ``DIR/<serial>.yaml``), recorded with the batch name;
4. report the board's channels passed and the running yield over the batch so far.

A channel passes when its run completed and none of its values - nor the board's own values
(``channel`` empty, e.g. ``leakage_nA``) - failed: the definition of
``sequencer.reports.batch_summary``, which gives the closing summary.  A run aborted by an instrument
fault marks that board aborted and the batch goes on; an abort by the operator or a signal stops the
batch (the boards done so far stay in the store and in the summary).
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from datetime import date
from pathlib import Path
from typing import Any, Literal

from drivers.bench import BenchSpec, load_bench
from sequencer import compose
from sequencer.engine import bench_problems
from sequencer.errors import (
    ConfigError,
    Location,
    OptionError,
    Problem,
    ProcedureError,
    RunAborted,
)
from sequencer.pace import describe_left, time_left
from sequencer.procedure import (
    Batch,
    BatchBoard,
    Plan,
    Procedure,
    load_procedure,
)
from sequencer.procedure.board_choice import LabFiles
from sequencer.quantities import judged_channels

Mount = Literal["go", "skip", "stop"]
BoardStatus = Literal["passed", "failed", "aborted", "skipped", "not run"]
STOPPING_CAUSES = frozenset({"operator", "signal"})


@dataclass(frozen=True, kw_only=True)
class BatchOptions:
    """How to run a batch: on a bench file or simulated boards, attended or not."""

    bench_path: str | None = None
    allowed_visa_libraries: tuple[str, ...] = ()  # library paths allowed on the command line
    sim_dir: str | None = None
    unattended: bool = False
    requalify: bool = False
    progress: bool = False
    mount: Callable[[BatchBoard, int, int], Mount] | None = None  # (board, index from 1, count)
    acknowledge: Callable[[Any], bool] | None = None
    prompt: Callable[[str, bool], str] | None = None
    echo: Callable[[str], None] = print
    handle_signals: bool = True
    overrides: Mapping[str, Any] = field(default_factory=dict)  # procedure parameters
    lab: LabFiles = field(default_factory=LabFiles)  # a lab's own board types and limit sets
    override_instrument_checks: bool = False  # run past calibration due / wrong identity (a caveat)
    default_operator: str = ""  # for a board the batch file names no operator for (the login name)
    on_board: Callable[[BoardOutcome], None] | None = None  # after each board (the demo certifies)
    sim_bench_name: str | None = None  # the simulated bench's name (the demo runs three at once)


@dataclass(frozen=True, kw_only=True)
class BoardOutcome:
    """What became of one board of the batch."""

    serial: str
    status: BoardStatus
    run_id: int | None = None
    channels: int = 0
    passed: int = 0
    note: str = ""


@dataclass(frozen=True, kw_only=True)
class BatchOutcome:
    """Every board's outcome, in batch order, and whether the batch was stopped."""

    batch: str
    boards: tuple[BoardOutcome, ...]
    stopped: bool = False
    #: Why the batch was refused mid-way (an instrument's calibration fell due, say, when the clock
    #: passed midnight): the refusal's problems, the boards left ``not run``; exit 2.
    refused: tuple[Problem, ...] = ()

    @property
    def channels(self) -> int:
        return sum(b.channels for b in self.boards)

    @property
    def passed(self) -> int:
        return sum(b.passed for b in self.boards)

    @property
    def run_ids(self) -> list[int]:
        return [b.run_id for b in self.boards if b.run_id is not None]

    def exit_code(self) -> int:
        """DESIGN.md: 3 a run aborted, 2 the batch refused mid-way (bad input: the bench), 3 the
        batch stopped, 1 a value outside limits, else 0."""
        if any(b.status == "aborted" for b in self.boards):
            return 3
        if self.refused:
            return 2
        if self.stopped:
            return 3
        return 1 if any(b.status == "failed" for b in self.boards) else 0


def sim_board_path(board: BatchBoard, sim_dir: str | Path) -> Path:
    """The simulated board file of ``board``: its ``sim_board`` entry, else ``DIR/<serial>.yaml``."""
    path = Path(board.sim_board) if board.sim_board else Path(sim_dir) / f"{board.serial}.yaml"
    if not path.is_file():
        at = board.location or Location("<batch>", 1, 1)
        raise ConfigError([Problem(at, f"no simulated board file {path} for {board.serial}")])
    return path


def completed_run(store: Any, batch: str, serial: str) -> int | None:
    """The latest completed run of ``serial`` in ``batch``, if any."""
    done = [r for r in store.runs_of_batch(batch) if r.board == serial and r.status == "completed"]
    return done[-1].id if done else None


def channel_tally(store: Any, run_id: int) -> tuple[int, int]:
    """(channels measured, channels passed) of one run (see the module docstring); a module whose
    values all belong to it as a whole (a coincidence unit) is one channel, as in the summary."""
    record = store.get_run(run_id)
    ms = store.measurements(run_id=run_id)
    board_failed = any(m.channel is None and m.verdict == "fail" for m in ms)
    channels = set(judged_channels(m.channel for m in ms))
    failed = {m.channel for m in ms if m.channel is not None and m.verdict == "fail"}
    if board_failed or record.status != "completed":
        return len(channels), 0
    return len(channels), len(channels - failed)


def _outcome(
    store: Any, serial: str, run_id: int, status: BoardStatus, note: str = ""
) -> BoardOutcome:
    channels, passed = channel_tally(store, run_id)
    if status == "passed" and (passed < channels or _board_failed(store, run_id)):
        status = "failed"
    return BoardOutcome(
        serial=serial, status=status, run_id=run_id, channels=channels, passed=passed, note=note
    )


def _board_failed(store: Any, run_id: int) -> bool:
    """A value of the board as a whole failed (it fails the board even with no channel measured)."""
    return any(m.channel is None and m.verdict == "fail" for m in store.measurements(run_id=run_id))


class _BatchRun:
    def __init__(self, batch: Batch, store: Any, options: BatchOptions) -> None:
        if bool(options.bench_path) == bool(options.sim_dir):
            raise OptionError("give --bench FILE (a real bench) or --sim-dir DIR (simulated boards), one of them")
        if options.sim_dir:  # every board's file before the first board is mounted
            problems = []
            for board in batch.boards:
                try:
                    sim_board_path(board, options.sim_dir)
                except ConfigError as exc:
                    problems += exc.problems
            if problems:
                raise ConfigError(problems)
        self.batch = batch
        self.store = store
        self.options = options
        # every procedure of the batch (a board may name its own) read before the first board
        self.procedures: dict[str, Procedure] = {}
        for path in dict.fromkeys(batch.procedure_of(b) for b in batch.boards):
            self.procedures[path] = load_procedure(path, lab_dir=options.lab.folder)
        self.bench: BenchSpec | None = (
            load_bench(options.bench_path, allowed_visa_libraries=options.allowed_visa_libraries)
            if options.bench_path
            else None
        )
        self.outcomes: list[BoardOutcome] = []
        self.refused: tuple[Problem, ...] = ()

    def run(self) -> BatchOutcome:
        self._t0 = time.monotonic()
        self._check_boards_first()
        self._check_instruments_first()
        self.store.mark_stale_runs_interrupted()
        count = len(self.batch.boards)
        stopped = False
        for index, board in enumerate(self.batch.boards, start=1):
            if stopped:
                self.outcomes.append(BoardOutcome(serial=board.serial, status="not run"))
                continue
            outcome, stopped = self._board(board, index, count)
            self.outcomes.append(outcome)
            self._report(index, count, outcome)
            if self.options.on_board is not None:
                self.options.on_board(outcome)
        return BatchOutcome(batch=self.batch.name, boards=tuple(self.outcomes), stopped=stopped,
                            refused=self.refused)

    def _check_boards_first(self) -> None:
        """Every board of the batch planned for its board type, and on a bench file checked against
        the bench's limits and roles, before the first board is mounted: a typo in board 9's type
        or a bench that cannot do the procedure is found while nobody has mounted anything.  Each
        problem is located at the board's entry in the batch file (or the bench file's key); the
        boards left untested are named; then ``ProcedureError`` (exit 2)."""
        problems: list[Problem] = []
        for board in self.batch.boards:
            try:
                plan = self._plan(board)
            except (ProcedureError, ConfigError) as exc:
                problems += [_at_board(board, p) for p in exc.problems]
                continue
            if self.bench is not None:
                problems += bench_problems(plan, self.bench)
        if not problems:
            return
        self.options.echo(
            f"batch {self.batch.name}: refused before the first board, no board was tested "
            f"({len(self.batch.boards)} waiting: {', '.join(b.serial for b in self.batch.boards)})"
        )
        raise ProcedureError(list(dict.fromkeys(problems)))

    def _check_instruments_first(self) -> None:
        """A bench instrument past its calibration date or with another identity refuses the whole
        batch before the first board is mounted (a lab engineer fixes the bench once, rather than
        finding out board by board): the problems, the boards left untested, then ``ConfigError``
        (exit 2).  With the override each run records its caveat as a single run does."""
        if self.bench is None or self.options.override_instrument_checks:
            return
        todo = [b for b in self.batch.boards
                if self.options.requalify or completed_run(self.store, self.batch.name, b.serial) is None]
        if not todo:
            return
        from drivers.bench import open_bench

        plan = self._plan(todo[0])
        compose.preflight(plan, self.bench)
        with open_bench(self.bench, roles=compose.roles_needed(plan, self.bench)) as bench:
            problems = bench.check(date.today())
        if not problems:
            return
        echo = self.options.echo
        echo(f"batch {self.batch.name}: refused before the first board, the bench is not fit to qualify with:")
        for p in problems:
            echo(f"  {p}")
        echo(f"no board was tested ({len(todo)} of {len(self.batch.boards)} waiting: "
             f"{', '.join(b.serial for b in todo)}); fix the bench file, or run again with "
             "--override-instrument-checks, which every certificate of the batch will state")
        raise ConfigError([Problem(self.bench.place_of(p), f"{p}: batch refused before the first board")
                           for p in problems])

    def _board(self, board: BatchBoard, index: int, count: int) -> tuple[BoardOutcome, bool]:
        opts = self.options
        done = completed_run(self.store, self.batch.name, board.serial)
        if done is not None and not opts.requalify:
            outcome = _outcome(self.store, board.serial, done, "passed")
            if outcome.status == "failed":  # tested, not qualified: say so, and how to test again
                return replace(
                    outcome, note=f"failed in run {done} (--requalify tests it again)"
                ), False
            return replace(
                outcome, status="skipped", note=f"already qualified in run {done}"
            ), False
        if not opts.unattended and opts.mount is not None:
            answer = opts.mount(board, index, count)
            if answer == "stop":
                return BoardOutcome(
                    serial=board.serial, status="not run", note="batch stopped"
                ), True
            if answer == "skip":
                return BoardOutcome(
                    serial=board.serial, status="not run", note="skipped by the operator"
                ), False
        plan = self._plan(board)
        request = compose.RunRequest(
            operator=board.operator or opts.default_operator,
            unattended=opts.unattended,
            acknowledge=opts.acknowledge,
            prompt=opts.prompt,
            batch=self.batch.name,
            progress=opts.progress,
            handle_signals=opts.handle_signals,
            override_instrument_checks=opts.override_instrument_checks,
            warn=lambda line: opts.echo(f"warning: {board.serial}: {line}"),
        )
        sim = str(sim_board_path(board, opts.sim_dir)) if opts.sim_dir else None
        if sim:
            try:
                compose.check_sim_board(plan, sim)
            except ConfigError as exc:
                note = f"refused before any instrument was touched: {exc.problems[0].message}"
                return BoardOutcome(serial=board.serial, status="aborted", note=note), False
        try:
            bench = (
                compose.bench_for(None, sim, sim_bench_name=opts.sim_bench_name)
                if sim
                else contextlib.nullcontext(self.bench)
            )
            with bench as spec:
                result = compose.execute(plan, spec, self.store, request)
        except ConfigError as exc:
            # refused before the run was recorded (an instrument's calibration fell due after the
            # check before the first board): the bench refuses every board left, so the batch ends
            # here with what was done summarised, not with the error alone
            self.refused = tuple(exc.problems)
            note = f"refused before the run: {exc.problems[0].message}" if exc.problems else "refused"
            return BoardOutcome(serial=board.serial, status="not run", note=note), True
        except RunAborted as exc:
            run_id = self._aborted_run(board.serial)
            note = f"aborted: {exc}"
            if run_id is None:
                return BoardOutcome(serial=board.serial, status="aborted", note=note), True
            return _outcome(self.store, board.serial, run_id, "aborted", note), (
                exc.cause in STOPPING_CAUSES
            )
        return _outcome(self.store, board.serial, result.run_id, "passed"), False

    def _plan(self, board: BatchBoard) -> Plan:
        return compose.plan_for(
            self.procedures[self.batch.procedure_of(board)],
            board.serial,
            board_type=board.board_type,
            lab=self.options.lab,
            overrides={**self.batch.parameters_of(board), **self.options.overrides},
        )

    def _aborted_run(self, serial: str) -> int | None:
        runs = [r for r in self.store.runs_of_batch(self.batch.name) if r.board == serial]
        return runs[-1].id if runs else None

    def _report(self, index: int, count: int, outcome: BoardOutcome) -> None:
        channels, passed = self._yield_so_far()
        share = f"{100.0 * passed / channels:.1f} %" if channels else "-"
        run = f"run {outcome.run_id}" if outcome.run_id is not None else ""
        detail = f"{outcome.passed}/{outcome.channels} channels passed" if outcome.channels else ""
        said = ", ".join(x for x in (run, "; ".join(x for x in (detail, outcome.note) if x)) if x)
        said = f" ({said})" if said else ""
        left = describe_left(time_left(index, count, time.monotonic() - self._t0)) if index < count else ""
        pace = f" - {left} for the batch at the pace so far" if left else ""
        self.options.echo(
            f"[{index}/{count}] {outcome.serial}: {outcome.status.upper()}{said} "
            f"- running yield {passed}/{channels} channels ({share}){pace}"
        )

    def _yield_so_far(self) -> tuple[int, int]:
        return (sum(o.channels for o in self.outcomes), sum(o.passed for o in self.outcomes))


def _at_board(board: BatchBoard, problem: Problem) -> Problem:
    """``problem`` of planning ``board``, located at its entry in the batch file (where its serial
    and board type are written), the original place kept in the message when it is elsewhere."""
    if board.location is None or problem.location.file == board.location.file:
        return problem
    return Problem(
        board.location,
        f"board {board.serial} (board type {board.board_type}): {problem.message} "
        f"(at {problem.location})",
    )


def qualify_batch(batch: Batch, store: Any, options: BatchOptions) -> BatchOutcome:
    """Qualify every board of ``batch`` in turn (module docstring); the outcome of each board."""
    return _BatchRun(batch, store, options).run()


def summary_text(store: Any, batch: str, *, outlier_sigma: float | None = None) -> str:
    """The batch summary of ``sequencer.reports`` as text."""
    from sequencer.reports import batch_summary

    kwargs = {} if outlier_sigma is None else {"outlier_sigma": outlier_sigma}
    return batch_summary(store, batch, **kwargs).to_text()
