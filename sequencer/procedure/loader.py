"""Procedure files -> :class:`~.model.Procedure`, every problem located (``file:line:column: message``).

Top-level keys of a procedure::

    name, version, description, board_type        metadata (name, version, board_type required)
    roles: [pulser, scope, ...]                    optional; inferred from the steps when omitted
    hazards: [bias]                                required when a step can make a voltage live
    parameters: {amp: 40 mV, amps: {linspace: [10 mV, 100 mV, 10]}, ...}
    defaults: {ramp_rate: 2 V/s}                   used by bias.ramp steps without a rate
    limits: PA8 | path.yaml | {file: PA8, set: [inline limits that override]}
    setup: [steps]   steps: [steps]   cleanup: [steps]   (cleanup always runs)

An included file has only ``name``, ``version``, ``description``, ``parameters`` and ``steps``.
Files are found relative to the including file; a limits file named by board type comes from
``procedures/limits/``.  The key of every file read is kept (``Procedure.source_files()``) so that the
exact text can be loaded again with :func:`load_procedure_text`.
"""

from __future__ import annotations

import dataclasses
import posixpath
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap, YamlSeq, load_yaml, read_bounded
from sequencer.errors import ProcedureError

from .boards import shipped_dir
from .checking import check_identifier, check_keys, check_references, require_keys, suggest
from .kinds import KINDS
from .limits import merge_limits, parse_limit_list, parse_limits_text
from .model import Leaf, Parameter, Procedure, leaves
from .plan_model import Limit
from .steps import StepParser
from .textrules import MAX_NAME, MAX_VERSION, text_problem
from .values import MAX_TEXT, Literal, Template, parse_value

TOP_KEYS = (
    "name",
    "version",
    "description",
    "board_type",
    "board_types",
    "roles",
    "hazards",
    "parameters",
    "defaults",
    "limits",
    "setup",
    "steps",
    "cleanup",
)
FRAGMENT_KEYS = ("name", "version", "description", "parameters", "steps")
REQUIRED = ("name", "version", "board_type", "steps")
DEFAULT_KEYS = ("ramp_rate",)
LIMITS_KEYS = ("file", "set")
HAZARDS = ("bias",)
ROLES = tuple(dict.fromkeys(k.role for k in KINDS.values() if k.role))
MAX_INCLUDE_DEPTH = 8
LIMITS_BY_NAME = "@limits/"
#: key -> (longest text the store keeps, free text with lines) -- sequencer/procedure/textrules.py
_TEXT_RULES = {
    "name": (MAX_NAME, False),
    "version": (MAX_VERSION, False),
    "board_type": (MAX_NAME, False),
    "description": (MAX_TEXT, True),
}


class _Reader:
    """Finds and reads the files a procedure names, from disk or from given texts."""

    def __init__(
        self, root_path: str, files: Mapping[str, str] | None, lab_dir: Path | None = None
    ) -> None:
        self.root_dir = posixpath.dirname(root_path.replace("\\", "/"))
        self.given = files
        self.lab_dir = lab_dir
        self.read: dict[str, str] = {}
        self.limits_keys: set[str] = set()

    def display(self, key: str) -> str:
        if key.startswith(LIMITS_BY_NAME):
            name = key[len(LIMITS_BY_NAME) :]
            own = None if self.lab_dir is None else self.lab_dir / "limits" / name
            return str(own if own is not None and own.is_file() else shipped_dir("limits") / name)
        return posixpath.normpath(posixpath.join(self.root_dir, key)) if self.root_dir else key

    def text(self, key: str) -> str:
        """Text of the file ``key``; :class:`OSError` when it cannot be had."""
        if self.given is not None:
            if key not in self.given:
                raise FileNotFoundError(
                    f"{key!r} is not among the files given with the procedure text"
                )
            text = self.given[key]
        else:
            try:
                text = read_bounded(self.display(key)).decode("utf-8")
            except UnicodeDecodeError as exc:
                raise OSError(f"not UTF-8 text ({exc.reason})") from None
        self.read[key] = text
        return text


def _key_for(target: str, including_key: str) -> str:
    return posixpath.normpath(
        posixpath.join(posixpath.dirname(including_key), target.replace("\\", "/"))
    )


