"""Dialects as data: each role's operations mapped to SCPI command templates in a YAML file.

A dialect file names, per role, the command template of each operation the driver knows (the table
:data:`OPERATIONS`: kind and the fields the driver supplies, values in SI units).  The loader checks
everything it can before an instrument is touched -- unknown roles, operations and keys (with a "did
you mean"), write/query kind, template syntax, fields the driver does not supply, the format specs
against sample values -- and reports each problem as ``file:line:column: message``.
"""

from __future__ import annotations

import difflib
import string
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from drivers.errors import ConfigError, Location, Problem
from drivers.yamlsafe import YamlMap, load_yaml, read_bounded

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
        "set_output": _w("state"), "get_output": _q("bool"),
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

# fmt: off
_SAMPLES: dict[str, Any] = {
    "volts": 1.25, "seconds": 1e-6, "hertz": 1e3, "amps": 1e-6, "volts_per_s": 5.0,
    "input": 1, "channel": 3, "count": 10, "output_index": 2,
    "state": "ON", "source": "EXTernal", "kind": "INTeger,16", "channels": "1203,1204",
}
# fmt: on
_TOP_KEYS = ("dialect", "version", "common", "roles", "binary")
_OP_KEYS = ("write", "query", "returns")
_BINARY_KEYS = ("data_format", "kind", "byte_order")
GENERIC = "generic"


@dataclass(frozen=True, kw_only=True)
class BinaryFormat:
    """How traces travel: the ``FORMat:DATA`` argument, the element kind and the byte order."""

    data_format: str = "INTeger,16"
    kind: str = "int16"
    big_endian: bool = True  # FORMat:BORDer NORMal, the SCPI default


@dataclass(frozen=True, kw_only=True)
class Operation:
    role: str
    name: str
    template: str
    returns: str | None
    location: Location

    @property
    def is_query(self) -> bool:
        return self.returns is not None


@dataclass(frozen=True, kw_only=True)
class Dialect:
    """A loaded, checked dialect file."""

    name: str
    source: str
    version: int = 1
    operations: Mapping[tuple[str, str], Operation] = field(default_factory=dict)
    tables: Mapping[tuple[str, str], Mapping[str, int]] = field(default_factory=dict)
    binary: BinaryFormat = BinaryFormat()

    def has(self, role: str, op: str) -> bool:
        return (role, op) in self.operations

    def operation(self, role: str, op: str) -> Operation:
        try:
            return self.operations[(role, op)]
        except KeyError:
            loc = Location(self.source, 1, 1)
            raise ConfigError(
                [Problem(loc, f"dialect {self.name!r} has no operation {role}.{op}")]
            ) from None

    def returns(self, role: str, op: str) -> str:
        """The reply kind of a query (``float``, ``csv``, ``block``...); ``""`` for a write."""
        return self.operation(role, op).returns or ""

    def command(self, role: str, op: str, **fields: Any) -> str:
        """The command text for ``role.op``; booleans go out as ON/OFF."""
        operation = self.operation(role, op)
        values = {k: _wire_value(k, v) for k, v in fields.items()}
        try:
            return operation.template.format(**values)
        except (KeyError, IndexError, ValueError, TypeError, AttributeError) as exc:
            problem = f"template {operation.template!r} of {role}.{op} cannot be filled: {exc}"
            raise ConfigError([Problem(operation.location, problem)]) from None

    def table(self, role: str, name: str) -> Mapping[str, int]:
        return self.tables.get((role, name), {})


def _wire_value(name: str, value: Any) -> Any:
    if isinstance(value, bool):
        return "ON" if value else "OFF"
    if isinstance(value, str) and any(c in value for c in "\r\n;"):
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
    """Parse and check a dialect document; every problem found is reported at once."""
    data = load_yaml(text, source, error=ConfigError)
    problems: list[Problem] = []
    if not isinstance(data, YamlMap):
        raise ConfigError(
            [
                Problem(
                    Location(source, 1, 1),
                    "a dialect file is a mapping with 'dialect:' and 'roles:'",
                )
            ]
        )
    _unknown_keys(data, _TOP_KEYS, "top-level key", problems)
    name = data.get("dialect")
    if not isinstance(name, str) or not name:
        problems.append(Problem(data.where("dialect"), "'dialect:' must name the dialect"))
        name = ""
    version = data.get("version", 1)
    if not isinstance(version, int) or isinstance(version, bool):
        problems.append(Problem(data.where("version"), "'version:' must be an integer"))
        version = 1
    operations: dict[tuple[str, str], Operation] = {}
    tables: dict[tuple[str, str], Mapping[str, int]] = {}
    common = data.get("common", YamlMap())
    if _is_map(common, data, "common", problems):
        _read_role("common", common, operations, tables, problems)
    roles = data.get("roles")
    if roles is None:
        problems.append(Problem(data.where(), "missing 'roles:'"))
    elif _is_map(roles, data, "roles", problems):
        role_names = [r for r in OPERATIONS if r != "common"]
        _unknown_keys(roles, role_names, "role", problems)
        for role in role_names:
            if role in roles and _is_map(roles[role], roles, role, problems):
                _read_role(role, roles[role], operations, tables, problems)
    binary = _read_binary(data, problems, operations.get(("common", "byte_order")))
    if problems:
        raise ConfigError(problems)
    return Dialect(
        name=name,
        source=source,
        version=version,
        operations=operations,
        tables=tables,
        binary=binary,
    )


