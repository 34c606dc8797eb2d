"""Dialects as data: each role's operations mapped to SCPI command templates in a YAML file.

A dialect file names, per role, the command template of each operation the driver knows (the table
:data:`OPERATIONS`: kind and the fields the driver supplies, values in SI units).  The loader checks
everything it can before an instrument is touched -- unknown roles, operations and keys (with a "did
you mean"), write/query kind, template syntax, fields the driver does not supply, the format specs
against sample values -- and reports each problem as ``file:line:column: message``.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from drivers.capabilities import faked_state_problems
from drivers.dialect_ops import Operation, Reader, check_template, hint, map_value, read_value_maps
from drivers.dialect_waveform import WaveformSpec, read_waveform
from drivers.errors import ConfigError, Location, Problem
from drivers.scpi.messages import PLAIN, MessagePolicy
from drivers.scpi.templates import ExpressionError, Template
from drivers.yamlsafe import YamlMap, YamlSeq, load_yaml, read_bounded

#: Reply kinds a query may declare.
KINDS = ("float", "int", "bool", "str", "csv", "block")


@dataclass(frozen=True)
class OpSpec:
    """What the driver expects of one operation: ``write`` or a query returning ``returns``."""

    returns: str | None  # None = a write
    fields: tuple[str, ...] = ()


def _w(*fields: str) -> OpSpec:
    return OpSpec(None, fields)


def _q(returns: str, *fields: str) -> OpSpec:
    return OpSpec(returns, fields)


# fmt: off
OPERATIONS: dict[str, dict[str, OpSpec]] = {
    "common": {
        "identify": _q("str"), "reset": _w(), "clear": _w(), "operation_complete": _q("int"),
        "next_error": _q("str"), "byte_order": _w(),
    },
    "pulser": {
        "set_amplitude": _w("volts"), "get_amplitude": _q("float"), "set_width": _w("seconds"),
        "set_leading_edge": _w("seconds"), "set_trailing_edge": _w("seconds"),
        "set_frequency": _w("hertz"), "get_frequency": _q("float"), "set_burst_count": _w("count"),
        "set_burst_state": _w("state"), "set_trigger_source": _w("source"), "trigger": _w(),
        "set_output": _w("state"), "get_output": _q("bool"), "set_function": _w("shape"),
        "set_offset": _w("volts"),
    },
    "scope": {
        "set_range": _w("input", "volts"), "set_offset": _w("input", "volts"),
        "set_sample_rate": _w("hertz"), "get_sample_rate": _q("float"), "set_points": _w("count"),
        "set_average_count": _w("count"), "set_trigger_source": _w("source"),
        "set_trigger_level": _w("volts"), "set_trigger_delay": _w("seconds"),
        "set_data_format": _w("kind"), "acquire": _w(), "preamble": _q("csv", "input"),
        "fetch": _q("block", "input"),
    },
    "threshold": {"set_level": _w("channel", "volts"), "get_level": _q("float", "channel")},
    "counter": {
        "set_gate_time": _w("seconds"), "get_gate_time": _q("float"), "select_channel": _w("channel"),
        "start": _w(), "counts": _q("int"),
    },
    "bias": {
        "set_voltage": _w("volts"), "get_voltage_setpoint": _q("float"),
        "set_ramp_rate": _w("volts_per_s"), "get_ramp_rate": _q("float"),
        "set_current_limit": _w("amps"), "set_output": _w("state"), "get_output": _q("bool"),
        "measure_voltage": _q("float"), "measure_current": _q("float"),
        "interlock_closed": _q("bool"), "tripped": _q("bool"), "clear_trip": _w(),
        "set_keep_alive": _w("seconds"),  # optional: output off when no command for N s (0: off)
    },
    "switch": {
        "route": _w("input", "output_index", "channel"), "inject": _w("channel"),
        "close": _w("channels"), "open": _w("channels"), "open_all": _w(),
        "is_closed": _q("csv", "channels"),
    },
    "coincidence": {
        "set_window": _w("seconds"), "get_window": _q("float"), "set_delay": _w("input", "seconds"),
        "get_delay": _q("float", "input"), "set_threshold": _w("input", "volts"),
        "set_gate_time": _w("seconds"), "get_gate_time": _q("float"), "start": _w(),
        "counts": _q("csv"),
    },
    "mca": {
        "set_lower": _w("volts"), "get_lower": _q("float"), "set_upper": _w("volts"),
        "get_upper": _q("float"), "set_bins": _w("count"), "set_events": _w("count"),
        "set_channel": _w("channel"), "set_trigger_source": _w("source"), "start": _w(),
        "fetch": _q("csv"), "outside": _q("csv"),
    },
    "temperature": {"measure": _q("float")},
}
# fmt: on

#: Name -> integer tables a role may carry (the switch's board-output digits).
TABLES: dict[str, tuple[str, ...]] = {"switch": ("outputs",)}

_TOP_KEYS_1 = ("dialect", "version", "common", "roles", "binary")
_TOP_KEYS_2 = ("dialect", "format", "version", "check_errors", "messages", "common", "roles")
_MESSAGE_KEYS = ("skip_unchanged", "join", "errors_per_group")
_ROLE_KEYS_2 = ("at_open", "values", "waveform")
_BINARY_KEYS = ("data_format", "kind", "byte_order")
GENERIC = "generic"
#: The newest dialect format this loader reads.
FORMAT = 2


@dataclass(frozen=True, kw_only=True)
class BinaryFormat:
    """How traces travel: the ``FORMat:DATA`` argument, the element kind and the byte order."""

    data_format: str = "INTeger,16"
    kind: str = "int16"
    big_endian: bool = True  # FORMat:BORDer NORMal, the SCPI default


def settings_of(role: str) -> set[str]:
    """The role's current settings a template may read: ``set_points`` -> ``points`` (the value of
    the last ``set_points`` sent; see :class:`drivers.roles.base.RoleDriver`)."""
    return {op[4:] for op in OPERATIONS.get(role, {}) if op.startswith("set_")}


def names_for(role: str, op: str) -> set[str]:
    """The names the templates of ``role.op`` may use: its fields and the role's settings."""
    return set(OPERATIONS[role][op].fields) | settings_of(role)


