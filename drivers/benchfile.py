"""The bench file: which instrument plays which role, and how to reach it (loaded and checked).

```yaml
bench: bench-2
instruments:   # roles: pulser, scope, threshold, counter, bias, switch, coincidence
  pulser: {address: "TCPIP0::127.0.0.1::5025::SOCKET", dialect: generic, expect_id: "",
           calibrated: 2026-06-30, calibration_due: 2027-06-30}
  bias:   {address: "TCPIP0::127.0.0.1::5029::SOCKET", dialect: generic, max_volts: 60, max_ramp_V_per_s: 5}
```
Per instrument also ``read_termination``, ``write_termination`` (a string, or ``LF``/``CR``/``CRLF``),
``timeout_ms``, ``chunk_size``, ``visa_library`` (default ``@py``), ``busy_poll_us`` (how long a
wait for a reply polls before it sleeps, default 200; 0 turns it off) and, for the bias supply,
``max_current_uA``; ``timing: {round_trip_ms, transfer_MBps, relay_settle_ms, rearm_us}`` is the
instrument's pace in the bench timing model (:mod:`drivers.timing`; ``plan --bench`` estimates with
it; each key optional, defaults there).  Unknown keys are located errors with a "did you mean" hint.  A dialect given as a
path is resolved against the bench file's folder and checked at load.

``visa_library`` names a pyvisa backend (``@py``, ``@ivi``, ``@sim``).  A path to a VISA library is
native code that pyvisa would load into this process, so a file alone never chooses one: the path
must also be allowed by whoever runs the command (``allowed_visa_libraries``, from the command
line's ``--allow-visa-library PATH``).  Text values (address, expect_id, visa_library) may hold no
control characters: a newline in an address would end the VISA resource string early.

``lab: DIR`` (optional) names the lab's own folder of board types and limit sets (``DIR/boards``,
``DIR/limits``; ``sequencer.procedure.board_choice.LabFiles``), resolved against the bench file's
folder like a dialect path and checked to be a folder at load.  The environment variable
``BENCHWRIGHT_LAB`` wins over it when set.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
from collections.abc import Collection, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from drivers.bench_values import EntryReader, first_control, key_location, report_unknown
from drivers.capabilities import role_problems
from drivers.dialect import GENERIC, Dialect, parse_dialect, shipped_dialect_path
from drivers.errors import ConfigError, Location, Problem
from drivers.scpi.session import Identity
from drivers.timing import InstrumentTiming, read_timing
from drivers.transport import (
    DEFAULT_BUSY_POLL_US,
    DEFAULT_CHUNK_SIZE,
    DEFAULT_TIMEOUT_MS,
    DEFAULT_VISA_LIBRARY,
)
from drivers.yamlsafe import YamlMap, load_yaml, read_bounded

ROLES = (
    "pulser", "scope", "threshold", "counter", "bias", "switch", "coincidence", "mca", "temperature",
)
#: The pyvisa backends a bench file may name by itself (no native code chosen by a file).
NAMED_VISA_BACKENDS = ("@py", "@ivi", "@sim")
_BIAS_ONLY = ("max_volts", "max_ramp_V_per_s", "max_current_uA", "hardware_interlock")
_KEYS = (
    "address",
    "dialect",
    "visa_library",
    "expect_id",
    "calibrated",
    "calibration_due",
    "timeout_ms",
    "read_termination",
    "write_termination",
    "chunk_size",
    "busy_poll_us",
    "timing",
    *_BIAS_ONLY,
)


@dataclass(frozen=True, kw_only=True)
class InstrumentSpec:
    """One instrument of the bench file (``max_*`` only for the bias supply)."""

    role: str
    address: str
    dialect: str = GENERIC
    visa_library: str = DEFAULT_VISA_LIBRARY
    expect_id: str = ""
    calibrated: dt.date | None = None  # date of the last calibration (printed on certificates)
    calibration_due: dt.date | None = None
    timeout_ms: int = DEFAULT_TIMEOUT_MS
    read_termination: str = "\n"
    write_termination: str = "\n"
    chunk_size: int = DEFAULT_CHUNK_SIZE
    busy_poll_us: int = DEFAULT_BUSY_POLL_US
    max_volts: float | None = None
    max_ramp_V_per_s: float | None = None
    max_current_uA: float | None = None
    #: How a hardware interlock is wired to the supply's inhibit input (bias only; required when
    #: the dialect cannot read the interlock, and then acknowledged for each run).
    hardware_interlock: str = ""
    #: The instrument's pace in the bench timing model (``timing:``; defaults when absent).
    timing: InstrumentTiming = field(default_factory=InstrumentTiming)
    #: The dialect's text as read once when the bench was loaded (or as stored with a run): the
    #: text the instrument is driven by and the text the run keeps are the same bytes.
    dialect_text: str = field(default="", repr=False)


@dataclass(frozen=True, kw_only=True)
class BenchSpec:
    name: str
    instruments: Mapping[str, InstrumentSpec]
    source: str = "<bench>"
    text: str = field(default="", repr=False)  # the file as read, for provenance
    #: where things stand in the file: ``instruments`` (the key), ``<role>`` (the role's key) and
    #: ``<role>.<key>`` (a value); empty for a bench built from a plain mapping
    locations: Mapping[str, Location] = field(default_factory=dict, repr=False, compare=False)
    #: the lab's own folder of board types and limit sets (``lab:``), resolved; None when not named
    lab: Path | None = None

    def place_of(self, warning: str) -> Location:
        """Where in the bench file an :func:`instrument_warnings` line points: the key it is about
        (``expect_id``, ``calibrated``, ``calibration_due``) of the role it names."""
        role, _, text = warning.partition(": ")
        key = next((k for k, words in WARNING_KEYS if words in text), None)
        return self.where(role if role in self.instruments else None, key)

    def where(self, role: str | None = None, key: str | None = None) -> Location:
        """The place in the bench file to point at: the value of ``role``'s ``key`` if it is written,
        else the role's entry, else the ``instruments:`` key, else the file's start."""
        for name in (f"{role}.{key}" if role and key else None, role, "instruments"):
            if name is not None and name in self.locations:
                return self.locations[name]
        return Location(self.source, 1, 1)


def load_bench(path: str | Path, *, allowed_visa_libraries: Collection[str] = ()) -> BenchSpec:
    """Read and check a bench file; every problem is reported as ``file:line:column: message``.

    ``allowed_visa_libraries``: VISA library paths the caller allows besides the named backends.
    """
    path = Path(path)
    try:
        raw = read_bounded(path)
    except OSError as exc:
        raise ConfigError(
            [Problem(Location(str(path), 1, 1), f"cannot read bench file: {exc.strerror}")]
        ) from None
    return parse_bench_text(
        raw, str(path), base_dir=path.parent, allowed_visa_libraries=allowed_visa_libraries
    )


def parse_bench_text(
    text: str | bytes,
    source: str,
    *,
    base_dir: Path | None = None,
    allowed_visa_libraries: Collection[str] = (),
    dialect_texts: Mapping[str, str] | None = None,
) -> BenchSpec:
    """Check a bench file's text (e.g. the copy recorded with a run).

    ``dialect_texts`` (role -> text): dialects to use instead of reading the files the bench names,
    e.g. the texts stored with a run, so a repeat drives the instruments as the run did."""
    data = load_yaml(text, source, error=ConfigError)
    spec = bench_from_mapping(
        data, source=source, base_dir=base_dir, allowed_visa_libraries=allowed_visa_libraries,
        dialect_texts=dialect_texts,
    )
    raw = text.decode("utf-8") if isinstance(text, bytes) else text
    return dataclasses.replace(spec, text=raw)


def bench_from_mapping(
    data: Any,
    source: str = "<bench>",
    *,
    base_dir: Path | None = None,
    allowed_visa_libraries: Collection[str] = (),
    dialect_texts: Mapping[str, str] | None = None,
) -> BenchSpec:
    """Check a bench mapping (from :func:`drivers.yamlsafe.load_yaml` for located errors)."""
    problems: list[Problem] = []
    if not isinstance(data, Mapping):
        raise ConfigError(
            [
                Problem(
                    Location(source, 1, 1),
                    "a bench file is a mapping with 'bench:' and 'instruments:'",
                )
            ]
        )
    report_unknown(data, ("bench", "instruments", "lab"), "key", problems, source)
    lab = _lab(data, problems, source, base_dir) if "lab" in data else None
    name = data.get("bench")
    if not isinstance(name, str) or not name.strip():
        problems.append(Problem(key_location(data, "bench", source), "'bench:' must name the bench"))
        name = ""
    instruments: dict[str, InstrumentSpec] = {}
    entries = data.get("instruments")
    if not isinstance(entries, Mapping) or not entries:
        problems.append(
            Problem(
                key_location(data, "instruments", source),
                f"'instruments:' must map roles ({', '.join(ROLES)}) to instruments",
            )
        )
    else:
        report_unknown(entries, ROLES, "role", problems, source)
        for role in ROLES:
            if role in entries:
                spec = _instrument(role, entries[role], entries, problems, source, base_dir,
                                   (dialect_texts or {}).get(role))
                if spec is not None and not _visa_library_allowed(
                    spec, entries[role], allowed_visa_libraries, problems, source
                ):
                    spec = None
                if spec is not None:
                    instruments[role] = spec
    if problems:
        raise ConfigError(problems)
    return BenchSpec(
        name=name, instruments=instruments, source=source, locations=_locations(data, entries),
        lab=lab,
    )


def _lab(data: Mapping, problems: list[Problem], source: str, base_dir: Path | None) -> Path | None:
    """The ``lab:`` folder, relative paths against the bench file's folder.  Checked to exist only
    for a bench read from a file (``base_dir``): a recorded copy names a folder of another time."""
    value = data.get("lab")
    where = key_location(data, "lab", source)
    if not isinstance(value, str) or not value.strip() or first_control(value) is not None:
        problems.append(Problem(where, "lab: must be the path of a folder (with boards/, limits/)"))
        return None
    folder = Path(value.strip()).expanduser()
    if base_dir is not None:
        folder = folder if folder.is_absolute() else base_dir / folder
        if not folder.is_dir():
            problems.append(Problem(where, f"lab folder {value!r} not found ({folder})"))
            return None
    return folder


def _locations(data: Mapping, entries: Mapping) -> dict[str, Location]:
    """Where the ``instruments:`` key, each role and each role's values stand (files only)."""
    if not isinstance(data, YamlMap) or not isinstance(entries, YamlMap):
        return {}
    out = {"instruments": data.where("instruments", of_key=True)}
    for role, entry in entries.items():
        out[str(role)] = entries.where(role, of_key=True)
        if isinstance(entry, YamlMap):
            out.update({f"{role}.{key}": entry.where(key) for key in entry})
    return out