class _Loader:
    def __init__(self, reader: _Reader, problems: list[Problem]) -> None:
        self.reader = reader
        self.problems = problems

    def procedure(
        self, data: Any, file: str, key: str, *, fragment: bool, stack: tuple[str, ...]
    ) -> Procedure:
        start = Location(file, 1, 1)
        if not isinstance(data, YamlMap):
            self.problems.append(
                Problem(start, "a procedure is a mapping with name, version, board_type and steps")
            )
            return Procedure(name="", version="", location=start)
        check_keys(
            data,
            FRAGMENT_KEYS if fragment else TOP_KEYS,
            self.problems,
            "an included procedure" if fragment else "a procedure",
        )
        require_keys(
            data, ("name", "steps") if fragment else REQUIRED, self.problems, "a procedure"
        )
        meta = {k: self._text(data, k) for k in ("name", "version", "description", "board_type")}
        parameters, scope = self._parameters(data)
        parser = StepParser(self.problems, lambda target, at: self.include(target, at, key, stack))
        blocks = {
            block: parser.block(data.get(block), data.where(block), scope)
            for block in ("setup", "steps", "cleanup")
            if not fragment or block == "steps"
        }
        return Procedure(
            **meta,
            parameters=parameters,
            **blocks,
            location=data.where(),
            board_type_location=data.where("board_type"),
            roles=self._names(data, "roles", ROLES),
            hazards=self._names(data, "hazards", HAZARDS),
            ramp_rate=self._defaults(data),
            limits=() if fragment else self._limits(data, key),
            board_types=self._board_types(data),
            limits_by_type=self._limits_by_type(data),
            limits_inline=() if fragment else self._limits_inline(data),
        )

    @staticmethod
    def _limits_inline(data: YamlMap) -> tuple[Limit, ...]:
        """The inline ``set:`` of ``limits:`` (problems were reported by ``_limits``)."""
        raw = data.get("limits")
        if not isinstance(raw, YamlMap) or "set" not in raw:
            return ()
        return tuple(parse_limit_list(raw["set"], raw.where("set"), []))

    def _board_types(self, data: YamlMap) -> tuple[str, ...]:
        """``board_types:``, the board types a procedure accepts (empty: any)."""
        raw = data.get("board_types")
        if raw is None:
            return ()
        if not isinstance(raw, YamlSeq) or not all(isinstance(x, str) and x for x in raw):
            self.problems.append(
                Problem(data.where("board_types"), "board_types: needs a list of names, e.g. [PA8]")
            )
            return ()
        return tuple(dict.fromkeys(raw))

    @staticmethod
    def _limits_by_type(data: YamlMap) -> str:
        """The board type the limits were named by (``limits: PA8`` or ``{file: PA8}``), else "".

        Only a name the procedure declares as a board type (``board_type``, ``board_types``) is
        one: a set of its own beside the type's (``limits: PA8-shaper``) stays the procedure's
        whatever the run's type, instead of being swapped for the type's general set."""
        raw = data.get("limits")
        ref = raw.get("file") if isinstance(raw, YamlMap) else raw
        types = data.get("board_types")
        named = (data.get("board_type"), *(types if isinstance(types, list) else ()))
        declared = {name for name in named if isinstance(name, str)}  # a malformed entry is the schema's to report
        if (
            isinstance(ref, str)
            and not ref.endswith((".yaml", ".yml"))
            and "/" not in ref
            and ref in declared
        ):
            return ref
        return ""

    def include(
        self, target: str, at: Location, including_key: str, stack: tuple[str, ...]
    ) -> Procedure | None:
        key = _key_for(target, including_key)
        if key in stack:
            chain = " -> ".join((*stack, key))
            self.problems.append(Problem(at, f"include cycle: {chain}"))
            return None
        if len(stack) > MAX_INCLUDE_DEPTH:
            self.problems.append(Problem(at, f"includes nested deeper than {MAX_INCLUDE_DEPTH}"))
            return None
        file = self.reader.display(key)
        try:
            text = self.reader.text(key)
            data = load_yaml(text, file, error=ProcedureError)
        except OSError as exc:
            self.problems.append(Problem(at, f"cannot read {file}: {exc.strerror or exc}"))
            return None
        except ProcedureError as exc:
            self.problems.extend(exc.problems)
            return None
        return self.procedure(data, file, key, fragment=True, stack=(*stack, key))

    def _text(self, data: YamlMap, key: str) -> str:
        value = data.get(key, "")
        if key == "version" and isinstance(value, int | float) and not isinstance(value, bool):
            return str(value)
        if not isinstance(value, str):
            self.problems.append(Problem(data.where(key), f"{key}: needs a text"))
            return ""
        if key in ("name", "version", "board_type") and key in data and not value.strip():
            self.problems.append(Problem(data.where(key), f"{key}: must not be empty"))
        limit, lines = _TEXT_RULES[key]
        problem = text_problem(value, key, max_length=limit, lines=lines)
        if problem is not None:
            self.problems.append(Problem(data.where(key), problem))
            return ""
        return value

    def _names(self, data: YamlMap, key: str, allowed: tuple[str, ...]) -> tuple[str, ...]:
        raw = data.get(key)
        if raw is None:
            return ()
        if not isinstance(raw, YamlSeq):
            self.problems.append(
                Problem(data.where(key), f"{key}: needs a list, e.g. [{allowed[0]}]")
            )
            return ()
        names: list[str] = []
        for i, item in enumerate(raw):
            if item not in allowed:
                self.problems.append(
                    Problem(
                        raw.where(i),
                        f"unknown {key[:-1]} {item!r}{suggest(item, allowed)} (known: {', '.join(allowed)})",
                    )
                )
            elif item not in names:
                names.append(item)
        return tuple(names)

    def _parameters(self, data: YamlMap) -> tuple[tuple[Parameter, ...], frozenset[str]]:
        scope = {"board"}
        raw = data.get("parameters")
        if raw is None:
            return (), frozenset(scope)
        if not isinstance(raw, YamlMap):
            self.problems.append(
                Problem(data.where("parameters"), "parameters: needs a mapping of name: value")
            )
            return (), frozenset(scope)
        found: list[Parameter] = []
        for name, value in raw.items():
            if not check_identifier(name, raw.where(name, of_key=True), self.problems, "parameter"):
                continue
            template = parse_value(value, raw.where(name), self.problems, series=True)
            check_references(template, frozenset(scope), self.problems)
            scope.add(name)
            if template is not None:
                found.append(Parameter(name, template, raw.where(name, of_key=True)))
        return tuple(found), frozenset(scope)

    def _defaults(self, data: YamlMap) -> Template | None:
        raw = data.get("defaults")
        if raw is None:
            return None
        if not isinstance(raw, YamlMap):
            self.problems.append(
                Problem(
                    data.where("defaults"), "defaults: needs a mapping such as {ramp_rate: 2 V/s}"
                )
            )
            return None
        check_keys(raw, DEFAULT_KEYS, self.problems, "defaults")
        if "ramp_rate" not in raw:
            return None
        template = parse_value(raw["ramp_rate"], raw.where("ramp_rate"), self.problems)
        check_references(template, frozenset({"board"}), self.problems)
        return template

    def _limits(self, data: YamlMap, key: str) -> tuple[Limit, ...]:
        raw = data.get("limits")
        if raw is None:
            return ()
        file_ref, inline, at = raw, None, data.where("limits")
        if isinstance(raw, YamlMap):
            check_keys(raw, LIMITS_KEYS, self.problems, "limits")
            file_ref, at = raw.get("file"), raw.where("file")
            if "set" in raw:
                inline = parse_limit_list(raw["set"], raw.where("set"), self.problems)
        base: tuple[Limit, ...] = ()
        if file_ref is not None:
            base = self._limits_file(file_ref, at, key)
        return merge_limits(base, inline or ())

    def _limits_file(self, ref: Any, at: Location, including_key: str) -> tuple[Limit, ...]:
        if not isinstance(ref, str) or not ref.strip():
            self.problems.append(
                Problem(at, "limits: needs a board type name (PA8), a file path or {file:, set:}")
            )
            return ()
        by_name = not ref.endswith((".yaml", ".yml")) and "/" not in ref
        key = f"{LIMITS_BY_NAME}{ref}.yaml" if by_name else _key_for(ref, including_key)
        file = self.reader.display(key)
        self.reader.limits_keys.add(key)
        try:
            return parse_limits_text(self.reader.text(key), file)
        except OSError as exc:
            hint = (
                " (a lab's own limit sets: a folder with limits/, named by 'lab: DIR' in the bench "
                "file or BENCHWRIGHT_LAB)" if by_name and self.reader.lab_dir is None else ""
            )
            self.problems.append(
                Problem(at, f"cannot read limits file {file}: {exc.strerror or exc}{hint}")
            )
        except ProcedureError as exc:
            self.problems.extend(exc.problems)
        return ()


