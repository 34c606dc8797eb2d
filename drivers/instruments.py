"""``benchwright instruments --bench FILE``: open each role, show its identity (and a bias supply's
output state and voltage), warn.

Each instrument is opened on its own, so one that does not answer does not hide the others.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from drivers.bench import Opener, open_role, open_transport
from drivers.benchfile import BenchSpec, instrument_warnings
from drivers.errors import BenchwrightError
from drivers.roles.bias import BiasSupply
from drivers.safestate import read_supply_state
from drivers.scpi.session import Identity


@dataclass(frozen=True, kw_only=True)
class InstrumentReport:
    role: str
    address: str
    dialect: str
    identity: Identity | None = None
    error: str = ""  # why it could not be opened or identified
    warnings: tuple[str, ...] = ()
    state: str = ""  # a bias supply's output state and voltage (drivers.safestate)

    @property
    def ok(self) -> bool:
        return not self.error


def describe_bench(
    spec: BenchSpec, today: dt.date, *, opener: Opener = open_transport
) -> list[InstrumentReport]:
    """One report per instrument of the bench file, in role order; a bias supply's report shows
    its output state and voltage, and a warning when it is live."""
    reports = []
    for role, inst in spec.instruments.items():
        identity: Identity | None = None
        error = state = ""
        live: list[str] = []
        try:
            driver, identity = open_role(inst, opener)
            try:
                if inst.role == "bias":
                    state, live = supply_state_line(role, driver, spec.source)
            finally:
                driver.session.close()
        except BenchwrightError as exc:
            error = str(exc)
        reports.append(
            InstrumentReport(
                role=role,
                address=inst.address,
                dialect=inst.dialect,
                identity=identity,
                error=error,
                warnings=(*instrument_warnings(inst, identity, today), *live),
                state=state,
            )
        )
    return reports


def supply_state_line(role: str, bias: BiasSupply, bench_source: str) -> tuple[str, list[str]]:
    """``(state, warnings)`` of a bias supply: its output state and voltage, and a warning naming
    ``benchwright safe`` when it is not off at 0 V (or its state cannot be read)."""
    remedy = f"`benchwright safe --bench {bench_source}` ramps it down and switches it off"
    try:
        state = read_supply_state(bias)
    except BenchwrightError as exc:
        return f"state unknown ({exc})", [f"{role}: output state unknown; {remedy}"]
    if state.is_safe():
        return str(state), []
    return str(state), [f"{role}: {state}: the supply may be live; {remedy}"]


def bench_warnings(reports: list[InstrumentReport]) -> list[str]:
    """Every warning and every failure, one line each."""
    out: list[str] = []
    for r in reports:
        if r.error:
            out.append(f"{r.role}: not reachable: {r.error}")
        out.extend(r.warnings)
    return out


def format_reports(reports: list[InstrumentReport]) -> list[str]:
    """Lines for the terminal: ``role  address  maker model serial firmware``, then warnings."""
    width = max((len(r.role) for r in reports), default=0)
    lines = []
    for r in reports:
        what = str(r.identity) if r.identity else f"ERROR {r.error}"
        lines.append(f"{r.role.ljust(width)}  {r.address}  {what}")
        if r.state:
            lines.append(f"{''.ljust(width)}  {r.state}")
    lines += [f"warning: {w}" for w in bench_warnings(reports)]
    return lines