@dataclass(frozen=True, kw_only=True)
class Dialect:
    """A loaded, checked dialect file."""

    name: str
    source: str
    version: int = 1
    format: int = 1
    check_errors: bool = True
    messages: MessagePolicy = PLAIN  # round-trip savings the instrument allows
    operations: Mapping[tuple[str, str], Operation] = field(default_factory=dict)
    tables: Mapping[tuple[str, str], Mapping[str, int]] = field(default_factory=dict)
    binary: BinaryFormat = BinaryFormat()
    open_commands: Mapping[str, tuple[Template, ...]] = field(default_factory=dict)
    waveform: WaveformSpec | None = None
    roles: tuple[str, ...] = ()  # the roles the file describes

    def has(self, role: str, op: str) -> bool:
        """True when ``role.op`` can be done (declared and not declared absent)."""
        found = self.operations.get((role, op))
        return found is not None and not found.absent

    def declares(self, role: str, op: str) -> bool:
        """True when the file says anything about ``role.op``, present or absent."""
        return (role, op) in self.operations

    def operation(self, role: str, op: str) -> Operation:
        found = self.operations.get((role, op))
        if found is None or found.absent:
            loc = found.location if found else Location(self.source, 1, 1)
            why = f" (declared absent: {found.absent})" if found else ""
            raise ConfigError(
                [Problem(loc, f"dialect {self.name!r} has no operation {role}.{op}{why}")]
            ) from None
        return found

    def returns(self, role: str, op: str) -> str:
        """The reply kind of a query (``float``, ``csv``, ``block``...); ``""`` for a write."""
        return self.operation(role, op).returns or ""

    def command(self, role: str, op: str, **fields: Any) -> str:
        """The command text of a plain (one-step) operation; booleans go out as ON/OFF."""
        operation = self.operation(role, op)
        step = operation.single
        if step is None or step.template is None:
            raise ConfigError([Problem(operation.location,
                                       f"{role}.{op} is a sequence, not one command")])  # fmt: skip
        return self.render(operation, step.template, fields)

    def render(self, operation: Operation, template: Template, values: Mapping[str, Any]) -> str:
        """``template`` filled from ``values`` after the operation's value maps."""
        maps = operation.values
        wire: Mapping[str, Any] = values
        if maps:
            wire = {}
            for k, v in values.items():
                if k in maps:
                    v = map_value(k, v, maps[k])
                wire[k] = _wire_value(k, v) if isinstance(v, str) else v
        else:  # no value maps (most operations): the values as they are, texts checked
            for k, v in values.items():
                if isinstance(v, str):
                    _wire_value(k, v)
        try:
            return template.render(wire)
        except ExpressionError as exc:
            problem = f"{operation.role}.{operation.name} cannot be filled: {exc}"
            raise ConfigError([Problem(operation.location, problem)]) from None

    def table(self, role: str, name: str) -> Mapping[str, int]:
        return self.tables.get((role, name), {})