def _check_root(procedure: Procedure, problems: list[Problem]) -> Procedure:
    """Hazards declared, roles declared, a ramp rate for every bias.ramp."""
    all_leaves: list[Leaf] = leaves(procedure.setup + procedure.steps + procedure.cleanup)
    for leaf in all_leaves:
        spec = KINDS[leaf.kind]
        on = leaf.args.get("on")
        switching_off = leaf.kind == "bias.output" and isinstance(on, Literal) and on.value is False
        if spec.hazard and not switching_off and "bias" not in procedure.hazards:
            problems.append(
                Problem(
                    leaf.location, f"{leaf.kind} can make a voltage live: declare 'hazards: [bias]'"
                )
            )
        if procedure.roles and spec.role and spec.role not in procedure.roles:
            problems.append(
                Problem(
                    leaf.location, f"{leaf.kind} uses the {spec.role} role, not declared in roles"
                )
            )
        if leaf.kind == "bias.ramp" and "rate" not in leaf.args and procedure.ramp_rate is None:
            problems.append(
                Problem(
                    leaf.location,
                    "bias.ramp needs a rate: give 'rate:' or 'defaults: {ramp_rate: ...}'",
                )
            )
    if procedure.roles:
        return procedure
    used = {KINDS[leaf.kind].role for leaf in all_leaves}
    return dataclasses.replace(procedure, roles=tuple(r for r in ROLES if r in used))


