"""Reading one dialect operation: its steps, templates, reply rule, value maps, timeout, absence.

An operation is written in one of these forms (format 2; format 1 knows only the first two)::

    set_output: {write: "OUTPut {state}", values: {state: {true: "1", false: "0"}}}
    measure_voltage: {query: "READ?", reply: {field: volts, fields: [volts, amps, ohms]}}
    set_average_count:
      sequence:
        - {write: "ACQuire:TYPE NORMal", when: "count == 1"}
        - {write: "ACQuire:TYPE AVERage;:ACQuire:COUNt {count}", when: "count > 1"}
    acquire:
      sequence:
        - {write: "SINGle"}
        - {poll: "ACQuire:STATe?", until: "value == 0", timeout_ms: 20000, every_ms: 50}
    set_ramp_rate: {absent: "no slew command: the driver ramps in software"}

Problems are appended as located :class:`Problem` values; nothing is raised here.
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from drivers.errors import Location, Problem
from drivers.scpi.replies import ReplyRule
from drivers.scpi.templates import (
    Expression,
    ExpressionError,
    Template,
    compile_expression,
    compile_template,
)
from drivers.yamlsafe import YamlMap, YamlSeq

#: Bounds on what a dialect may ask the driver to wait for (seconds / milliseconds).
MAX_WAIT_S = 60.0
MAX_TIMEOUT_MS = 600_000
OP_KEYS_1 = ("write", "query", "returns")
OP_KEYS_2 = (
    "write", "query", "returns", "sequence", "reply", "values", "timeout_ms", "check_errors",
    "absent",
)  # fmt: skip
STEP_KEYS = ("write", "query", "wait", "poll", "until", "every_ms", "timeout_ms", "when", "reply")
REPLY_KEYS = ("header", "pattern", "separator", "field", "fields", "bit", "words", "unit")

# fmt: off
SAMPLES: dict[str, Any] = {
    "volts": 1.25, "seconds": 1e-6, "hertz": 1e3, "amps": 1e-6, "volts_per_s": 5.0,
    "input": 1, "channel": 3, "count": 10, "output_index": 2,
    "state": True, "source": "EXTernal", "kind": "INTeger,16", "channels": "1203,1204",
    "start": 1, "stop": 1000, "offset": 0, "value": 1.0, "shape": "SINusoid",
}
# fmt: on
_LOOKUP = re.compile(r"^\s*([A-Za-z_]\w*)[.\[]")


@dataclass(frozen=True, kw_only=True)
class Step:
    """One step of an operation: ``write``, ``query``, ``wait`` or ``poll``."""

    action: str
    template: Template | None = None
    seconds: float = 0.0
    until: Expression | None = None
    every_s: float = 0.05
    timeout_ms: int | None = None
    when: Expression | None = None
    reply: ReplyRule | None = None  # None: the operation's rule
    location: Location


@dataclass(frozen=True, kw_only=True)
class Operation:
    role: str
    name: str
    returns: str | None  # None = a write
    location: Location
    steps: tuple[Step, ...] = ()
    reply: ReplyRule = field(default_factory=ReplyRule)
    values: Mapping[str, Mapping[Any, str]] = field(default_factory=dict)
    timeout_ms: int | None = None
    check_errors: bool | None = None  # None: the dialect's default
    absent: str = ""  # why the instrument cannot do it (declared, never faked)

    @property
    def is_query(self) -> bool:
        return self.returns is not None

    @property
    def single(self) -> Step | None:
        """The one write or query of a plain operation (``None`` for sequences and absences)."""
        if len(self.steps) == 1 and self.steps[0].action in ("write", "query"):
            return self.steps[0]
        return None

    @property
    def template(self) -> str:
        """The command template of a plain operation ('' for sequences)."""
        step = self.single
        return step.template.text if step and step.template else ""


@dataclass
class Reader:
    """Reads the operations of one role; ``names`` are the fields and settings templates may use."""

    role: str
    format: int
    problems: list[Problem]
    role_values: Mapping[str, Mapping[Any, str]] = field(default_factory=dict)

    def operation(
        self, name: str, returns: str | None, names: set[str], ops: YamlMap
    ) -> Operation | None:
        entry, where = ops[name], ops.where(name)
        label = f"{self.role}.{name}"
        if entry == "absent" and self.format >= 2:
            return Operation(role=self.role, name=name, returns=returns, location=where,
                             absent="declared absent")  # fmt: skip
        if not isinstance(entry, YamlMap):
            self.add(where, f"{label} must be a mapping such as {{write: TEMPLATE}} or "
                            "{query: TEMPLATE, returns: KIND}")  # fmt: skip
            return None
        self.unknown_keys(entry, OP_KEYS_2 if self.format >= 2 else OP_KEYS_1, f"key of {label}")
        if "absent" in entry:
            reason = entry["absent"]
            if not isinstance(reason, str) or not reason.strip():
                self.add(entry.where("absent"), f"{label}: 'absent:' gives the reason, as text")
            return Operation(role=self.role, name=name, returns=returns,
                             location=entry.where("absent", of_key=True), absent=str(reason))  # fmt: skip
        if not self.kind_ok(entry, label, returns, where):
            return None
        values = {**self.role_values, **self.value_maps(entry, label, names)}
        if "sequence" in entry:
            steps = self.sequence(entry, label, names)
        else:
            want = "query" if returns else "write"
            step = self.step(entry, label, names, only=want)
            steps = (step,) if step else ()
        if not steps:
            return None
        return Operation(
            role=self.role, name=name, returns=returns, location=steps[0].location,
            steps=steps, reply=self.reply(entry, label), values=values,
            timeout_ms=self.timeout(entry, label), check_errors=self.flag(entry, "check_errors"),
        )  # fmt: skip

    def kind_ok(self, entry: YamlMap, label: str, returns: str | None, where: Location) -> bool:
        want, other = ("query", "write") if returns else ("write", "query")
        if other in entry and "sequence" not in entry:
            self.add(entry.where(other, of_key=True), f"{label} is a {want}, not a {other}")
            return False
        if returns is None and "returns" in entry:
            self.add(entry.where("returns", of_key=True),
                     f"{label} is a write: 'returns:' does not apply")  # fmt: skip
            return False
        if returns and (self.format < 2 or "returns" in entry) and entry.get("returns") != returns:
            loc = entry.where("returns") if "returns" in entry else where
            got = entry.get("returns")
            self.add(loc, f"{label} must declare 'returns: {returns}' (got {got!r}; kinds: "
                          "float, int, bool, str, csv, block)")  # fmt: skip
            return False
        if "sequence" not in entry and want not in entry:
            self.add(where, f"{label} needs a '{want}:' command template")
            return False
        return True

    def sequence(self, entry: YamlMap, label: str, names: set[str]) -> tuple[Step, ...]:
        items = entry["sequence"]
        if not isinstance(items, YamlSeq) or not items:
            self.add(entry.where("sequence"), f"{label}: 'sequence:' is a list of steps")
            return ()
        steps = []
        for index, item in enumerate(items):
            if not isinstance(item, YamlMap):
                self.add(
                    items.where(index), f"{label}: each step is a mapping such as {{write: ...}}"
                )
                continue
            step = self.step(item, f"{label} step {index + 1}", names, only=None)
            if step is not None:
                steps.append(step)
        return tuple(steps) if len(steps) == len(items) else ()

    def step(self, item: YamlMap, label: str, names: set[str], *, only: str | None) -> Step | None:
        if only is None:
            self.unknown_keys(item, STEP_KEYS, f"key of {label}")
        actions = [a for a in ("write", "query", "wait", "poll") if a in item]
        if only is not None:
            actions = [only]
        if len(actions) != 1:
            self.add(item.where(), f"{label}: one of write, query, wait or poll")
            return None
        action = actions[0]
        where = item.where(action)
        when = self.expression(item, "when", label, names) if "when" in item else None
        if action == "wait":
            seconds = item["wait"]
            if not _number(seconds) or not 0 <= seconds <= MAX_WAIT_S:
                self.add(where, f"{label}: wait is in seconds, 0..{MAX_WAIT_S:g}")
                return None
            return Step(action="wait", seconds=float(seconds), when=when, location=where)
        template = self.template(item, action, label, names)
        if template is None:
            return None
        until = None
        if action == "poll":
            if "until" not in item:
                self.add(where, f"{label}: a poll needs 'until:' (a condition over value)")
                return None
            until = self.expression(item, "until", label, names | {"value"})
            if until is None:
                return None
        every = item.get("every_ms", 50)
        if not _number(every) or not 1 <= every <= 60_000:
            self.add(item.where("every_ms"), f"{label}: every_ms must be 1..60000")
        if only is not None:  # a plain operation: its reply and timeout belong to the operation
            return Step(action=action, template=template, when=when, location=where)
        return Step(action=action, template=template, until=until, every_s=float(every) / 1000,
                    timeout_ms=self.timeout(item, label), when=when,
                    reply=self.reply(item, label) if "reply" in item else None,
                    location=where)  # fmt: skip

    def template(self, item: YamlMap, key: str, label: str, names: set[str]) -> Template | None:
        text, where = item.get(key), item.where(key)
        if not isinstance(text, str) or not text.strip():
            self.add(where, f"{label} needs a '{key}:' command template")
            return None
        return check_template(text, label, names, where, self.problems)

    def expression(self, item: YamlMap, key: str, label: str, names: set[str]) -> Expression | None:
        text = item[key]
        if not isinstance(text, str | int | float) or isinstance(text, bool):
            self.add(item.where(key), f"{label}: '{key}:' is an expression such as \"count > 1\"")
            return None
        try:
            return compile_expression(str(text), names)
        except ExpressionError as exc:
            self.add(item.where(key), f"{label}: {key}: {exc}")
            return None

    def reply(self, entry: YamlMap, label: str) -> ReplyRule:
        return read_reply_rule(entry, label, self.problems)

    def value_maps(self, entry: YamlMap, label: str, names: set[str]) -> dict:
        return read_value_maps(entry, label, names, self.problems)

    def timeout(self, entry: YamlMap, label: str) -> int | None:
        if "timeout_ms" not in entry:
            return None
        value = entry["timeout_ms"]
        if not _number(value) or not 1 <= value <= MAX_TIMEOUT_MS:
            self.add(entry.where("timeout_ms"), f"{label}: timeout_ms must be 1..{MAX_TIMEOUT_MS}")
            return None
        return int(value)

    def flag(self, entry: YamlMap, key: str) -> bool | None:
        if key not in entry:
            return None
        if not isinstance(entry[key], bool):
            self.add(entry.where(key), f"'{key}:' must be true or false")
            return None
        return entry[key]

    def unknown_keys(self, data: YamlMap, allowed: Any, what: str) -> None:
        unknown_keys(data, allowed, what, self.problems)

    def add(self, where: Location, message: str) -> None:
        self.problems.append(Problem(where, message))


def check_template(
    text: str, label: str, names: set[str], where: Location, problems: list[Problem]
) -> Template | None:
    """A compiled template, or ``None`` with the problem added (messages name the fields)."""
    import string

    try:
        parsed = [(f, s or "") for _, f, s, _ in string.Formatter().parse(text) if f is not None]
    except ValueError as exc:
        problems.append(Problem(where, f"{label}: bad template {text!r}: {exc}"))
        return None
    fields = [f for f, _ in parsed]
    for f, spec in parsed:
        too_wide = _spec_beyond_bounds(spec)
        if too_wide:  # checked before the sample render below: {volts:>9999999999} is 10 GB
            problems.append(Problem(where, f"{label}: field {{{f}:{spec}}}: {too_wide}"))
            return None
    for f in fields:
        lookup = _LOOKUP.match(f)
        if lookup:  # {volts.real}, {volts[0]}, {volts.9g}: a lookup or a lost colon
            base = lookup.group(1)
            problems.append(Problem(where, f"{label}: field {{{f}}} must be a plain name such as "
                                           f"{{{base}}} (a format spec follows a colon: "
                                           f"{{{base}:.9g}})"))  # fmt: skip
            return None
        if f.strip().isidentifier() and f.strip() not in names:
            offer = ", ".join(sorted(names)) or "no fields"
            problems.append(Problem(where, f"{label}: unknown field {{{f}}}"
                                           f"{hint(f.strip(), names)}; the driver supplies: {offer}"))  # fmt: skip
            return None
    try:
        template = compile_template(text, names)
    except ExpressionError as exc:
        problems.append(Problem(where, f"{label}: {exc}"))
        return None
    try:
        template.render({n: SAMPLES.get(n, 1.0) for n in template.names})
    except ExpressionError as exc:
        problems.append(Problem(where, f"{label}: template {text!r} does not format: {exc}"))
        return None
    return template


#: Largest field width and precision a template may ask for: an SCPI number needs a few tens of
#: characters; a float has 17 significant digits (IEEE 754 binary64).
MAX_FIELD_WIDTH = 64
MAX_FIELD_PRECISION = 32
_SPEC_NUMBERS = re.compile(r"(?:.?[<>=^])?[-+ ]?z?#?0?(?P<width>\d*)[,_]?(?:\.(?P<precision>\d*))?")


def _spec_beyond_bounds(spec: str) -> str:
    """Why a format spec's width or precision is too large, or ``""`` (also for specs that
    ``format`` will refuse itself: the sample render reports those)."""
    found = _SPEC_NUMBERS.match(spec)
    if found is None:
        return ""
    width, precision = found["width"], found["precision"]
    if width and (len(width) > 4 or int(width) > MAX_FIELD_WIDTH):
        return f"width {width} is above {MAX_FIELD_WIDTH} characters"
    if precision and (len(precision) > 4 or int(precision) > MAX_FIELD_PRECISION):
        return f"precision {precision} is above {MAX_FIELD_PRECISION} digits"
    return ""


def read_reply_rule(entry: YamlMap, label: str, problems: list[Problem]) -> ReplyRule:
    if "reply" not in entry:
        return ReplyRule()
    rule = entry["reply"]
    if not isinstance(rule, YamlMap):
        problems.append(Problem(entry.where("reply"), f"{label}: 'reply:' must be a mapping"))
        return ReplyRule()
    unknown_keys(rule, REPLY_KEYS, f"reply key of {label}", problems)
    out: dict[str, Any] = {}
    checks = {
        "header": lambda v: isinstance(v, bool),
        "pattern": lambda v: isinstance(v, str) and _regex_ok(v),
        "separator": lambda v: v in (",", ";"),
        "bit": lambda v: _number(v) and float(v).is_integer() and 0 <= v <= 63,
        "unit": lambda v: isinstance(v, str) and v.isalpha(),
        "fields": lambda v: isinstance(v, YamlSeq) and all(isinstance(x, str) for x in v),
        "words": lambda v: isinstance(v, YamlMap) and len(v) > 0,
        "field": lambda v: (
            (isinstance(v, int) and not isinstance(v, bool) and v >= 1) or isinstance(v, str)
        ),
    }
    hints = {
        "header": "true or false", "pattern": "a regular expression with one (group)",
        "separator": "',' or ';'", "bit": "a bit number 0..63", "unit": "a unit such as V or A",
        "fields": "a list of names", "words": "a mapping such as {TRIP: true, NORM: false}",
        "field": "a 1-based position or a name from 'fields:'",
    }  # fmt: skip
    for key, ok in checks.items():
        if key in rule:
            if ok(rule[key]):
                out[key] = rule[key]
            else:
                problems.append(
                    Problem(rule.where(key), f"{label}: reply {key} must be {hints[key]}")
                )
    if "fields" in out:
        out["fields"] = tuple(out["fields"])
    if "words" in out:
        out["words"] = {("ON" if k is True else "OFF" if k is False else str(k)): v
                        for k, v in out["words"].items()}  # fmt: skip
    if isinstance(out.get("field"), str) and out["field"] not in out.get("fields", ()):
        problems.append(Problem(rule.where("field"),
                                f"{label}: reply field {out['field']!r} is not in 'fields:'"))  # fmt: skip
        out.pop("field")
    if "bit" in out:
        out["bit"] = int(out["bit"])
    return ReplyRule(**out)


def read_value_maps(
    entry: YamlMap, label: str, names: set[str], problems: list[Problem]
) -> dict[str, Mapping[Any, str]]:
    """``values: {state: {true: "1", false: "0"}, source: {EXTernal: EXT}}``."""
    maps = entry.get("values")
    if maps is None:
        return {}
    if not isinstance(maps, YamlMap):
        problems.append(Problem(entry.where("values"), f"{label}: 'values:' must be a mapping"))
        return {}
    out: dict[str, Mapping[Any, str]] = {}
    for name, table in maps.items():
        if name not in names:
            problems.append(Problem(maps.where(name, of_key=True),
                                    f"{label}: values for unknown field {name!r}"
                                    f"{hint(str(name), names)}"))  # fmt: skip
        elif not isinstance(table, YamlMap) or not table:
            problems.append(Problem(maps.where(name), f"{label}: values.{name} maps each value "
                                                      "to its wire text"))  # fmt: skip
        elif any(isinstance(v, YamlMap | YamlSeq) or v is None for v in table.values()):
            problems.append(Problem(maps.where(name), f"{label}: values.{name}: wire texts are "
                                                      "words or numbers"))  # fmt: skip
        else:
            out[str(name)] = {k: str(v) for k, v in table.items()}
    return out


def map_value(name: str, value: Any, table: Mapping[Any, str] | None) -> Any:
    """The wire text of ``value`` by its value map (exact, then case-insensitive); no map: as is."""
    if table is None:
        return value
    if isinstance(value, bool):
        if value in table and any(isinstance(k, bool) for k in table):
            return table[value]
        value = "ON" if value else "OFF"
    for key, wire in table.items():
        if not isinstance(key, bool) and str(key) == str(value):
            return wire
    for key, wire in table.items():
        if not isinstance(key, bool) and str(key).upper() == str(value).upper():
            return wire
    shown = ", ".join(str(k) for k in table)
    raise ValueError(f"{name}={value!r} is none of the values the dialect maps ({shown})")


def unknown_keys(data: YamlMap, allowed: Any, what: str, problems: list[Problem]) -> None:
    allowed = list(allowed)
    for key in data:
        if key not in allowed:
            problems.append(Problem(data.where(key, of_key=True),
                                    f"unknown {what} {key!r}{hint(str(key), allowed)}"))  # fmt: skip


def hint(word: str, choices: Any) -> str:
    close = difflib.get_close_matches(word, [str(c) for c in choices], n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _regex_ok(text: str) -> bool:
    try:
        return re.compile(text).groups <= 1 and len(text) <= 200
    except re.error:
        return False
