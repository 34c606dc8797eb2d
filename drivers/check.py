"""``benchwright instruments --bench FILE --check``: every query of each dialect, asked of the live
instrument, each reply printed as parsed -- the first thing a lab runs after writing a dialect.

Nothing that matters is changed: only queries are sent (plus the dialect's ``at_open`` commands
and, on a scope, one acquisition of one record with its present settings, whose binary block is
the fetch query's reply); the bias supply is never written to, so its output stays as it is (off,
on a bench at rest).  A channel-list query asks about one relay (board channel 1's injection); a query that waits for a
measurement gate is asked after one gate with the instrument's present gate time on channel 1
(a counter's input select is the one setting written), or skipped, with why, when that gate is
longer than a check waits (:data:`MAX_CHECK_GATE_S`).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from drivers.bench import Opener, open_role, open_transport
from drivers.benchfile import BenchSpec
from drivers.capabilities import absences
from drivers.errors import BenchwrightError
from drivers.roles.perform import perform

#: Fields a query may be asked with during a check: input 1, channel 1, and as a channel list
#: the injection relay of board channel 1 (``101`` in the switch numbering of
#: ``drivers/roles/switch.py``; a switch numbered otherwise answers with an error, shown FAILED).
CHECK_FIELDS: dict[str, Any] = {"input": 1, "channel": 1, "channels": "101"}
#: Queries that wait for a measurement gate: asked through the role after one gate.
WAITS_FOR_A_GATE = {("counter", "counts"), ("coincidence", "counts")}
#: The longest gate a check waits for (seconds); a longer present gate is left to a run.
MAX_CHECK_GATE_S = 2.0


@dataclass(frozen=True, kw_only=True)
class CheckLine:
    """One exercised (or skipped) query: what was sent and what it read as."""

    role: str
    op: str
    command: str = ""
    value: str = ""
    error: str = ""
    skipped: str = ""

    def __str__(self) -> str:
        head = f"{self.role}.{self.op}"
        if self.skipped:
            return f"  {head:<34} skipped: {self.skipped}"
        if self.error:
            return f"  {head:<34} {self.command!r} FAILED: {self.error}"
        return f"  {head:<34} {self.command!r} -> {self.value}"


def check_bench(spec: BenchSpec, *, opener: Opener = open_transport) -> list[str]:
    """Lines to print: per instrument its identity, each query as parsed, declared absences."""
    lines: list[str] = []
    for role, inst in spec.instruments.items():
        try:
            driver, identity = open_role(inst, opener)
        except BenchwrightError as exc:
            lines.append(f"{role}  {inst.address}  ERROR {exc}")
            continue
        try:
            lines.append(f"{role}  {inst.address}  {identity}  (dialect {driver.dialect.name})")
            lines += [str(line) for line in check_role(driver)]
            lines += [f"  {note}" for note in absences(driver.dialect, role)]
        finally:
            driver.session.close()
    return lines


def check_role(driver: Any) -> Iterator[CheckLine]:
    """Ask every query the dialect declares for the driver's role; one line each."""
    dialect, role = driver.dialect, driver.role
    for (r, name), op in dialect.operations.items():
        if r != role or op.returns is None:
            continue
        if op.absent:
            continue
        yield _ask(driver, name, op)
    if role == "scope":
        yield _capture(driver)


def _ask(driver: Any, name: str, op: Any) -> CheckLine:
    role = driver.role
    skip = _why_skip(role, name, op)
    if skip:
        return CheckLine(role=role, op=name, skipped=skip)
    fields = {f: CHECK_FIELDS[f] for f in _fields(role, name)}
    command = _command(driver, op, fields)
    if (role, name) in WAITS_FOR_A_GATE:
        return _after_a_gate(driver, name, op, command)
    try:
        value = perform(driver.session, driver.dialect, op, fields)
    except BenchwrightError as exc:
        return CheckLine(role=role, op=name, command=command, error=str(exc).splitlines()[0])
    except ValueError as exc:
        return CheckLine(role=role, op=name, command=command, error=str(exc))
    return CheckLine(role=role, op=name, command=command, value=f"{value!r} ({op.returns})")


def _command(driver: Any, op: Any, fields: dict[str, Any]) -> str:
    step = op.single
    if step is None or step.template is None:
        return "(sequence)"
    return str(driver.dialect.render(op, step.template, fields))


def _after_a_gate(driver: Any, name: str, op: Any, command: str) -> CheckLine:
    """A gated count through the role (its present gate time, channel 1 on a counter)."""
    role = driver.role
    try:
        gate = float(driver.gate_s())
        if not 0 < gate <= MAX_CHECK_GATE_S:
            return CheckLine(role=role, op=name, skipped=(
                f"the present gate of {gate:g} s is longer than a check waits "
                f"({MAX_CHECK_GATE_S:g} s); a run exercises it"))  # fmt: skip
        if role == "counter":
            counted: Any = driver.count(1)
        else:  # the reply as parsed: coincidences, then the singles of each input
            got = driver.count()
            counted = [got.coincidences, *got.singles]
    except BenchwrightError as exc:
        return CheckLine(role=role, op=name, command=command, error=str(exc).splitlines()[0])
    except ValueError as exc:
        return CheckLine(role=role, op=name, command=command, error=str(exc))
    where = " on channel 1" if role == "counter" else ""
    return CheckLine(role=role, op=name, command=command,
                     value=f"{counted!r} ({op.returns}) over one {gate:g} s gate{where}")  # fmt: skip


def _why_skip(role: str, name: str, op: Any) -> str:
    if op.returns == "block":
        return "binary block (read by the capture below)" if role == "scope" else "binary block"
    missing = [f for f in _fields(role, name) if f not in CHECK_FIELDS]
    if missing:
        return f"needs {', '.join(missing)} (a run supplies it)"
    return ""


def _fields(role: str, name: str) -> tuple[str, ...]:
    from drivers.dialect import OPERATIONS

    return OPERATIONS[role][name].fields


def _capture(driver: Any) -> CheckLine:
    """One acquisition of input 1 with the scope's present settings, calibrated."""
    try:
        trace = driver.capture([1])[0]
    except BenchwrightError as exc:
        return CheckLine(role="scope", op="capture", command="input 1",
                         error=str(exc).splitlines()[0])  # fmt: skip
    volts = trace.volts
    value = (
        f"{len(volts)} points, {trace.dt_s:.4g} s apart from {trace.t0_s:.4g} s, "
        f"{volts.min() * 1e3:.3f}..{volts.max() * 1e3:.3f} mV"
        if len(volts)
        else "an empty record"
    )
    return CheckLine(role="scope", op="capture", command="input 1", value=value)
