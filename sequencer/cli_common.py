"""What every command shares: exit codes, the error-to-exit-code mapping, common options."""

from __future__ import annotations

import functools
import getpass
import os
import sys
import traceback
from collections.abc import Callable
from typing import Any, NoReturn, TypeVar

import click

from sequencer.errors import (
    BenchwrightError,
    InstrumentError,
    LocatedError,
    ProtocolError,
    RunAborted,
    SafetyLimitError,
    StorageFault,
    StoreError,
    TransportError,
)

EXIT_OK, EXIT_FAIL, EXIT_INPUT, EXIT_ABORT = 0, 1, 2, 3

SAFETY_HELP = (
    "CAUTION: bias and high-voltage supplies can hurt people. More than 33 V rms / 46.7 V peak / "
    "70 V dc counts as hazardous live (IEC 61010-1, from memory; 35 V dc in wet locations). The "
    "software interlock check is no substitute for the hardware interlock on the supply's inhibit "
    "input. Keep the enclosure closed while live; local codes, your lab's safety rules and qualified "
    "personnel decide."
)

F = TypeVar("F", bound=Callable[..., Any])


def fail(code: int, message: str) -> NoReturn:
    click.echo(message, err=True)
    sys.exit(code)


def handles_errors(func: F) -> F:
    """Map benchwright's errors to one clear line and an exit code (a traceback only with --debug)."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        debug = bool(click.get_current_context().find_root().params.get("debug"))
        try:
            return func(*args, **kwargs)
        except LocatedError as exc:
            _debug(debug)
            fail(EXIT_INPUT, "\n".join(str(p) for p in exc.problems))
        except StorageFault as exc:  # the disk or the database file failed: not bad input
            _debug(debug)
            fail(EXIT_ABORT, f"aborted: storage fault: {exc}")
        except (SafetyLimitError, StoreError) as exc:
            _debug(debug)
            fail(EXIT_INPUT, f"error: {exc}")
        except RunAborted as exc:
            _debug(debug)
            fail(EXIT_ABORT, f"aborted: {exc}")
        except (TransportError, InstrumentError, ProtocolError) as exc:
            _debug(debug)
            fail(EXIT_ABORT, f"aborted: instrument fault: {exc}")
        except BenchwrightError as exc:
            _debug(debug)
            fail(EXIT_INPUT, f"error: {exc}")
        except (click.ClickException, click.exceptions.Abort, click.exceptions.Exit):
            raise  # click's own usage errors and exits
        except Exception as exc:  # a bug: one line for the operator, the traceback with --debug
            _debug(debug)
            from sequencer.store.faults import first_line, storage_cause

            cause = storage_cause(exc)  # a database error that escaped the store's mapping
            if cause:
                fail(EXIT_ABORT, f"aborted: storage fault: {cause} ({first_line(exc)})")
            fail(EXIT_ABORT, f"internal error: {type(exc).__name__}: {exc} (a bug: please report it; "
                 "--debug shows the traceback)")

    return wrapper  # type: ignore[return-value]


def _debug(debug: bool) -> None:
    if debug:
        traceback.print_exc()


def open_listing(db: str | None) -> Any:
    """Runs, batches and measurements of the existing database for a read-only command
    (``store.listing``): an SQLite file is read with the standard library's sqlite3 (no
    SQLAlchemy, alembic or numpy to import), anything else through the ``Store``.  A missing
    database is ``StoreError``; nothing is created."""
    from sequencer.store.listing import open_listing as open_it
    from sequencer.store.sqlite_files import default_url

    return open_it(db or default_url(env()))


def open_existing_store(db: str | None) -> Any:
    """The store for a command that only reads (``runs``, ``batches``, ``export``, ``verify``): a
    missing database is ``StoreError`` and nothing is created.  The same as
    ``compose.open_existing_store`` without importing ``compose``, which pulls in the engine and its
    analysis (scipy) and the drivers: a read-only command should start in a fraction of a second."""
    from sequencer.store import Store, default_url

    return Store.open(db or default_url(env()), create=False)


def existing_run(store: Any, run_id: int) -> Any:
    """The run's record, or ``StoreError`` naming the missing run (``compose.check_store``'s
    answer, without importing ``compose``)."""
    try:
        return store.get_run(run_id)
    except StoreError:
        raise
    except LookupError as exc:
        raise StoreError(f"no run {run_id} in the database") from exc


UNKNOWN_OPERATOR = "unknown (no login name)"


def login_name() -> str:
    """The operator by default: the login name (LOGNAME, USER, LNAME, USERNAME, then the password
    database, as ``getpass.getuser`` looks), or a marker that says no name could be found."""
    try:
        return getpass.getuser() or UNKNOWN_OPERATOR
    except (OSError, KeyError):  # no variable set and no password entry for this uid
        return UNKNOWN_OPERATOR


def env() -> dict[str, str]:
    return dict(os.environ)


db_option = click.option(
    "--db", default=None, metavar="URL",
    help="SQLAlchemy URL of the results database (default: $BENCHWRIGHT_DB or sqlite:///benchwright.db).",
)

visa_library_option = click.option(
    "--allow-visa-library", "allow_visa_library", multiple=True, metavar="PATH",
    help="Allow the bench file to load this VISA library (native code; a file alone never can). "
    "Repeatable. Without it only the backends @py, @ivi and @sim are accepted.",
)
