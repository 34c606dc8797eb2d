"""The base of every simulated instrument: command table dispatch, error queue, common commands.

Each instrument role subclasses :class:`SimInstrument` and lists its commands as a table of
:class:`Command` (header pattern -> set handler and/or query handler); no ``elif`` chains.

Every instrument answers the IEEE 488.2 common commands ``*IDN?``, ``*RST``, ``*CLS``, ``*OPC``,
``*OPC?``, ``*WAI``, ``*ESR?``, ``*STB?`` and the SCPI ``SYSTem:ERRor[:NEXT]?``,
``SYSTem:ERRor:COUNt?``, ``SYSTem:VERSion?`` and ``FORMat:BORDer NORMal|SWAPped``.

Message handling (SCPI-1999 vol. 1 §6.2, from memory): units after a ``;`` are first tried relative to
the previous unit's header path, then from the root; a unit that fails pushes its error and the rest
of the message still runs; the replies of the queries of one message are joined with ``;`` into one
response message.  The error queue holds :data:`ERROR_QUEUE_SIZE` entries; on overflow the newest entry
is replaced by ``-350,"Queue overflow"``.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from drivers.errors import InstrumentError
from drivers.sim.clock import SimClock
from drivers.sim.scpi_parser import (
    Pattern,
    Unit,
    compile_pattern,
    parse_choice,
    parse_unit,
    scpi_error,
    split_units,
)
from drivers.timing import InstrumentTiming

#: The invented maker name every simulated instrument reports in ``*IDN?``.
MAKER = "Larchmoor Test Systems (sim)"
ERROR_QUEUE_SIZE = 20
#: How many of the latest program messages an instrument keeps in :attr:`SimInstrument.received`.
RECEIVED_LOG_SIZE = 10_000
FIRMWARE = "0.1.0"

Reply = str | bytes | None


@dataclass(frozen=True)
class Call:
    """The parameters and header suffixes one handler receives."""

    params: tuple[str, ...]
    suffixes: tuple[int, ...]

    def arg(self, index: int = 0) -> str:
        """Parameter ``index`` (-109 Missing parameter if absent)."""
        if index >= len(self.params):
            raise scpi_error(-109)
        return self.params[index]

    def suffix(self, index: int = 0, *, lo: int = 1, hi: int = 1) -> int:
        """Header suffix ``index`` checked against [lo, hi] (-114 otherwise)."""
        value = self.suffixes[index]
        if not lo <= value <= hi:
            raise scpi_error(-114)
        return value


Handler = Callable[[Call], Reply]


@dataclass(frozen=True)
class Command:
    """One row of an instrument's command table."""

    pattern: Pattern
    write: Handler | None = None
    query: Handler | None = None
    max_params: int = 1
    max_query_params: int = 0


def command(
    text: str,
    *,
    write: Handler | None = None,
    query: Handler | None = None,
    max_params: int = 1,
    max_query_params: int = 0,
) -> Command:
    """Build a table row from a pattern in SCPI notation."""
    return Command(compile_pattern(text), write, query, max_params, max_query_params)