def _wire_value(name: str, value: Any) -> Any:
    """``value`` unchanged, unless it is text that would smuggle a second command (``ValueError``)."""
    if isinstance(value, str) and ("\n" in value or "\r" in value or ";" in value):
        raise ValueError(f"{name}={value!r}: a command argument may not hold a newline or ';'")
    return value


def shipped_dialect_path(name: str) -> Path:
    """Path of a dialect shipped in ``drivers/dialects/`` (``generic``)."""
    return Path(str(resources.files("drivers") / "dialects" / f"{name}.yaml"))


def load_dialect(name_or_path: str | Path) -> Dialect:
    """Load ``generic`` (or another shipped name), else the YAML file at the path."""
    text_name = str(name_or_path)
    path = Path(text_name)
    if path.suffix not in (".yaml", ".yml") and "/" not in text_name and "\\" not in text_name:
        path = shipped_dialect_path(text_name)
    try:
        text = read_bounded(path)
    except OSError as exc:
        raise ConfigError(
            [Problem(Location(str(path), 1, 1), f"cannot read dialect file: {exc.strerror}")]
        ) from None
    return parse_dialect(text, str(path))


def parse_dialect(text: str | bytes, source: str) -> Dialect:
    """Parse and check a dialect document (format 1 or 2); every problem is reported at once.

    The same text from the same source gives the same (frozen) dialect, kept from its first
    parse: a batch opens every board's bench anew, and the demo's ten boards parsed their dialect
    texts 118 times, ~30 ms each (the YAML composer with locations).  Only dialects that load are
    kept (a text with problems raises every time); the key is the text itself, never a file's
    name or date, so an edited file is parsed afresh."""
    return _parse_dialect_kept(text, source)


