"""The one exception hierarchy of benchwright.

This module is a leaf: it imports nothing of the project, so both ``drivers`` and every layer of
``sequencer`` may raise and catch these classes.  ``sequencer.errors`` re-exports all of them and adds
the errors that belong above the instrument layer.

::

    BenchwrightError                      root: the CLI prints any of these as one line
    ├── InstrumentFault                   base of the instrument layer's faults: carries address,
    │   │                                 command and step path (set once, at the boundary)
    │   ├── TransportError                the link failed (address attached)
    │   │   ├── InstrumentTimeout         no reply within the timeout
    │   │   ├── ConnectionRefused         nothing listens at the address / host unreachable
    │   │   ├── ConnectionClosed          the peer closed the link
    │   │   └── ReadStopped               a long read given up because the run was asked to stop
    │   ├── ProtocolError                 a reply that cannot be parsed (malformed block, garbled number)
    │   │   └── ImplausibleReading        a parsed reading no instrument could mean (NaN, 9.91E+37, overrange)
    │   ├── InstrumentError               the instrument reported an error (SYSTem:ERRor? gave a code)
    │   └── SafetyLimitError              a bias request above the bench limits (refused before sending)
    │       └── RampRunaway               a read-back ran ahead of the commanded ramp rate
    ├── ConfigError                       a bench, dialect or board file is wrong (file:line:column)
    ├── ProcedureError                    (sequencer.errors) a procedure is wrong (file:line:column)
    ├── StoreError                        (sequencer.errors) the results database refused or is too new
    └── RunAborted                        (sequencer.errors) the run was stopped (interlock, operator,
                                          signal, instrument fault); carries the reason

A value outside its limits is a verdict, never an exception.
"""

from __future__ import annotations

from dataclasses import dataclass


class BenchwrightError(Exception):
    """Root of every error benchwright raises on purpose."""


class InstrumentFault(BenchwrightError):
    """What every instrument-layer fault carries: the resource address, the command sent and the
    step path of the run (``at_step`` sets it once, where the engine catches it), so the one place
    that prints a fault formats it once (``sequencer.engine.faults``)."""

    address: str = ""
    command: str = ""
    step_path: str = ""
    #: What happened, without the address and command (the one place that prints a fault adds
    #: them once: ``sequencer.engine.faults.describe_fault``).
    detail: str = ""

    def at_step(self, path: str) -> InstrumentFault:
        """The same error, told which step it happened in (kept if one is known already)."""
        if not self.step_path:
            self.step_path = path
        return self


class TransportError(InstrumentFault):
    """The link to an instrument failed."""

    def __init__(
        self, message: str, *, address: str = "", command: str = "", after: str = ""
    ) -> None:
        self.message = message
        self.detail = message
        self.address = address
        self.command = command
        self.after = after  # the configuring command whose error-queue check this was
        parts = [message]
        if address:
            parts.append(f"at {address}")
        if after:
            parts.append(f"(checking the error queue after {after!r})")
        elif command:
            parts.append(f"(sending {command!r})")
        super().__init__(" ".join(parts))

    def with_command(self, command: str) -> TransportError:
        """The same error naming the command it happened on (kept if one is named already)."""
        if self.command:
            return self
        return type(self)(self.message, address=self.address, command=command, after=self.after)

    def checking_after(self, command: str) -> TransportError:
        """The same error, named as the error-queue check that followed ``command``."""
        return type(self)(self.message, address=self.address, command=self.command, after=command)


class InstrumentTimeout(TransportError):
    """No reply arrived within the instrument's timeout."""


class ConnectionRefused(TransportError):
    """Nothing accepts connections at the address."""


class ConnectionClosed(TransportError):
    """The instrument closed the link."""


class ReadStopped(TransportError):
    """A read (a binary block, chunk by chunk) was given up because a stop was requested; the
    link is out of step and is resynchronised before its next use.  Never retried."""


class ProtocolError(InstrumentFault):
    """A reply could not be understood (malformed block header, garbled number)."""

    def __init__(self, message: str, *, address: str = "", command: str = "") -> None:
        self.detail = message
        self.address = address
        self.command = command
        suffix = ""
        if address:
            suffix += f" at {address}"
        if command:
            suffix += f" (after {command!r})"
        super().__init__(message + suffix)


class ImplausibleReading(ProtocolError):
    """A reading parsed as a number but cannot be true: NaN, infinite, SCPI's not-a-number
    ``9.91E+37`` (or overrange ``9.9E+37``), or beyond what the bench file allows by a margin.
    A safety decision never rests on such a value."""

    def __init__(self, message: str, *, address: str = "", command: str = "") -> None:
        self.detail = message  # without the address and command (printed once by the caller)
        super().__init__(message, address=address, command=command)


class InstrumentError(InstrumentFault):
    """The instrument reported an entry in its error queue."""

    def __init__(self, code: int, message: str, *, address: str = "", command: str = "") -> None:
        self.code = code
        self.instrument_message = message
        self.detail = f"error {code},{message!r}"
        self.address = address
        self.command = command
        text = f"instrument error {code},{message!r}"
        if command:
            text += f" after {command!r}"
        if address:
            text += f" at {address}"
        super().__init__(text)


@dataclass(frozen=True)
class Location:
    """A place in a text file: 1-based line and column."""

    file: str
    line: int
    column: int

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


@dataclass(frozen=True)
class Problem:
    """One located problem in an input file."""

    location: Location
    message: str

    def __str__(self) -> str:
        return f"{self.location}: {self.message}"


class LocatedError(BenchwrightError):
    """An input file has one or more problems, each with file, line and column."""

    def __init__(self, problems: list[Problem] | tuple[Problem, ...]) -> None:
        self.problems: tuple[Problem, ...] = tuple(problems)
        super().__init__("\n".join(str(p) for p in self.problems))


class ConfigError(LocatedError):
    """A bench, dialect or board file is wrong."""


class SafetyLimitError(InstrumentFault):
    """A requested voltage, ramp rate or current is above the bench file's limit; nothing was sent."""

    def __init__(self, message: str, *, address: str = "", command: str = "") -> None:
        self.address = address
        self.command = command
        self.detail = message
        super().__init__(message)


class RampRunaway(SafetyLimitError):
    """While ramping, the read-back ran ahead of the commanded rate: the supply is not doing what
    was commanded (and logged), so the run goes to the safe state."""