class SimInstrument:
    """One simulated instrument: a state, a command table and an error queue.

    Not thread-safe by itself: the server calls :meth:`process` with the bench lock held.
    ``sleep`` is how a handler waits (the server replaces it with one that releases the lock).
    """

    role = "instrument"
    model = "SIM"

    def __init__(
        self, *, instrument_id: int, serial: str, clock: Callable[[], float] = time.monotonic
    ) -> None:
        self.instrument_id = instrument_id
        self.serial = serial
        self.clock = clock
        self.sleep: Callable[[float], None] = time.sleep
        #: The bench's clock (shared by the instruments of one bench; :mod:`drivers.sim.clock`).
        self.pace = SimClock()
        self.errors: deque[tuple[int, str]] = deque()
        #: The program messages this instrument ran, oldest first (bounded; a read-only record for
        #: tests and logs, e.g. to prove that a refused run sent nothing).
        self.received: deque[str] = deque(maxlen=RECEIVED_LOG_SIZE)
        self.big_endian = True
        self._table: tuple[Command, ...] = tuple(self.commands()) + tuple(self._system_commands())
        self._common: dict[str, tuple[Handler | None, Handler | None]] = {
            "*IDN": (None, lambda c: self.identity()),
            "*RST": (self._reset_all, None),
            "*CLS": (lambda c: self.errors.clear(), None),
            "*OPC": (lambda c: None, lambda c: "1"),
            "*WAI": (lambda c: None, None),
            "*ESR": (None, lambda c: "0"),
            "*STB": (None, lambda c: "4" if self.errors else "0"),
            **self.common_commands(),
        }

    # --- what subclasses provide ---------------------------------------------------------------
    def commands(self) -> Sequence[Command]:
        """The instrument's own command table."""
        return ()

    def common_commands(self) -> dict[str, tuple[Handler | None, Handler | None]]:
        """Extra common commands (e.g. ``*TRG``): name -> (write handler, query handler)."""
        return {}

    def reset(self) -> None:
        """``*RST``: settings back to their defaults (the error queue is kept, IEEE 488.2 §10.32)."""

    @property
    def timing(self) -> InstrumentTiming:
        """This instrument's pace in the timing model."""
        return self.pace.timing.of(self.role)

    def take(self, kind: str, seconds: float, since: float | None = None) -> None:
        """Spend ``seconds`` of ``kind`` on the bench's clock, waiting for real (without the bench
        lock) only when the clock runs in real time."""
        wait = self.pace.spend(kind, seconds, since=since)
        if wait > 0:
            self.sleep(wait)

    # --- identity and errors -------------------------------------------------------------------
    def identity(self) -> str:
        """The four ``*IDN?`` fields: maker, model, serial, firmware."""
        return f"{MAKER},{self.model},{self.serial},{FIRMWARE}"

    def push_error(self, code: int, message: str) -> None:
        """Queue an error; a full queue keeps its oldest entries and ends with -350."""
        if len(self.errors) >= ERROR_QUEUE_SIZE:
            self.errors.pop()
            self.errors.append((-350, "Queue overflow"))
            return
        self.errors.append((code, message))

    def next_error(self) -> str:
        """``SYSTem:ERRor:NEXT?``: the oldest entry, or ``0,"No error"``."""
        code, message = self.errors.popleft() if self.errors else (0, "No error")
        return f'{code},"{message}"'

    # --- message processing --------------------------------------------------------------------
    def process(self, message: str) -> bytes | None:
        """Run one program message; the response message (with ``\\n``) or ``None`` if no query."""
        self.received.append(message)
        try:
            units = split_units(message)
        except InstrumentError as exc:
            self.push_error(exc.code, exc.instrument_message)
            return None
        replies: list[bytes] = []
        path: tuple[str, ...] = ()
        for text in units:
            try:
                unit = parse_unit(text)
                reply, path = self._execute(unit, path)
            except InstrumentError as exc:
                self.push_error(exc.code, exc.instrument_message)
                continue
            if reply is not None:
                replies.append(reply.encode("ascii") if isinstance(reply, str) else reply)
        if not replies:
            return None
        return b";".join(replies) + b"\n"

    def _execute(self, unit: Unit, path: tuple[str, ...]) -> tuple[Reply, tuple[str, ...]]:
        if unit.common:
            return self._execute_common(unit), path
        tries = [unit.words] if unit.absolute or not path else [path + unit.words, unit.words]
        for words in tries:
            for row in self._table:
                handler = row.query if unit.query else row.write
                if handler is None:
                    continue
                suffixes = row.pattern.match(words)
                if suffixes is None:
                    continue
                limit = row.max_query_params if unit.query else row.max_params
                if len(unit.params) > limit:
                    raise scpi_error(-108)
                return handler(Call(unit.params, suffixes)), words[:-1]
        raise scpi_error(-113)

    def _execute_common(self, unit: Unit) -> Reply:
        write, query = self._common.get(unit.words[0].upper(), (None, None))
        handler = query if unit.query else write
        if handler is None:
            raise scpi_error(-113)
        if unit.params:
            raise scpi_error(-108)
        return handler(Call(unit.params, ()))

    def _reset_all(self, call: Call) -> None:
        self.big_endian = True
        self.reset()

    def _system_commands(self) -> list[Command]:
        return [
            command("SYSTem:ERRor[:NEXT]", query=lambda c: self.next_error()),
            command("SYSTem:ERRor:COUNt", query=lambda c: str(len(self.errors))),
            command("SYSTem:VERSion", query=lambda c: "1999.0"),
            command(
                "FORMat:BORDer",
                write=self._set_border,
                query=lambda c: "NORM" if self.big_endian else "SWAP",
            ),
        ]

    def _set_border(self, call: Call) -> None:
        self.big_endian = parse_choice(call.arg(), ("NORMal", "SWAPped")) == "NORMal"
