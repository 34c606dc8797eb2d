"""YAML step lists -> model steps, with every problem located (see ``model`` for the step forms)."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from typing import Any

from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap, YamlSeq

from .checking import SEGMENT, check_identifier, check_keys, check_references, suggest
from .convert import ConversionError, convert_arg
from .kinds import KINDS, StepKind
from .model import ChannelLoop, Group, Include, Leaf, OutputLoop, Procedure, Step, Sweep
from .values import (
    Interp,
    ListOf,
    Literal,
    Series,
    Template,
    TemplateError,
    parse_expression_text,
    parse_value,
    references,
    resolve,
)

COMMON_KEYS = ("name", "when")
STRUCTURAL: dict[str, tuple[str, ...]] = {
    "group": ("do",),
    "sweep": ("do", "mode"),
    "for_channels": ("do",),
    "for_outputs": ("do",),
    "include": ("with",),
}
ALL_KINDS = (*KINDS, *STRUCTURAL)
MAX_NESTING = 16

IncludeLoader = Callable[[Any, Location], Procedure | None]


class StepParser:
    """Parses step lists of one file; ``load_include`` reads an included file (or returns None)."""

    def __init__(self, problems: list[Problem], load_include: IncludeLoader) -> None:
        self.problems = problems
        self.load_include = load_include

    def block(
        self, raw: Any, location: Location, scope: frozenset[str], depth: int = 0
    ) -> tuple[Step, ...]:
        """A list of steps."""
        if raw is None:
            return ()
        if not isinstance(raw, YamlSeq):
            self.problems.append(Problem(location, "expected a list of steps"))
            return ()
        if depth > MAX_NESTING:
            self.problems.append(
                Problem(location, f"steps nested deeper than {MAX_NESTING} levels")
            )
            return ()
        steps = [self.step(item, raw.where(i), scope, depth) for i, item in enumerate(raw)]
        return _number_segments([s for s in steps if s is not None])

    def step(self, raw: Any, location: Location, scope: frozenset[str], depth: int) -> Step | None:
        if not isinstance(raw, YamlMap) or not raw:
            self.problems.append(
                Problem(
                    location,
                    "a step is a mapping whose first key names its kind, e.g. '- wait: 1 s'",
                )
            )
            return None
        kind = next(iter(raw))
        if kind not in ALL_KINDS:
            later = next((k for k in raw if k in ALL_KINDS), None)
            if later is not None:
                message = (
                    f"the first key of a step must name its kind: put {later!r} before {kind!r}"
                )
            else:
                message = f"unknown step kind {kind!r}{suggest(kind, ALL_KINDS)}"
            self.problems.append(Problem(raw.where(kind, of_key=True), message))
            return None
        allowed = (kind, *COMMON_KEYS, *STRUCTURAL.get(kind, ()))
        check_keys(raw, allowed, self.problems, f"a {kind!r} step")
        common = self._common(raw, scope)
        if kind in KINDS:
            return self.leaf(KINDS[kind], raw, scope, common)
        handler = getattr(self, f"_{kind}")
        return handler(raw, scope, common, depth)

    def _common(self, raw: YamlMap, scope: frozenset[str]) -> dict[str, Any]:
        common: dict[str, Any] = {"location": raw.where(), "name": None, "when": None}
        if "name" in raw:
            name = raw["name"]
            if not isinstance(name, str | int) or not SEGMENT.match(str(name)):
                self.problems.append(
                    Problem(
                        raw.where("name"),
                        f"step name {name!r} must be letters, digits, '_', '.', '=', '+', '-' (no '/')",
                    )
                )
            else:
                common["name"] = str(name)
        if "when" in raw:
            when = raw["when"]
            text = "true" if when is True else "false" if when is False else when
            if not isinstance(text, str):
                self.problems.append(
                    Problem(
                        raw.where("when"),
                        "when: needs a condition such as 'channel < board.channels'",
                    )
                )
            else:
                common["when"] = parse_expression_text(text, raw.where("when"), self.problems)
                check_references(common["when"], scope, self.problems)
        return common

    def leaf(
        self, spec: StepKind, raw: YamlMap, scope: frozenset[str], common: dict[str, Any]
    ) -> Leaf:
        value = raw[spec.name]
        where = raw.where(spec.name)
        args: dict[str, Template] = {}
        if isinstance(value, YamlMap):
            check_keys(value, [a.name for a in spec.args], self.problems, f"{spec.name} arguments")
            for key, item in value.items():
                if spec.arg(key) is not None:
                    template = parse_value(item, value.where(key), self.problems)
                    if template is not None:
                        args[key] = template
        elif value is not None:
            required = [a for a in spec.args if a.required] or list(spec.args[:1])
            if len(required) != 1:
                names = ", ".join(a.name for a in spec.args)
                message = (
                    f"{spec.name} takes named arguments: {names}"
                    if spec.args
                    else f"{spec.name} takes no arguments"
                )
                self.problems.append(Problem(where, message))
            else:
                template = parse_value(value, where, self.problems)
                if template is not None:
                    args[required[0].name] = template
        for arg in spec.args:
            if arg.required and (
                value is None or (isinstance(value, YamlMap) and arg.name not in value)
            ):
                self.problems.append(
                    Problem(
                        where if value is not None else raw.where(spec.name, of_key=True),
                        f"{spec.name} needs argument {arg.name!r}",
                    )
                )
        for key, template in args.items():
            check_references(template, scope, self.problems)
            self._check_constant(spec, key, template)
        segment = common["name"] or spec.name.rsplit(".", 1)[-1]
        return Leaf(kind=spec.name, args=args, segment=segment, **common)

    def _check_constant(self, spec: StepKind, key: str, template: Template) -> None:
        """A value without expressions is converted now, so its mistakes are found at load."""
        if references(template) or not _constant(template):
            return
        arg = spec.arg(key)
        assert arg is not None
        try:
            convert_arg(resolve(template, {}), arg)
        except (ConversionError, TemplateError) as exc:
            self.problems.append(Problem(template.location, f"{spec.name}: {exc}"))

    def _group(
        self, raw: YamlMap, scope: frozenset[str], common: dict[str, Any], depth: int
    ) -> Group | None:
        name = raw["group"]
        if not isinstance(name, str | int) or not SEGMENT.match(str(name)):
            self.problems.append(
                Problem(raw.where("group"), "group: needs a name (its path segment)")
            )
            return None
        common["name"] = common["name"] or str(name)
        body = self._body(raw, scope, depth)
        return Group(body=body, **common)

    def _body(self, raw: YamlMap, scope: frozenset[str], depth: int) -> tuple[Step, ...]:
        if "do" not in raw:
            self.problems.append(
                Problem(raw.where(), f"a {next(iter(raw))!r} step needs 'do:' with its steps")
            )
            return ()
        return self.block(raw["do"], raw.where("do"), scope, depth + 1)

    def _sweep(
        self, raw: YamlMap, scope: frozenset[str], common: dict[str, Any], depth: int
    ) -> Sweep | None:
        spec = raw["sweep"]
        if not isinstance(spec, YamlMap) or not spec:
            self.problems.append(
                Problem(raw.where("sweep"), "sweep: needs variables, e.g. {amp: [10 mV, 20 mV]}")
            )
            return None
        variables: list[tuple[str, Template]] = []
        for var, values in spec.items():
            at = spec.where(var, of_key=True)
            if not check_identifier(var, at, self.problems, "sweep variable"):
                continue
            if var in scope:
                self.problems.append(
                    Problem(at, f"sweep variable {var!r} hides a name already defined")
                )
                continue
            template = parse_value(values, spec.where(var), self.problems, series=True)
            check_references(template, scope, self.problems)
            if template is not None:
                variables.append((var, template))
        mode = raw.get("mode", "product")
        if mode not in ("product", "zip"):
            self.problems.append(
                Problem(
                    raw.where("mode"),
                    f"mode must be 'product' or 'zip', not {mode!r}{suggest(mode, ('product', 'zip'))}",
                )
            )
            mode = "product"
        inner = scope | {v for v, _ in variables}
        body = self._body(raw, inner, depth)
        return Sweep(variables=tuple(variables), mode=mode, body=body, **common)

    def _loop_values(self, raw: YamlMap, key: str, scope: frozenset[str]) -> Template | None:
        value = raw[key]
        if value is None or value == "all":
            return None
        template = parse_value(value, raw.where(key), self.problems, series=True)
        check_references(template, scope, self.problems)
        if isinstance(template, Literal) and isinstance(template.value, str):
            self.problems.append(
                Problem(
                    raw.where(key),
                    f"{key}: needs 'all' or a list{suggest(template.value, ['all'])}",
                )
            )
        return template

    def _for_channels(
        self, raw: YamlMap, scope: frozenset[str], common: dict[str, Any], depth: int
    ) -> ChannelLoop:
        channels, body = self._loop(raw, "for_channels", "channel", scope, depth)
        return ChannelLoop(channels=channels, body=body, **common)

    def _for_outputs(
        self, raw: YamlMap, scope: frozenset[str], common: dict[str, Any], depth: int
    ) -> OutputLoop:
        outputs, body = self._loop(raw, "for_outputs", "output", scope, depth)
        return OutputLoop(outputs=outputs, body=body, **common)

    def _loop(
        self, raw: YamlMap, key: str, variable: str, scope: frozenset[str], depth: int
    ) -> tuple[Template | None, tuple[Step, ...]]:
        """The values and body of a ``for_channels`` / ``for_outputs`` loop binding ``variable``."""
        if variable in scope:
            self.problems.append(
                Problem(
                    raw.where(key, of_key=True),
                    f"{key} inside {key}: '{variable}' is already bound",
                )
            )
        values = self._loop_values(raw, key, scope)
        return values, self._body(raw, scope | {variable}, depth)

    def _include(
        self, raw: YamlMap, scope: frozenset[str], common: dict[str, Any], depth: int
    ) -> Include | None:
        target = raw["include"]
        if not isinstance(target, str) or not target.strip():
            self.problems.append(
                Problem(raw.where("include"), "include: needs the path of a procedure file")
            )
            return None
        arguments: dict[str, Template] = {}
        given = raw.get("with")
        if given is not None and not isinstance(given, YamlMap):
            self.problems.append(
                Problem(raw.where("with"), "with: needs a mapping of parameter: value")
            )
            given = None
        for key, value in (given or {}).items():
            template = parse_value(value, given.where(key), self.problems, series=True)
            check_references(template, scope, self.problems)
            if template is not None:
                arguments[str(key)] = template
        procedure = self.load_include(target, raw.where("include"))
        if procedure is None:
            return None
        known = [p.name for p in procedure.parameters]
        for key in arguments:
            if key not in known:
                self.problems.append(
                    Problem(
                        given.where(key, of_key=True)
                        if isinstance(given, YamlMap)
                        else raw.where(),
                        f"{target} has no parameter {key!r}{suggest(key, known)}",
                    )
                )
        common["name"] = common["name"] or procedure.name
        return Include(target=target, arguments=arguments, procedure=procedure, **common)


def _constant(template: Template) -> bool:
    if isinstance(template, Literal):
        return True
    if isinstance(template, ListOf):
        return all(_constant(t) for t in template.items)
    return not isinstance(template, Interp | Series)


def _number_segments(steps: list[Step]) -> tuple[Step, ...]:
    """Leaves left with the same default segment in one list get ``-2``, ``-3``, ... after the first."""
    seen: dict[str, int] = {}
    out: list[Step] = []
    for step in steps:
        if isinstance(step, Leaf) and step.name is None:
            count = seen.get(step.segment, 0) + 1
            seen[step.segment] = count
            if count > 1:
                step = dataclasses.replace(step, segment=f"{step.segment}-{count}")
        out.append(step)
    return tuple(out)
