"""Channel switch: route a board channel and output to a scope input, select the injection channel.

Numbers in the SCPI channel list ``(@...)`` (see the dialect header): injection of channel c is
``100 + c``; board channel c, output k to scope input i is ``1000*i + 100*k + c`` (x1=1, x5=2,
shaped=3, from the dialect's ``outputs`` table).  Routes and injection are 1-of-N multiplexers.
"""

from __future__ import annotations

from collections.abc import Sequence

from drivers.errors import ProtocolError
from drivers.roles.base import RoleDriver

MAX_CHANNEL = 99
MAX_INPUT = 9


class Switch(RoleDriver):
    role = "switch"

    def output_index(self, output: str) -> int:
        outputs = self.dialect.table("switch", "outputs")
        try:
            return outputs[output]
        except KeyError:
            raise ValueError(
                f"unknown board output {output!r}; the dialect knows {', '.join(outputs)}"
            ) from None

    def route(self, channel: int, output: str, input: int) -> None:
        """Connect board ``channel``'s ``output`` (``x1``, ``x5``, ``shaped``) to scope ``input``."""
        c, i = _number("channel", channel, MAX_CHANNEL), _number("input", input, MAX_INPUT)
        k = self.output_index(output)
        self._write("route", key=f"switch:route:{i}", input=i, output_index=k, channel=c)

    def inject(self, channel: int) -> None:
        """Send the test pulse into board ``channel``."""
        c = _number("channel", channel, MAX_CHANNEL)
        self._write("inject", key="switch:inject", channel=c)

    def close_channels(self, channels: Sequence[int]) -> None:
        """Close raw channel-list entries, e.g. ``[1203, 103]``."""
        with self.session.lock:
            self._write("close", reapply=False, channels=format_channel_list(channels))
            self.session.forget("switch:")  # a raw close may undo a remembered route

    def open_channels(self, channels: Sequence[int]) -> None:
        with self.session.lock:
            self._write("open", reapply=False, channels=format_channel_list(channels))
            self.session.forget("switch:")

    def open_all(self) -> None:
        with self.session.lock:
            self._write("open_all", reapply=False)
            self.session.forget("switch:")

    def closed(self, channels: Sequence[int]) -> list[bool]:
        """Whether each raw channel-list entry (e.g. ``route_number(3, 2, 1)`` = 1203) is closed."""
        values = self._query("is_closed", channels=format_channel_list(channels))
        if len(values) != len(channels):
            raise ProtocolError(
                f"ROUTe:CLOSe? gave {len(values)} values for {len(channels)} channels",
                address=self.address,
            )
        return [bool(round(v)) for v in values]


def route_number(channel: int, output_index: int, input: int) -> int:
    """Channel-list number of a route: ``1000*input + 100*output_index + channel``."""
    return 1000 * input + 100 * output_index + channel


def injection_number(channel: int) -> int:
    return 100 + channel


def format_channel_list(channels: Sequence[int]) -> str:
    """``[1203, 103]`` -> ``"1203,103"`` (the dialect wraps it in ``(@...)``)."""
    numbers = [int(c) for c in channels]
    if not numbers or any(n != c or n < 1 for n, c in zip(numbers, channels, strict=True)):
        raise ValueError(
            f"channels={list(channels)!r} must be a non-empty list of positive whole numbers"
        )
    return ",".join(str(n) for n in numbers)


def parse_channel_list(text: str) -> list[int]:
    """``"(@1203,103)"`` or ``"(@1:3,7)"`` -> ``[1203, 103]`` / ``[1, 2, 3, 7]`` (SCPI-1999 channel list,
    ranges with ``:``, from memory)."""
    body = text.strip()
    if not (body.startswith("(@") and body.endswith(")")):
        raise ValueError(f"{text!r} is not a channel list (@...)")
    out: list[int] = []
    for part in body[2:-1].split(","):
        first, _, last = part.strip().partition(":")
        low, high = int(first), int(last or first)
        step = 1 if high >= low else -1
        out.extend(range(low, high + step, step))
    return out


def _number(name: str, value: int, high: int) -> int:
    if int(value) != value or not 1 <= value <= high:
        raise ValueError(f"{name}={value!r} must be 1..{high}")
    return int(value)