#: (bench key, words of the instrument_warnings line about it), for BenchSpec.place_of
WARNING_KEYS = (
    ("expect_id", "does not match expect_id"),
    ("calibrated", "is after today"),
    ("calibration_due", "calibration was due"),
)


def instrument_warnings(
    spec: InstrumentSpec, identity: Identity | None, today: dt.date
) -> list[str]:
    """Identity not matching ``expect_id`` (case-insensitive substring of ``*IDN?``); calibration past
    due; a calibration date after today (a typo or a wrong clock: nothing to trust the due date by)."""
    out: list[str] = []
    if (
        identity is not None
        and spec.expect_id
        and spec.expect_id.lower() not in identity.raw.lower()
    ):
        out.append(
            f"{spec.role}: identity {identity.raw!r} does not match expect_id {spec.expect_id!r}"
        )
    if spec.calibrated is not None and spec.calibrated > today:
        out.append(f"{spec.role}: calibrated {spec.calibrated.isoformat()} is after today {today.isoformat()}")
    if spec.calibration_due is not None and spec.calibration_due < today:
        days = (today - spec.calibration_due).days
        out.append(
            f"{spec.role}: calibration was due {spec.calibration_due.isoformat()} ({days} days ago)"
        )
    return out


def _instrument(
    role: str,
    entry: Any,
    parent: Mapping,
    problems: list[Problem],
    source: str,
    base_dir: Path | None,
    stored_dialect: str | None = None,
) -> InstrumentSpec | None:
    if not isinstance(entry, Mapping):
        problems.append(
            Problem(
                key_location(parent, role, source),
                f"{role}: expected a mapping such as {{address: ..., dialect: generic}}",
            )
        )
        return None
    start = len(problems)
    report_unknown(entry, _KEYS, f"{role} key", problems, source)
    if role != "bias":
        for key in _BIAS_ONLY:
            if key in entry:
                problems.append(
                    Problem(
                        key_location(entry, key, source, of_key=True),
                        f"{role}: {key} applies to the bias supply only",
                    )
                )
    values: dict[str, Any] = {"role": role}
    check = EntryReader(role, entry, problems, source)
    values["address"] = check.text("address", required=True)
    values["visa_library"] = check.text("visa_library", default=DEFAULT_VISA_LIBRARY)
    values["expect_id"] = check.text("expect_id", default="", allow_empty=True)
    values["calibrated"] = check.date("calibrated")
    values["calibration_due"] = check.date("calibration_due")
    if values["calibrated"] and values["calibration_due"] and values["calibrated"] > values["calibration_due"]:
        check.bad("calibrated", f"{values['calibrated'].isoformat()} is after calibration_due "
                                f"{values['calibration_due'].isoformat()}")
    values["timeout_ms"] = check.integer("timeout_ms", DEFAULT_TIMEOUT_MS, 1, 3_600_000)
    values["chunk_size"] = check.integer("chunk_size", DEFAULT_CHUNK_SIZE, 1024, 1 << 30)
    values["busy_poll_us"] = check.integer("busy_poll_us", DEFAULT_BUSY_POLL_US, 0, 100_000)
    values["timing"] = _timing(role, entry, problems, source)
    values["read_termination"] = check.termination("read_termination")
    values["write_termination"] = check.termination("write_termination")
    values["dialect"], dialect, values["dialect_text"] = _dialect(
        role, entry, problems, source, base_dir, stored_dialect
    )
    if role == "bias":
        for key in ("max_volts", "max_ramp_V_per_s", "max_current_uA"):
            values[key] = check.positive(key, required=key != "max_current_uA")
        values["hardware_interlock"] = check.text("hardware_interlock", default="")
    if dialect is not None:
        problems.extend(
            role_problems(
                dialect,
                role,
                hardware_interlock=values.get("hardware_interlock", ""),
                entry=key_location(entry, "dialect", source) if "dialect" in entry else key_location(entry, None, source),
            )
        )
    if len(problems) > start:
        return None
    return InstrumentSpec(**values)


