"""The bias guard: acknowledgement, interlock watch, ramps with read-back, and the safe state.

Voltages are never stepped: every change is a ramp that polls the measured voltage until it is
within tolerance, checking interlock, trip and current on every poll.  On any abort the guard ramps
the bias down at the permitted rate (or switches the output off at once after a trip), verifies 0 V
and output off by reading back, and records every event as a ``SafetyEvent``.

Readings are never trusted: the role driver refuses NaN, infinity, SCPI's 9.91E+37 and values beyond
the bench limits (``ImplausibleReading``), which aborts a run like any instrument fault; during the
ramp-down such a reading switches the output off at once.  A ramp's deadline comes from the commanded
voltages and the permitted rate, never from a reading.  A stop request that arrives while the bias is
being ramped down (a second Ctrl-C) cuts the ramp short: output off at once.
"""

from __future__ import annotations

import time
from typing import Any

from drivers.errors import BenchwrightError, ImplausibleReading, ProtocolError, TransportError
from sequencer.errors import RunAborted
from sequencer.events import SafetyEvent

from .context import RunContext
from .faults import describe_fault
from .preflight import build_caution
from .safety_watch import Watcher, link_drop_reason, reconnect, reconnects

__all__ = ["KEEP_ALIVE_MIN_S", "MANUAL_OFF", "BiasGuard", "safe_command"]

MANUAL_OFF = "switch the supply's output off by hand and check that it reads 0 V"
"""What an UNSAFE line asks of the operator when the software could not confirm the safe state."""

KEEP_ALIVE_MIN_S = 5.0
"""The shortest keep-alive armed on a supply that declares one: the watcher reads the supply every
``interlock_interval_s`` while live, so a supply that hears nothing for this long has lost its run
(at least 20 intervals: a loaded machine must not switch a healthy run off)."""

RAMP_TIME_FACTOR = 1.5
"""A ramp may take this many times |commanded distance| / rate (plus the margin) before it counts as
stuck (common practice: a supply's slew is within tens of per cent of what was programmed)."""