@functools.lru_cache(maxsize=64)
def _parse_dialect_kept(text: str | bytes, source: str) -> Dialect:
    data = load_yaml(text, source, error=ConfigError)
    problems: list[Problem] = []
    if not isinstance(data, YamlMap):
        raise ConfigError([Problem(Location(source, 1, 1),
                                   "a dialect file is a mapping with 'dialect:' and 'roles:'")])  # fmt: skip
    fmt = data.get("format", 1)
    if fmt not in (1, FORMAT) or isinstance(fmt, bool):
        problems.append(Problem(data.where("format"), f"'format:' must be 1 or {FORMAT}"))
        fmt = FORMAT
    _unknown_keys(data, _TOP_KEYS_2 if fmt >= 2 else _TOP_KEYS_1, "top-level key", problems)
    name = data.get("dialect")
    if not isinstance(name, str) or not name:
        problems.append(Problem(data.where("dialect"), "'dialect:' must name the dialect"))
        name = ""
    version = data.get("version", 1)
    if not isinstance(version, int) or isinstance(version, bool):
        problems.append(Problem(data.where("version"), "'version:' must be an integer"))
        version = 1
    check = data.get("check_errors", True)
    if not isinstance(check, bool):
        problems.append(
            Problem(data.where("check_errors"), "'check_errors:' must be true or false")
        )
        check = True
    messages = _read_messages(data, problems)
    parts = _Parts()
    common = data.get("common", YamlMap())
    if _is_map(common, data, "common", problems):
        _read_role("common", common, fmt, parts, problems)
    roles = data.get("roles")
    if roles is None:
        problems.append(Problem(data.where(), "missing 'roles:'"))
    elif _is_map(roles, data, "roles", problems):
        role_names = [r for r in OPERATIONS if r != "common"]
        _unknown_keys(roles, role_names, "role", problems)
        for role in role_names:
            if role in roles and _is_map(roles[role], roles, role, problems):
                _read_role(role, roles[role], fmt, parts, problems)
    if parts.waveform is not None:
        _check_byte_order(parts, problems)
    problems.extend(faked_state_problems(parts.operations))
    binary = BinaryFormat()
    if fmt < 2:
        binary = _read_binary(data, problems, parts.operations.get(("common", "byte_order")))
    if problems:
        raise ConfigError(problems)
    return Dialect(name=name, source=source, version=version, format=fmt, check_errors=check,
                   messages=messages,
                   operations=parts.operations, tables=parts.tables, binary=binary,
                   open_commands=parts.open_commands, waveform=parts.waveform,
                   roles=tuple(r for r in OPERATIONS if r != "common" and r in (roles or {})))  # fmt: skip


@dataclass
class _Parts:
    operations: dict[tuple[str, str], Operation] = field(default_factory=dict)
    tables: dict[tuple[str, str], Mapping[str, int]] = field(default_factory=dict)
    open_commands: dict[str, tuple[Template, ...]] = field(default_factory=dict)
    waveform: WaveformSpec | None = None


def _read_role(role: str, ops: YamlMap, fmt: int, parts: _Parts, problems: list[Problem]) -> None:
    known = OPERATIONS[role]
    table_names = TABLES.get(role, ())
    extra = _ROLE_KEYS_2 if fmt >= 2 else ()
    _unknown_keys(ops, [*known, *table_names, *extra], f"{role} operation", problems)
    for name in table_names:
        if name in ops:
            table = _read_table(role, name, ops, problems)
            if table is not None:
                parts.tables[(role, name)] = table
    role_names = set().union(*(names_for(role, op) for op in known)) if known else set()
    role_values = read_value_maps(ops, role, role_names, problems) if fmt >= 2 else {}
    reader = Reader(role=role, format=fmt, problems=problems, role_values=role_values)
    for name, spec in known.items():
        if name in ops:
            op = reader.operation(name, spec.returns, names_for(role, name), ops)
            if op is not None:
                parts.operations[(role, name)] = op
    if "at_open" in ops and fmt >= 2:
        parts.open_commands[role] = _read_open(role, ops, problems)
    if "waveform" in ops:
        if role != "scope":
            problems.append(Problem(ops.where("waveform", of_key=True),
                                    "'waveform:' belongs to the scope role"))  # fmt: skip
        else:
            parts.waveform = read_waveform(ops["waveform"], ops.where("waveform"), problems,
                                           operations=set(known))  # fmt: skip


def _check_byte_order(parts: _Parts, problems: list[Problem]) -> None:
    """A scope told ``FORMat:BORDer SWAPped`` at open but declared big-endian data (or the other
    way round) would read every code byte-swapped: refused, at the data declaration."""
    wave = parts.waveform
    assert wave is not None
    for template in parts.open_commands.get("scope", ()):
        text = template.text.upper()
        if "BORD" not in text and "BYTEORD" not in text and "BYT" not in text.split(" ")[0]:
            continue
        swapped = "SWAP" in text or "LSBF" in text
        if swapped == wave.data.big_endian:
            said = "SWAPped (little-endian)" if swapped else "NORMal (big-endian)"
            problems.append(Problem(wave.location, f"waveform data byte_order disagrees with "
                                                   f"{template.text!r} sent at open ({said})"))  # fmt: skip