def _visa_library_allowed(
    spec: InstrumentSpec,
    entry: Mapping,
    allowed: Collection[str],
    problems: list[Problem],
    source: str,
) -> bool:
    """A named backend, or a library path the command line allowed (never the file alone)."""
    library = spec.visa_library
    if library in NAMED_VISA_BACKENDS:
        return True
    path, at, backend = library.rpartition("@")
    if not (at and path and f"@{backend}" in NAMED_VISA_BACKENDS):
        path = library  # a bare path
    if _resolved(path) in {_resolved(a) for a in allowed}:
        return True
    problems.append(
        Problem(
            key_location(entry, "visa_library", source),
            f"{spec.role}: visa_library {library!r} is not a named backend "
            f"({', '.join(NAMED_VISA_BACKENDS)}); a library path loads native code and must be "
            f"allowed on the command line: --allow-visa-library {path}",
        )
    )
    return False


def _resolved(path: str) -> str:
    return str(Path(path).expanduser().resolve())


def _dialect(
    role: str,
    entry: Mapping,
    problems: list[Problem],
    source: str,
    base_dir: Path | None,
    stored: str | None = None,
) -> tuple[str, Dialect | None, str]:
    """The dialect's name or resolved path, the dialect itself when it loads, and its text.

    The text is read once, here, and kept with the spec: the instrument is driven by the same bytes
    the run stores.  ``stored`` (the text a recorded run used) replaces the file on disk."""
    name = entry.get("dialect", GENERIC)
    where = key_location(entry, "dialect", source)
    if not isinstance(name, str) or not name.strip():
        problems.append(
            Problem(where, f"{role}: dialect must be 'generic' or the path of a dialect file")
        )
        return GENERIC, None, ""
    is_path = name.endswith((".yaml", ".yml")) or "/" in name or "\\" in name
    path = Path(name) if is_path else shipped_dialect_path(name)
    if is_path and not path.is_absolute() and base_dir is not None:
        path = base_dir / path
    label = str(path) if is_path else name
    if stored is not None:
        text, origin = stored, f"{label} (as stored with the run)"
    else:
        if not path.is_file():
            problems.append(Problem(where, f"{role}: dialect {name!r} not found ({path})"))
            return name, None, ""
        try:
            text = read_bounded(path).decode("utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            why = exc.strerror if isinstance(exc, OSError) else "not UTF-8 text"
            problems.append(Problem(where, f"{role}: cannot read dialect {path}: {why}"))
            return name, None, ""
        origin = str(path)
    dialect = None
    try:
        dialect = parse_dialect(text, origin)
    except ConfigError as exc:
        problems.extend(exc.problems)
    return label, dialect, text


def _timing(role: str, entry: Mapping, problems: list[Problem], source: str) -> InstrumentTiming:
    """The instrument's ``timing:`` mapping (:func:`drivers.timing.read_timing`), its problems located."""
    if "timing" not in entry:
        return InstrumentTiming()
    timing, found = read_timing(entry["timing"])
    raw = entry["timing"]
    for key, message in found:
        where = key_location(raw, key, source) if key is not None else key_location(entry, "timing", source)
        problems.append(Problem(where, f"{role}: {message}"))
    return timing