def _read_role(
    role: str, ops: YamlMap, operations: dict, tables: dict, problems: list[Problem]
) -> None:
    known = OPERATIONS[role]
    table_names = TABLES.get(role, ())
    _unknown_keys(ops, [*known, *table_names], f"{role} operation", problems)
    for name in table_names:
        if name in ops:
            table = _read_table(role, name, ops, problems)
            if table is not None:
                tables[(role, name)] = table
    for name, spec in known.items():
        if name in ops:
            op = _read_operation(role, name, spec, ops, problems)
            if op is not None:
                operations[(role, name)] = op


def _read_operation(
    role: str, name: str, spec: OpSpec, ops: YamlMap, problems: list[Problem]
) -> Operation | None:
    entry = ops[name]
    where = ops.where(name)
    if not isinstance(entry, YamlMap):
        problems.append(
            Problem(
                where,
                f"{role}.{name} must be a mapping such as {{write: TEMPLATE}} or {{query: TEMPLATE, returns: KIND}}",
            )
        )
        return None
    _unknown_keys(entry, _OP_KEYS, f"key of {role}.{name}", problems)
    want = "query" if spec.returns else "write"
    other = "write" if spec.returns else "query"
    if other in entry:
        problems.append(
            Problem(entry.where(other, of_key=True), f"{role}.{name} is a {want}, not a {other}")
        )
        return None
    template = entry.get(want)
    if not isinstance(template, str) or not template.strip():
        problems.append(
            Problem(
                entry.where(want) if want in entry else where,
                f"{role}.{name} needs a '{want}:' command template",
            )
        )
        return None
    returns = None
    if spec.returns:
        returns = entry.get("returns")
        if returns != spec.returns:
            loc = entry.where("returns") if "returns" in entry else where
            problems.append(
                Problem(
                    loc,
                    f"{role}.{name} must declare 'returns: {spec.returns}' (got {returns!r}; kinds: {', '.join(KINDS)})",
                )
            )
            return None
    elif "returns" in entry:
        problems.append(
            Problem(
                entry.where("returns", of_key=True),
                f"{role}.{name} is a write: 'returns:' does not apply",
            )
        )
    location = entry.where(want)
    if not _check_template(role, name, template, spec, location, problems):
        return None
    return Operation(role=role, name=name, template=template, returns=returns, location=location)


def _check_template(
    role: str, name: str, template: str, spec: OpSpec, where: Location, problems: list[Problem]
) -> bool:
    try:
        used = [f for _, f, _, _ in string.Formatter().parse(template) if f is not None]
    except ValueError as exc:
        problems.append(Problem(where, f"{role}.{name}: bad template {template!r}: {exc}"))
        return False
    for f in used:
        base = f.split(".")[0].split("[")[0]
        if base != f:  # {volts.real}, {volts[0]}: attribute and index lookups are not allowed
            problems.append(
                Problem(
                    where,
                    f"{role}.{name}: field {{{f}}} must be a plain name such as {{{base}}} "
                    f"(a format spec follows a colon: {{{base}:.9g}})",
                )
            )
            return False
        if base not in spec.fields:
            offer = ", ".join(spec.fields) or "no fields"
            problems.append(
                Problem(
                    where,
                    f"{role}.{name}: unknown field {{{f}}}{_hint(base, spec.fields)}; the driver supplies: {offer}",
                )
            )
            return False
    try:
        template.format(**{k: _SAMPLES[k] for k in spec.fields})
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as exc:
        problems.append(
            Problem(where, f"{role}.{name}: template {template!r} does not format: {exc}")
        )
        return False
    if any(c in template for c in "\r\n"):
        problems.append(Problem(where, f"{role}.{name}: a template may not contain a line break"))
        return False
    return True


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
                    data.where(key, of_key=True),
                    f"unknown {what} {key!r}{_hint(str(key), allowed)}",
                )
            )


def _hint(word: str, choices: Any) -> str:
    close = difflib.get_close_matches(word, [str(c) for c in choices], n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""