class BiasGuard:
    """Everything the run does to the bias supply goes through here."""

    def __init__(self, ctx: RunContext) -> None:
        self.ctx = ctx
        self.bias = ctx.bench.bias
        spec = ctx.bench.spec.instruments.get("bias")
        self.address = getattr(spec, "address", "")
        self.max_rate = getattr(spec, "max_ramp_V_per_s", None)
        self.max_volts: float | None = getattr(spec, "max_volts", None)
        self.bench_source = str(getattr(ctx.bench.spec, "source", "") or "")
        self.commanded: float | None = None  # the set point last sent (None: not known)
        self.current_limit_uA: float | None = getattr(spec, "max_current_uA", None)
        self.acknowledged = False
        self.live = False  # output may be on above 0 V
        self.touched = False  # any bias step ran in this run
        self.rate: float | None = self.max_rate
        self.limit_applied = False  # a current limit (trip) was sent to the supply in this run
        self.keep_alive_armed = False  # the supply's own keep-alive was armed in this run
        self._stop_recorded = False
        self._securing = False  # inside make_safe: events are held, recorded once it is done
        self._held: list[SafetyEvent] = []
        self.unrecorded: list[str] = []  # safety events a subscriber failed to take, with why
        self._reconnects_seen = reconnects(self.bias)
        self._watcher: Watcher | None = None

    @property
    def securing(self) -> bool:
        """True while the safe state is being reached (nothing may give up on a stop request)."""
        return self._securing

    # -- events -------------------------------------------------------------------------------
    def record(self, kind: str, path: str = "", **detail: Any) -> None:
        """Emit one SafetyEvent.

        While the safe state is being reached (:meth:`make_safe`) events are held in order, with
        the time they happened, and emitted once the supply is down: a subscriber that is slow (a
        results database locked by another writer waits up to its busy timeout) or fails must not
        delay or stop the ramp-down.  A failure to record is kept in ``unrecorded``.
        """
        event = SafetyEvent(
            run_id=self.ctx.run_id,
            path=path or self.ctx.path,
            kind=kind,
            at=self.ctx.clock(),
            detail=detail,
        )
        if self._securing:
            self._held.append(event)
        else:
            self.ctx.emit(event)

    def _emit_held(self) -> None:
        held, self._held = self._held, []
        for event in held:
            try:
                self.ctx.emit(event)
            except Exception as exc:  # kept in ``unrecorded``: the bias came first
                self.unrecorded.append(f"{event.kind}: {type(exc).__name__}: {exc}")

    def _abort(self, cause: str, reason: str) -> RunAborted:
        return RunAborted(reason, cause=cause, step_path=self.ctx.path)

    # -- before the first hazard --------------------------------------------------------------
    def arm(self) -> None:
        """Interlock closed, caution acknowledged (or recorded unattended), watcher started."""
        if self.acknowledged:
            return
        if self.bias is None:
            raise self._abort(
                "precondition", "a step makes a voltage live but the bench has no bias role"
            )
        closed = self.interlock()
        hardware = {} if closed is not None else {"hardware": self.bias.hardware_interlock}
        self.record("interlock", closed=closed, **hardware)
        if closed is False:
            raise self._abort(
                "interlock", f"bias at {self.address}: interlock open, refusing to apply voltage"
            )
        if closed is None and not self.bias.hardware_interlock:
            raise self._abort(
                "precondition",
                f"bias at {self.address}: the interlock cannot be read and the bench file "
                "declares no hardware interlock (hardware_interlock:); no voltage applied",
            )
        caution = build_caution(self.ctx.plan, self.ctx.bench.spec)
        opts = self.ctx.options
        if opts.unattended:
            self.record(
                "acknowledgement",
                operator=opts.operator,
                mode="unattended",
                unattended=True,
                max_volts=caution.max_volts,
                at=self.ctx.clock().isoformat(),
                **hardware,
            )
        elif opts.acknowledge is None:
            raise self._abort(
                "operator",
                "voltage would go live but there is no terminal to "
                "acknowledge the caution and --yes was not given; no voltage applied",
            )
        elif opts.acknowledge(caution):
            self.record(
                "acknowledgement",
                operator=opts.operator,
                mode="interactive",
                unattended=False,
                max_volts=caution.max_volts,
                at=self.ctx.clock().isoformat(),
                **hardware,
            )
        else:
            self.record(
                "acknowledgement",
                operator=opts.operator,
                mode="declined",
                unattended=False,
                max_volts=caution.max_volts,
                at=self.ctx.clock().isoformat(),
                **hardware,
            )
            raise self._abort("operator", "the operator declined the caution; no voltage applied")
        self.ctx.checkpoint()  # a signal while the caution was up wins over the answer
        self.apply_bench_current_limit()
        self.arm_keep_alive()
        self.acknowledged = True
        self._reconnects_seen = reconnects(self.bias)
        self._watcher = Watcher(self, opts.interlock_interval_s)
        self._watcher.start()

    def apply_bench_current_limit(self) -> None:
        """Before anything goes live the supply trips at the bench file's ``max_current_uA``
        (unless a ``bias.limit`` step already set a limit)."""
        if self.limit_applied or self.current_limit_uA is None:
            return
        self.bias.set_current_limit(self.current_limit_uA)
        self.limit_applied = True
        self.record("current_limit", uA=self.current_limit_uA, source="bench file")

    def arm_keep_alive(self) -> None:
        """Where the supply's dialect declares a keep-alive, arm it before anything goes live: if
        this process dies (SIGKILL, a dead PC), the supply switches its output off by itself."""
        if self.keep_alive_armed or not self.bias.keep_alive_available:
            return
        seconds = max(KEEP_ALIVE_MIN_S, 20 * self.ctx.options.interlock_interval_s)
        self.bias.set_keep_alive(seconds)
        self.keep_alive_armed = True
        self.record("keep_alive", seconds=seconds)

    def _disarm_keep_alive(self, path: str) -> None:
        """Once the supply is confirmed off: disarm, so manual work on the bench is not cut off."""
        if not self.keep_alive_armed:
            return
        try:
            self.bias.set_keep_alive(0.0)
            self.keep_alive_armed = False
            self.record("keep_alive", path, seconds=0.0)
        except BenchwrightError as exc:  # the output is off already; say so, nothing more
            self.record("keep_alive", path, seconds=None, error=str(exc))

    def at_step(self) -> None:
        """Called before every step: while live, the interlock and the link are checked."""
        if self.bias is None:
            return
        if not self.live:  # a link drop while nothing is live is the drivers' business only
            self._reconnects_seen = reconnects(self.bias)
            return
        if self.interlock() is False:
            self.record("interlock", closed=False)
            raise self._abort("interlock", f"bias at {self.address}: interlock opened while live")
        self.check_link()

    def link_dropped(self) -> bool:
        """True when the link to the supply was lost (and reopened by the drivers) while live."""
        return self.live and reconnects(self.bias) != self._reconnects_seen

    def check_link(self) -> None:
        """Abort when the link dropped while live: the watch was blind for that time."""
        if self.link_dropped():
            self._reconnects_seen = reconnects(self.bias)
            self.record("link_lost", reconnected=True)
            raise self._abort("instrument", link_drop_reason(self.address))

    # -- ramps --------------------------------------------------------------------------------
    def switch_on(self) -> None:
        """Output on at 0 V (the setpoint is brought to 0 first, so nothing steps)."""
        tol = self.ctx.options.ramp_tolerance_V
        if self.bias.output_on():
            return
        if abs(self.bias.setpoint()) > tol:
            self.bias.start_ramp(0.0, self._rate(None))
            self.record("setpoint", volts=0.0, output=False)
        self._reconnects_seen = reconnects(self.bias)
        self.bias.set_output(True)
        self.commanded = 0.0  # from output off the supply starts at 0 V
        self.live = True
        self.record("output", on=True)

    def switch_off(self) -> None:
        """Ramp to 0 V, then output off; verified by read-back."""
        if abs(self.bias.voltage()) > self.ctx.options.ramp_tolerance_V:
            self.ramp(0.0, None)
        self.bias.set_output(False)
        self.record("output", on=False)
        self.live = False

    def ramp(self, volts: float, rate: float | None, *, going_down: bool = False) -> float:
        """Ramp to ``volts`` at ``rate`` (default the bench's limit) and wait; the measured V."""
        opts = self.ctx.options
        rate_v = self._rate(rate)
        start = self.bias.voltage()
        self.record("ramp_start", from_V=start, to_V=volts, rate_V_per_s=rate_v)
        allowed_s = self.ramp_time_s(volts, rate_v)
        requests = self.ctx.stop.requests
        self.bias.start_ramp(volts, rate_v)
        self.commanded = volts
        self.record("setpoint", volts=volts)
        if volts != 0.0:
            self.live = True
        deadline = time.monotonic() + allowed_s
        while True:
            measured = self.poll(going_down=going_down)
            self.bias.follow_ramp(measured)  # ahead of the commanded rate: abort; software ramp: step
            if abs(measured - volts) <= opts.ramp_tolerance_V:
                break
            if time.monotonic() > deadline:
                raise self._abort(
                    "instrument",
                    f"bias at {self.address}: measured {measured:.3f} V "
                    f"did not reach {volts:g} V within the expected ramp time ({allowed_s:.1f} s)",
                )
            self._pause(going_down=going_down, requests=requests)
        self.bias.end_ramp()
        self.record("ramp_end", volts=measured)
        return measured

    def ramp_time_s(self, volts: float, rate: float) -> float:
        """How long a ramp to ``volts`` at ``rate`` may take: the distance from the set point last
        commanded (or, when none is known, the bench's whole ``max_volts`` range) over the rate,
        times ``RAMP_TIME_FACTOR``, plus the margin.  Never from a reading."""
        if self.commanded is not None:
            distance = abs(volts - self.commanded)
        elif self.max_volts is not None:
            distance = abs(self.max_volts) + abs(volts)
        else:  # the role refuses a bench without max_volts; kept finite all the same
            distance = abs(volts)
        return distance / rate * RAMP_TIME_FACTOR + self.ctx.options.ramp_margin_s

    def _pause(self, *, going_down: bool, requests: int) -> None:
        """Wait one poll interval of a ramp.  Going up: a stop request aborts at once.  Going down
        (the safe state): the ramp goes on, unless a further stop request arrived since it began."""
        opts = self.ctx.options
        if going_down:
            if self.ctx.stop.requests > requests:
                raise self._abort(
                    "signal", f"bias at {self.address}: ramp-down cut short by a stop request"
                )
            time.sleep(opts.ramp_poll_s)
        elif self.ctx.stop.requested:  # in cleanup the ramp runs to its end (bounded above)
            self.ctx.checkpoint()
            time.sleep(opts.ramp_poll_s)
        else:
            self.ctx.stop.wait(opts.ramp_poll_s)

    def poll(self, *, going_down: bool = False) -> float:
        """Read voltage, current, interlock and trip; abort on a bad one.  Going down only the
        voltage is read (it decides when the ramp is done)."""
        v = self.bias.voltage()
        if going_down:
            self.record("reading", volts=v)
            return v
        i = self.bias.current_A()
        closed = self.interlock()
        trip = self.bias.tripped()
        self.record("reading", volts=v, current_A=i, interlock_closed=closed, tripped=trip)
        self.check_link()
        if closed is False:
            raise self._abort(
                "interlock", f"bias at {self.address}: interlock opened during a ramp"
            )
        if trip and not self.interlock_still_closed():  # opening it tripped the supply
            raise self._abort(
                "interlock", f"bias at {self.address}: interlock opened during a ramp"
            )
        if trip:
            raise self._abort(
                "trip",
                f"bias at {self.address}: the supply tripped (over-current "
                f"protection) at {v:.3f} V",
            )
        limit = self.current_limit_uA
        if limit is not None and abs(i) * 1e6 > limit:
            raise self._abort(
                "overcurrent",
                f"bias at {self.address}: over-current "
                f"{abs(i) * 1e6:.3f} uA above the limit {limit:g} uA at {v:.3f} V",
            )
        return v

    def interlock_still_closed(self) -> bool:
        """The interlock read again after a trip was seen: an interlock that opened between the
        two reads trips the supply too, and the interlock is then the cause to report."""
        return self.interlock() is not False

    def interlock(self) -> bool | None:
        """The interlock as read from the supply; ``None`` when its dialect cannot read it (then
        the bench's declared hardware interlock, acknowledged in :meth:`arm`, is what protects)."""
        if not getattr(self.bias, "interlock_readable", True):
            return None
        return bool(self.bias.interlock_closed())

    def _rate(self, rate: float | None) -> float:
        chosen = rate if rate is not None else (self.rate or self.max_rate)
        if chosen is None or chosen <= 0:
            raise self._abort(
                "precondition",
                f"bias at {self.address}: no permitted ramp rate (bench max_ramp_V_per_s)",
            )
        if self.max_rate is not None and chosen > self.max_rate:
            raise self._abort(
                "precondition",
                f"bias at {self.address}: ramp rate {chosen:g} V/s "
                f"above the bench limit {self.max_rate:g} V/s",
            )
        return chosen

    # -- the end ------------------------------------------------------------------------------
    def stop_watch(self) -> None:
        if self._watcher is not None:
            self._watcher.stop()
            self._watcher = None

    def make_safe(self, path: str) -> str:
        """Bias to 0 V and output off, verified; returns '' or an 'UNSAFE: ...' note."""
        self.stop_watch()
        if self.bias is None:
            return ""
        self._securing = True
        try:
            return self._make_safe(path)
        finally:
            self._securing = False
            self._emit_held()

    def _make_safe(self, path: str) -> str:
        self._record_stop_request(path)
        try:
            self._bring_down(path)
            return self._verify(path)
        except ImplausibleReading as exc:  # the link works but the supply's readings lie
            self.record("implausible", path, error=str(exc))
            return self._off_at_once(path, exc)
        except (TransportError, ProtocolError) as exc:
            self.record(
                "link_lost", path, error=describe_fault(exc, self.ctx.bench.spec.instruments)
            )
            return self._off_through_reconnect(path)
        except BenchwrightError as exc:
            self.record("unsafe", path, error=str(exc))
            return (
                f"UNSAFE: bias at {self.address}: output state not confirmed off ({exc}); "
                f"{self.remedy()}"
            )

    def _record_stop_request(self, path: str) -> None:
        """What the watcher or a signal saw, kept with the run (once)."""
        stop = self.ctx.stop
        if not stop.requested or self._stop_recorded:
            return
        self._stop_recorded = True
        if stop.cause == "interlock":
            self.record("interlock", path, closed=False, reason=stop.reason)
        else:
            self.record("stop", path, cause=stop.cause, reason=stop.reason)

    def _bring_down(self, path: str) -> None:
        tol = self.ctx.options.ramp_tolerance_V
        on = self.bias.output_on()
        if on and self.bias.tripped():
            self.bias.set_output(False)
            self.record("output", path, on=False, why="trip")
        elif on or abs(self.bias.voltage()) > tol:  # "off" at a voltage: the state lies, go down
            if abs(self.bias.voltage()) > tol:
                try:
                    self.ramp(0.0, None, going_down=True)
                except RunAborted as exc:  # stuck or cut short: off at once
                    kind = "ramp_cut" if exc.cause == "signal" else "ramp_stuck"
                    self.record(kind, path, error=str(exc))
            self.bias.set_output(False)
            self.record("output", path, on=False)
        if abs(self.bias.setpoint()) > self.ctx.options.ramp_tolerance_V:
            self.bias.start_ramp(0.0, self._rate(None))  # output is off: nothing moves
            self.record("setpoint", path, volts=0.0, output=False)

    def _verify(self, path: str) -> str:
        on = self.bias.output_on()
        v = self.bias.voltage()
        self.live = on
        if on or abs(v) > self.ctx.options.ramp_tolerance_V:
            self.record("unsafe", path, output=on, volts=v)
            return (
                f"UNSAFE: bias at {self.address} reads output {'on' if on else 'off'} at "
                f"{v:.3f} V after the safe-state sequence; {self.remedy()}"
            )
        self.record("safe_state", path, output=False, volts=v)
        self._disarm_keep_alive(path)
        return ""

    def _off_through_reconnect(self, path: str) -> str:
        try:
            reconnect(self.bias)
            self.bias.set_output(False)
            self.record("output", path, on=False, why="after reconnect")
            return self._verify(path)
        except BenchwrightError as exc:
            self.record("unsafe", path, error=str(exc))
            return (
                f"UNSAFE: bias at {self.address}: lost the link and could not confirm the "
                f"output off ({exc}); {self.remedy()}"
            )

    def _off_at_once(self, path: str, cause: ImplausibleReading) -> str:
        """After an implausible reading: output off without a ramp (nothing it reads can steer
        one), then read back."""
        try:
            self.bias.set_output(False)
            self.record("output", path, on=False, why="implausible reading")
            self.bias.start_ramp(0.0, self._rate(None))  # output off: nothing moves
            self.record("setpoint", path, volts=0.0, output=False)
            return self._verify(path)
        except BenchwrightError as exc:
            self.record("unsafe", path, error=str(exc))
            return (
                f"UNSAFE: bias at {self.address}: output off sent after an implausible reading "
                f"({cause}) but the safe state is not confirmed ({exc}); {self.remedy()}"
            )

    def remedy(self) -> str:
        """What the operator should do when the safe state is not confirmed."""
        return f"{MANUAL_OFF}, or run `{safe_command(self.bench_source)}`"


def safe_command(bench_source: str) -> str:
    """The command that brings the bench's supplies to 0 V and off (``benchwright safe``)."""
    bench = bench_source if bench_source and not bench_source.startswith("<") else "BENCH.yaml"
    return f"benchwright safe --bench {bench}"
