"""Oscilloscope / digitizer: input ranges, time base, trigger, averaging, calibrated traces.

A format-2 dialect declares how a record is selected, calibrated and fetched in its ``waveform:``
section (:mod:`drivers.roles.waveform`).  The preamble is kept between captures while no write of ours may have changed it
(:mod:`drivers.roles.preamble_cache`).  Format-1 dialects: traces travel as binary blocks (``FORMat:DATA INTeger,16`` with ``FORMat:BORDer NORMal``, sent once
when the scope is opened) and are calibrated with ``TRACe:PREamble?``:
``x_increment_s, x_origin_s, y_increment_V, y_origin_V, points, averages``;
``volts = code * y_increment + y_origin``, ``t = x_origin + i * x_increment``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from drivers.dialect import Dialect
from drivers.errors import ProtocolError
from drivers.roles.base import RoleDriver, check_finite, check_range, check_word
from drivers.roles.preamble_cache import PreambleCache
from drivers.roles.waveform import fetch_waveform
from drivers.scpi.blocks import numpy_dtype
from drivers.scpi.joined import query_joined
from drivers.scpi.session import ScpiSession
from drivers.trace import Trace

if TYPE_CHECKING:
    from drivers.benchfile import InstrumentSpec

MAX_INPUT = 64
PREAMBLE_FIELDS = (
    "x_increment_s",
    "x_origin_s",
    "y_increment_V",
    "y_origin_V",
    "points",
    "averages",
)


class Scope(RoleDriver):
    """Ranges and levels in mV, times in ns, rates in Hz; traces in volts with their time base."""

    role = "scope"

    def __init__(
        self, session: ScpiSession, dialect: Dialect, spec: InstrumentSpec | None = None
    ) -> None:
        super().__init__(session, dialect, spec)
        if dialect.format < 2:  # format 1: byte order and data format were operations
            if dialect.has("common", "byte_order"):
                session.write(dialect.command("common", "byte_order"))
            self._write("set_data_format", kind=dialect.binary.data_format)
        wave = dialect.waveform
        acquire = dialect.operations.get(("scope", "acquire"))
        #: The dialect's acquisition is one plain command, checked, without a timeout of its own:
        #: it may share a message (fixed with the dialect, so looked at once, not per capture).
        self._acquire_joinable = (
            acquire is not None and not acquire.absent and acquire.single is not None
            and acquire.check_errors is not False and acquire.timeout_ms is None
        )  # fmt: skip
        #: Its command, rendered at the first joined acquisition (it takes no value: the text is
        #: fixed with the dialect, so it is not rendered again at every capture).
        self._acquire_text: str | None = None
        #: The preamble kept between captures while no write may have changed it.
        self.preambles: PreambleCache = PreambleCache(
            session,
            enabled=wave.cache if wave is not None else True,
            affected_by=wave.affected_by if wave is not None else None,
        )

    def _write(self, op: str, **kwargs: Any) -> None:  # every write of ours passes the cache
        cache = getattr(self, "preambles", None)
        if cache is None:  # writes made while opening, before there is anything to keep
            super()._write(op, **kwargs)
            return
        with cache.writing(op):
            super()._write(op, **kwargs)

    def set_input(self, input: int, *, range_mV: float, offset_mV: float = 0.0) -> None:
        """Full-scale range (±range/2) and offset of one input, in mV."""
        n = _input(input)
        span = check_range("range_mV", range_mV, 0.0, 1e6)
        if span <= 0:
            raise ValueError("range_mV must be above 0")
        offset = check_finite("offset_mV", offset_mV) * 1e-3
        with self.session.group():
            self._write("set_range", input=n, volts=span * 1e-3)
            self._write("set_offset", input=n, volts=offset)

    def set_timebase(
        self, *, sample_rate_hz: float, points: int, pretrigger_ns: float = 0.0
    ) -> None:
        """Sample rate, record length and the pre-trigger time (the first sample is at -pretrigger)."""
        rate = check_range("sample_rate_hz", sample_rate_hz, 0.0, 1e12)
        if rate <= 0:
            raise ValueError("sample_rate_hz must be above 0")
        if int(points) != points or not 1 <= points <= 1 << 28:
            raise ValueError(f"points={points!r} must be a whole number from 1")
        delay = check_range("pretrigger_ns", pretrigger_ns, 0.0, 1e12) * 1e-9
        # the record length first: a dialect may compute the time base from it
        with self.session.group():
            self._write("set_points", count=int(points))
            self._write("set_sample_rate", hertz=rate)
            self._write("set_trigger_delay", seconds=delay)

    def sample_rate_hz(self) -> float:
        return float(self._query("get_sample_rate"))

    def set_trigger(self, source: str, level_mV: float = 0.0) -> None:
        """Trigger source (``EXTernal``, ``CHANnel1``..., ``IMMediate``) and level in mV."""
        word, volts = check_word("source", source), check_finite("level_mV", level_mV) * 1e-3
        with self.session.group():
            self._write("set_trigger_source", source=word)
            self._write("set_trigger_level", volts=volts)

    def set_averages(self, count: int) -> None:
        """Acquisitions averaged per record (1 = none)."""
        if int(count) != count or not 1 <= count <= 1 << 20:
            raise ValueError(f"count={count!r} must be a whole number from 1")
        self._write("set_average_count", count=int(count))

    def acquire(self) -> None:
        """Start one acquisition (with its averages) and wait until it is complete (``*OPC?``)."""
        with self.session.lock:
            if self._joins_acquire():  # INIT, *OPC? and the error check: one message
                with self.preambles.writing("acquire"):
                    query_joined(self.session, [self._acquire_command()], self.session.opc_query,
                                 _operation_complete, timeout_ms=self.session.opc_timeout_ms)  # fmt: skip
            else:
                # the error check after INIT may wait for the acquisition: the OPC timeout, not
                # the ordinary one (a 7 s acquisition must not fail on a 5 s link timeout)
                self._write("acquire", reapply=False, timeout_ms=self.session.opc_timeout_ms)
                self.session.wait_complete()
            self.preambles.acquired()

    def _joins_acquire(self) -> bool:
        """Whether the dialect lets the acquisition's start, the operation-complete query and the
        error check share one message (joining allowed, the start one plain command, checked)."""
        return (self._acquire_joinable and self.session.policy.join
                and self.session.check_errors)  # fmt: skip

    def _acquire_command(self) -> str:
        if self._acquire_text is None:
            self._acquire_text = self._command("acquire")
        return self._acquire_text

    def fetch(self, input: int) -> Trace:
        """The last record of ``input`` as a calibrated trace in volts."""
        return self._fetch(_input(input))

    def _fetch(self, n: int) -> Trace:  # ``n`` checked by the caller (capture checks them all first)
        if self.dialect.waveform is not None:
            return fetch_waveform(self.session, self.dialect.waveform, n, self.preambles)
        binary = self.dialect.binary
        with self.session.lock:
            try:
                pre = self.preambles.get(n)
                if pre is None:
                    pre = self._query("preamble", input=n)
                    self.preambles.put(n, pre)
                dtype = numpy_dtype(binary.kind, binary.big_endian)
                payload = self.session.query_block_bytes(
                    self._command("fetch", input=n),
                    expected_bytes=expected_bytes(pre, dtype.itemsize),
                )
            except BaseException:
                self.preambles.clear()
                raise
        if len(payload) % dtype.itemsize:
            raise ProtocolError(
                f"CHAN{n}: block of {len(payload)} bytes is not a whole number of {binary.kind}",
                address=self.address,
            )
        # A view in the wire's byte order: calibration converts and swaps in one pass.
        codes = np.frombuffer(payload, dtype=dtype)
        return calibrated_trace(codes, pre, source=f"CHAN{n}")

    def capture(self, inputs: Sequence[int]) -> list[Trace]:
        """Acquire once, then fetch each of ``inputs``."""
        numbers = [_input(i) for i in inputs]
        with self.session.lock:
            self.acquire()
            return [self._fetch(n) for n in numbers]


def _operation_complete(reply: str) -> bool:
    """``*OPC?`` answers 1 when the pending operations are done (IEEE 488.2 §10.18, from memory)."""
    if reply.strip() not in ("1", "+1"):
        raise ValueError(f"*OPC? replied {reply!r}, expected 1")
    return True


def calibrated_trace(codes: np.ndarray, preamble: Sequence[float], *, source: str) -> Trace:
    """Apply the preamble (see the module docstring) to raw codes."""
    if len(preamble) < len(PREAMBLE_FIELDS):
        raise ProtocolError(
            f"TRACe:PREamble? gave {len(preamble)} fields, expected {', '.join(PREAMBLE_FIELDS)}"
        )
    dx, x0, dy, y0, points, averages = (float(v) for v in preamble[:6])
    if int(points) != len(codes):
        raise ProtocolError(
            f"{source}: preamble announces {int(points)} points, the block holds {len(codes)}"
        )
    if not dx > 0:
        raise ProtocolError(f"{source}: preamble x_increment {dx!r} is not positive")
    volts = codes.astype(np.float64)  # one new array (swapped from the wire order if need be)
    volts *= dy
    volts += y0
    return Trace(volts=volts, dt_s=dx, t0_s=x0, source=source, averages=max(1, int(averages)))


def expected_bytes(preamble: Sequence[float], itemsize: int) -> int | None:
    """The size of the record the preamble announces (points x sample width), or None when the
    preamble gives no usable point count (the block read then falls back to its hard cap)."""
    if len(preamble) < len(PREAMBLE_FIELDS):
        return None
    points = float(preamble[PREAMBLE_FIELDS.index("points")])
    if not math.isfinite(points) or points < 1 or points > 1 << 32:
        return None
    return int(points) * itemsize


def _input(input: int) -> int:
    if int(input) != input or not 1 <= input <= MAX_INPUT:
        raise ValueError(f"input={input!r} must be 1..{MAX_INPUT}")
    return int(input)
