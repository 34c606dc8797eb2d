"""Errors of the sequencer layers; the whole hierarchy is drawn in ``drivers.errors``."""

from __future__ import annotations

from drivers.errors import (
    BenchwrightError,
    ConfigError,
    ConnectionClosed,
    ConnectionRefused,
    InstrumentError,
    InstrumentTimeout,
    LocatedError,
    Location,
    Problem,
    ProtocolError,
    SafetyLimitError,
    TransportError,
)

__all__ = [
    "BenchwrightError",
    "CertificateFileError",
    "ConfigError",
    "ConnectionClosed",
    "ConnectionRefused",
    "InstrumentError",
    "InstrumentTimeout",
    "LeaseLost",
    "LocatedError",
    "Location",
    "MissingExtra",
    "OptionError",
    "Problem",
    "ProcedureError",
    "ProtocolError",
    "RunAborted",
    "SafetyLimitError",
    "StorageFault",
    "StoreError",
    "TransportError",
]


class ProcedureError(LocatedError):
    """A procedure (or limits, batch file) is wrong; every problem located."""


class CertificateFileError(LocatedError):
    """A file given to ``verify`` is not a benchwright certificate (bad input, exit 2)."""


class OptionError(BenchwrightError):
    """A command-line option is missing, wrong or refused (bad input, exit 2).  No file location:
    the message names the option and what to give instead; several lines, one per problem."""

    def __init__(self, *lines: str) -> None:
        self.lines = tuple(lines)
        super().__init__("\n".join(lines))


class StoreError(BenchwrightError):
    """The results database cannot be used (refused, newer schema, missing run)."""


class StorageFault(StoreError):
    """The storage under the results database failed (disk full, I/O error, damaged file): not bad
    input; the CLI exits 3 (``sequencer.store.faults`` tells the causes apart)."""


class LeaseLost(StoreError):
    """This process no longer holds the run's lease (another took the run over): what it would
    write is refused, so two processes never write one run."""


class RunAborted(BenchwrightError):
    """The run was stopped before its end.

    ``cause`` is a short word for the kind (``interlock``, ``operator``, ``signal``, ``instrument``,
    ``precondition``, ``overcurrent``); ``step_path`` the step that was running.
    """

    def __init__(self, reason: str, *, cause: str = "", step_path: str = "") -> None:
        self.reason = reason
        self.cause = cause
        self.step_path = step_path
        text = reason if not step_path else f"{reason} [step {step_path}]"
        super().__init__(text)


class MissingExtra(BenchwrightError):
    """An optional part (Parquet, ROOT, pandas, the web view) needs a package that is not installed;
    the message names the extra to install."""

    def __init__(self, package: str, extra: str, purpose: str) -> None:
        self.package = package
        self.extra = extra
        super().__init__(
            f"{purpose} needs the Python package {package!r}: "
            f"pip install 'benchwright[{extra}]'"
        )
