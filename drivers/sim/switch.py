"""Simulated channel switch: the injection multiplexer and the output-to-scope-input routes.

Numbering (drivers/dialects/generic.yaml): injection of board channel c is ``100 + c``; board channel
c, output k (x1 = 1, x5 = 2, shaped = 3, disc = 4, coinc = 5) to scope input i is ``1000·i + 100·k + c``.  Both are
1-of-N multiplexers: closing a route to input i opens the previous route on i; closing an injection
opens the previous injection.  A number outside that scheme is -222 Data out of range.
"""

from __future__ import annotations

from collections.abc import Sequence

from drivers.sim.board import OUTPUT_INDEX
from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.scpi_parser import parse_channel_list, scpi_error

SCOPE_INPUTS = 4
OUTPUT_NAMES = {index: name for name, index in OUTPUT_INDEX.items()}


class Switch(SimInstrument):
    """The switch role."""

    role = "switch"
    model = "LTS-MX4"

    def __init__(self, *, channels: int, **kwargs: object) -> None:
        self.channels = channels
        self.injected: int | None = None
        self.routes: dict[int, tuple[str, int]] = {}  # scope input -> (output name, board channel)
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.injected = None
        self.routes = {}

    def decode(self, number: int) -> tuple[int, tuple[str, int] | int]:
        """A channel number as ``(0, c)`` (injection of c) or ``(i, (output, c))`` (route to input i).

        -222 Data out of range for a number outside the numbering scheme.
        """
        if 100 < number <= 100 + self.channels:
            return 0, number - 100
        i, k, c = number // 1000, (number // 100) % 10, number % 100
        if (
            1 <= i <= SCOPE_INPUTS
            and k in OUTPUT_NAMES
            and 1 <= c <= self.channels
            and number < 10000
        ):
            return i, (OUTPUT_NAMES[k], c)
        raise scpi_error(-222, str(number))

    def source_of(self, scope_input: int) -> tuple[str, int] | None:
        """(output name, board channel) routed to ``scope_input``, or None."""
        return self.routes.get(scope_input)

    def commands(self) -> Sequence[Command]:
        return [
            command(
                "ROUTe:CLOSe",
                write=self._close,
                query=lambda c: self._state(c, True),
                max_query_params=1,
            ),
            command(
                "ROUTe:OPEN",
                write=self._open,
                query=lambda c: self._state(c, False),
                max_query_params=1,
            ),
            command("ROUTe:OPEN:ALL", write=lambda c: self.reset(), max_params=0),
        ]

    def _is_closed(self, number: int) -> bool:
        scope_input, target = self.decode(number)
        if scope_input == 0:
            return self.injected == target
        return self.routes.get(scope_input) == target

    def _close(self, call: Call) -> None:
        decoded = [
            self.decode(n) for n in parse_channel_list(call.arg())
        ]  # all valid before a relay moves
        moved = False
        for scope_input, target in decoded:
            if scope_input == 0:
                moved |= self.injected != target
                self.injected = target  # type: ignore[assignment]
            else:
                moved |= self.routes.get(scope_input) != target
                self.routes[scope_input] = target  # type: ignore[assignment]
        if moved:  # a relay moved: busy until it settles (drivers/timing.py)
            self.take("settle", self.timing.relay_settle_s)

    def _open(self, call: Call) -> None:
        numbers = parse_channel_list(call.arg())
        closed = [self.decode(n) for n in numbers if self._is_closed(n)]
        for scope_input, _ in closed:
            if scope_input == 0:
                self.injected = None
            else:
                self.routes.pop(scope_input, None)

    def _state(self, call: Call, closed: bool) -> str:
        return ",".join(
            "1" if self._is_closed(n) == closed else "0" for n in parse_channel_list(call.arg())
        )