def load_procedure_text(
    text: str | bytes,
    path: str | Path,
    files: Mapping[str, str] | None = None,
    *,
    lab_dir: Path | None = None,
) -> Procedure:
    """Load a procedure from its text; ``path`` names it in messages and anchors relative includes.

    ``files`` (relative path -> text, as given by :meth:`Procedure.source_files`) supplies every included
    file and the limits file, so that a stored procedure runs again exactly; without it they are read
    from disk.  ``lab_dir``: a lab's own folder (``board_choice.LabFiles``); a limit set named by
    board type (``limits: PA4L``) is read from ``<lab_dir>/limits/`` before the shipped ones.
    """
    path = str(path)
    data = load_yaml(text, path, error=ProcedureError)
    text = text.decode("utf-8") if isinstance(text, bytes) else text
    problems: list[Problem] = []
    reader = _Reader(path, files, lab_dir)
    key = posixpath.basename(path.replace("\\", "/")) or "procedure.yaml"
    procedure = _Loader(reader, problems).procedure(data, path, key, fragment=False, stack=(key,))
    procedure = _check_root(procedure, problems)
    if problems:
        raise ProcedureError(sorted(dict.fromkeys(problems), key=_order))
    return dataclasses.replace(
        procedure,
        source_text=text,
        source_path=path,
        files=dict(reader.read),
        limits_files=tuple(sorted(reader.limits_keys & set(reader.read))),
    )


def load_procedure(path: str | Path, *, lab_dir: Path | None = None) -> Procedure:
    """Load and validate the procedure file at ``path`` (``lab_dir``: as :func:`load_procedure_text`)."""
    try:
        raw = read_bounded(path)
    except OSError as exc:
        raise ProcedureError(
            [Problem(Location(str(path), 1, 1), f"cannot read procedure: {exc.strerror}")]
        ) from None
    return load_procedure_text(raw, path, lab_dir=lab_dir)


def _order(problem: Problem) -> tuple[str, int, int]:
    loc = problem.location
    return (loc.file, loc.line, loc.column)
