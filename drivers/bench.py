"""The bench: every role opened from a bench file, identified, and closed together.

``with open_bench(load_bench("bench.yaml")) as bench: bench.scope.capture([1, 2])``.
The bench file model and loader live in :mod:`drivers.benchfile` and are re-exported here.
"""

from __future__ import annotations

import contextlib
import datetime as dt
from collections.abc import Callable, Iterable, Mapping
from types import TracebackType
from typing import Any

from drivers.benchfile import (
    ROLES,
    BenchSpec,
    InstrumentSpec,
    bench_from_mapping,
    instrument_warnings,
    load_bench,
)
from drivers.dialect import Dialect, load_dialect, parse_dialect
from drivers.errors import BenchwrightError, ConfigError, Problem
from drivers.roles import (
    ROLE_CLASSES,
    BiasSupply,
    CoincidenceUnit,
    Counter,
    Pulser,
    Scope,
    Switch,
    ThresholdDac,
)
from drivers.scpi.session import Identity, ScpiSession, Transport
from drivers.transport import VisaTransport

__all__ = [
    "ROLES",
    "Bench",
    "BenchSpec",
    "InstrumentSpec",
    "bench_from_mapping",
    "load_bench",
    "open_bench",
    "open_session",
    "open_transport",
]

Opener = Callable[[InstrumentSpec], Transport]


def open_transport(spec: InstrumentSpec) -> Transport:
    """The VISA link of one instrument, configured from its bench entry."""
    return VisaTransport.open(
        spec.address,
        visa_library=spec.visa_library,
        timeout_ms=spec.timeout_ms,
        read_termination=spec.read_termination,
        write_termination=spec.write_termination,
        chunk_size=spec.chunk_size,
        busy_poll_us=spec.busy_poll_us,
    )


def open_session(
    spec: InstrumentSpec, dialect: Dialect, opener: Opener = open_transport
) -> ScpiSession:
    """An SCPI session over a freshly opened link, using the dialect's common commands."""
    transport = opener(spec)

    def common(op: str, default: str) -> str:
        return dialect.command("common", op) if dialect.has("common", op) else default

    return ScpiSession(
        transport,
        opc_timeout_ms=max(10_000, spec.timeout_ms),
        error_query=common("next_error", "SYSTem:ERRor:NEXT?"),
        clear_command=common("clear", "*CLS"),
        opc_query=common("operation_complete", "*OPC?"),
        policy=dialect.messages,
    )


class Bench:
    """The opened roles of one bench; absent roles are ``None``.  A context manager that closes all."""

    def __init__(
        self, spec: BenchSpec, drivers: Mapping[str, Any], identities: Mapping[str, Identity]
    ) -> None:
        self.spec = spec
        self._drivers = dict(drivers)
        self._identities = dict(identities)

    @property
    def pulser(self) -> Pulser | None:
        return self._drivers.get("pulser")

    @property
    def scope(self) -> Scope | None:
        return self._drivers.get("scope")

    @property
    def threshold(self) -> ThresholdDac | None:
        return self._drivers.get("threshold")

    @property
    def counter(self) -> Counter | None:
        return self._drivers.get("counter")

    @property
    def bias(self) -> BiasSupply | None:
        return self._drivers.get("bias")

    @property
    def switch(self) -> Switch | None:
        return self._drivers.get("switch")

    @property
    def coincidence(self) -> CoincidenceUnit | None:
        return self._drivers.get("coincidence")

    def role(self, name: str) -> Any:
        return self._drivers.get(name)

    def watch_stop(self, check: Callable[[], bool] | None) -> None:
        """Hand ``check`` (True when the run must stop) to every session: long reads (binary
        blocks) look at it between chunks.  ``None`` removes it."""
        for driver in self._drivers.values():
            driver.session.stop_check = check

    def identities(self) -> dict[str, Identity]:
        """``*IDN?`` of each opened role, read when the bench was opened."""
        return dict(self._identities)

    def check(self, today: dt.date | None = None) -> list[str]:
        """Warnings: identity not matching ``expect_id``; calibration past due."""
        day = today or dt.date.today()
        out: list[str] = []
        for role in self._drivers:
            out += instrument_warnings(self.spec.instruments[role], self._identities.get(role), day)
        return out

    def close(self) -> None:
        """Close every link (each one even if another fails)."""
        drivers, self._drivers = self._drivers, {}
        for driver in drivers.values():
            with contextlib.suppress(BenchwrightError, OSError):
                driver.session.close()

    def __enter__(self) -> Bench:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()


def open_bench(
    spec: BenchSpec, *, roles: Iterable[str] | None = None, opener: Opener = open_transport
) -> Bench:
    """Open, identify and set up each role of ``spec`` (or only ``roles``); on failure, close all."""
    wanted = list(spec.instruments) if roles is None else list(roles)
    for role in wanted:
        if role not in spec.instruments:
            have = ", ".join(spec.instruments) or "none"
            raise ConfigError(
                [
                    Problem(
                        spec.where(),
                        f"the bench file has no {role!r} instrument (it has {have}): add "
                        f"'{role}: {{address: ..., dialect: generic}}' under instruments:",
                    )
                ]
            )
    drivers: dict[str, Any] = {}
    identities: dict[str, Identity] = {}
    bench = Bench(spec, drivers, identities)
    try:
        for role in wanted:
            driver, identity = open_role(spec.instruments[role], opener)
            bench._drivers[role] = driver
            bench._identities[role] = identity
    except BaseException:
        bench.close()
        raise
    return bench


def open_role(spec: InstrumentSpec, opener: Opener = open_transport) -> tuple[Any, Identity]:
    """Open one instrument: link, ``*IDN?``, then the role driver (which sends its set-up)."""
    dialect = (
        parse_dialect(spec.dialect_text, spec.dialect) if spec.dialect_text else load_dialect(spec.dialect)
    )
    session = open_session(spec, dialect, opener)
    try:
        identity = session.identify()
        driver = ROLE_CLASSES[spec.role](session, dialect, spec)
    except BaseException:
        session.close()
        raise
    return driver, identity