def _read_open(role: str, ops: YamlMap, problems: list[Problem]) -> tuple[Template, ...]:
    """``at_open: [CMD, ...]``: configuring commands sent once when the role is opened."""
    items = ops["at_open"]
    if not isinstance(items, YamlSeq):
        problems.append(Problem(ops.where("at_open"), f"{role}.at_open is a list of commands"))
        return ()
    out = []
    for index, text in enumerate(items):
        if not isinstance(text, str) or not text.strip():
            problems.append(Problem(items.where(index), f"{role}.at_open: a command, as text"))
            continue
        t = check_template(text, f"{role}.at_open", set(), items.where(index), problems)
        if t is not None:
            out.append(t)
    return tuple(out)


def _read_table(
    role: str, name: str, ops: YamlMap, problems: list[Problem]
) -> Mapping[str, int] | None:
    table = ops[name]
    if not isinstance(table, YamlMap) or not table:
        problems.append(
            Problem(
                ops.where(name), f"{role}.{name} must map names to digits, e.g. {{x1: 1, x5: 2}}"
            )
        )
        return None
    out: dict[str, int] = {}
    for key, value in table.items():
        if not isinstance(value, int) or isinstance(value, bool) or not 0 <= value <= 9:
            problems.append(Problem(table.where(key), f"{role}.{name}.{key} must be a digit 0-9"))
        else:
            out[str(key)] = value
    return out


def _read_messages(data: YamlMap, problems: list[Problem]) -> MessagePolicy:
    """The ``messages:`` section (format 2): which round-trip savings the instrument allows
    (:mod:`drivers.scpi.messages`); each key true or false, all false when absent."""
    entry = data.get("messages")
    if entry is None or not _is_map(entry, data, "messages", problems):
        return PLAIN
    _unknown_keys(entry, _MESSAGE_KEYS, "key of messages", problems)
    flags: dict[str, bool] = {}
    for key in _MESSAGE_KEYS:
        value = entry.get(key, False)
        if not isinstance(value, bool):
            problems.append(Problem(entry.where(key), f"'messages.{key}:' must be true or false"))
            value = False
        flags[key] = value
    return MessagePolicy(**flags)


def _read_binary(
    data: YamlMap, problems: list[Problem], byte_order: Operation | None
) -> BinaryFormat:
    """The ``binary:`` section; without one, the byte order follows ``common.byte_order``
    (``FORMat:BORDer SWAPped`` = little-endian, anything else = NORMal, big-endian)."""
    if "binary" not in data:
        swapped = byte_order is not None and "SWAP" in byte_order.template.upper()
        return BinaryFormat(big_endian=not swapped)
    entry = data["binary"]
    if not _is_map(entry, data, "binary", problems):
        return BinaryFormat()
    _unknown_keys(entry, _BINARY_KEYS, "key of binary", problems)
    default = BinaryFormat()
    order = entry.get("byte_order", "big")
    if order not in ("big", "little"):
        problems.append(
            Problem(
                entry.where("byte_order"),
                "byte_order must be 'big' (FORMat:BORDer NORMal) or 'little' (SWAPped)",
            )
        )
    kind = entry.get("kind", default.kind)
    if kind not in ("int8", "int16", "int32", "float32", "float64", "uint8", "uint16"):
        problems.append(Problem(entry.where("kind"), f"unknown element kind {kind!r}"))
    return BinaryFormat(
        data_format=str(entry.get("data_format", default.data_format)),
        kind=str(kind),
        big_endian=order != "little",
    )


def _is_map(value: Any, parent: YamlMap, key: str, problems: list[Problem]) -> bool:
    if isinstance(value, YamlMap):
        return True
    problems.append(Problem(parent.where(key), f"'{key}:' must be a mapping"))
    return False


def _unknown_keys(data: YamlMap, allowed: Any, what: str, problems: list[Problem]) -> None:
    allowed = list(allowed)
    for key in data:
        if key not in allowed:
            problems.append(
                Problem(
                    data.where(key, of_key=True), f"unknown {what} {key!r}{hint(str(key), allowed)}"
                )
            )
