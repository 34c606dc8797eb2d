"""JSON Schema (draft 2020-12) of the procedure format, generated from ``kinds.KINDS`` so it never drifts.

Editors read it through the modeline at the top of each procedure
(``# yaml-language-server: $schema=../procedure.schema.json``).  The schema checks structure and key
names; units, expressions, names in scope and limits are checked by the loader.
"""

from __future__ import annotations

import json
from typing import Any

from .kinds import KINDS, Arg, StepKind
from .limits import LIMIT_KEYS, QUANTITY_UNITS
from .loader import DEFAULT_KEYS, FRAGMENT_KEYS, HAZARDS, ROLES
from .steps import STRUCTURAL

SCHEMA_ID = "urn:benchwright:procedure-schema"
FRAGMENT_SCHEMA_ID = "urn:benchwright:fragment-schema"
#: The schema files shipped in procedures/, named by the modeline of each file there.
SCHEMA_FILE = "procedure.schema.json"
FRAGMENT_SCHEMA_FILE = "fragment.schema.json"
_STRING = {"type": "string"}
_EXPR = {"type": "string", "description": "an expression in braces, e.g. '{channel + 1}'"}
_UNIT_DIMS = (
    "voltage",
    "bias_voltage",
    "time",
    "duration",
    "frequency",
    "slew",
    "current",
    "percent",
)


def _arg_schema(arg: Arg) -> dict[str, Any]:
    dim = arg.dimension
    if dim in _UNIT_DIMS:
        # a physical value carries its unit ("20 ms"); a bare number is refused, except 0
        schema: dict[str, Any] = {"anyOf": [{"const": 0}, _STRING]}
    elif dim == "int":
        schema = {"anyOf": [{"type": "integer"}, _EXPR]}
    elif dim == "float":
        schema = {"anyOf": [{"type": "number"}, _EXPR]}
    elif dim == "bool":
        schema = {"anyOf": [{"type": "boolean"}, _EXPR]}
    elif dim == "str":
        schema = {"anyOf": [_STRING, {"type": "integer"}]}
    elif dim == "names":
        schema = {"anyOf": [_STRING, {"type": "array", "items": _STRING}]}
    elif dim == "ints":
        item = {"anyOf": [{"type": "integer"}, _EXPR]}
        schema = {"anyOf": [item, {"type": "array", "items": item}]}
    else:
        schema = dict(_STRING)
    if arg.choices:
        schema = {"anyOf": [{"enum": list(arg.choices)}, {"type": "string", "pattern": "\\{"}]}
    schema["description"] = arg.doc or f"{arg.name} ({dim})"
    return schema


def _kind_args(kind: StepKind) -> dict[str, Any]:
    required = [a.name for a in kind.args if a.required]
    mapping = {
        "type": "object",
        "properties": {a.name: _arg_schema(a) for a in kind.args},
        "required": required,
        "additionalProperties": False,
    }
    options: list[dict[str, Any]] = [mapping]
    if not required:
        options.append({"type": "null"})
    one = required or [a.name for a in kind.args[:1]]
    if len(one) == 1:
        options.append(_arg_schema(next(a for a in kind.args if a.name == one[0])))
    return {"anyOf": options, "description": kind.doc}


def _step(
    key: str, value: dict[str, Any], extra: dict[str, Any], required: tuple[str, ...] = ()
) -> dict[str, Any]:
    properties = {
        key: value,
        "name": {"type": ["string", "integer"]},
        "when": {"type": ["string", "boolean"]},
    }
    properties.update(extra)
    return {
        "type": "object",
        "required": [key, *required],
        "properties": properties,
        "additionalProperties": False,
    }


def procedure_schema() -> dict[str, Any]:
    """The JSON Schema of a procedure file."""
    steps_ref = {"$ref": "#/$defs/steps"}
    loop = {"anyOf": [{"const": "all"}, {"type": "null"}, {"$ref": "#/$defs/values"}]}
    structural = {
        "group": _step("group", {"type": ["string", "integer"]}, {"do": steps_ref}, ("do",)),
        "sweep": _step(
            "sweep",
            {
                "type": "object",
                "additionalProperties": {"$ref": "#/$defs/values"},
                "minProperties": 1,
            },
            {"do": steps_ref, "mode": {"enum": ["product", "zip"]}},
            ("do",),
        ),
        "for_channels": _step("for_channels", loop, {"do": steps_ref}, ("do",)),
        "for_outputs": _step("for_outputs", loop, {"do": steps_ref}, ("do",)),
        "include": _step(
            "include",
            _STRING,
            {"with": {"type": "object", "additionalProperties": {"$ref": "#/$defs/values"}}},
        ),
    }
    assert set(structural) == set(STRUCTURAL)
    leaf_steps = [_step(name, _kind_args(kind), {}) for name, kind in KINDS.items()]
    scalar = {"type": ["number", "string", "boolean"]}
    series = {
        "type": "object",
        "minProperties": 1,
        "maxProperties": 1,
        "additionalProperties": False,
        "properties": {
            k: {"type": "array", "minItems": 3, "maxItems": 3, "items": scalar}
            for k in ("linspace", "range")
        },
    }
    limit = {
        "type": "object",
        "required": ["quantity", "unit"],
        "additionalProperties": False,
        "properties": {
            "quantity": {"enum": list(QUANTITY_UNITS)},
            "output": _STRING,
            "low": {"type": ["number", "null"]},
            "high": {"type": ["number", "null"]},
            "unit": {"enum": sorted(set(QUANTITY_UNITS.values()))},
            "reason": _STRING,
        },
    }
    assert set(limit["properties"]) == set(LIMIT_KEYS)
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "$id": SCHEMA_ID,
        "title": "benchwright procedure",
        "type": "object",
        "required": ["name", "version", "board_type", "steps"],
        "additionalProperties": False,
        "properties": {
            "name": _STRING,
            "version": {"type": ["string", "number"]},
            "description": _STRING,
            "board_type": _STRING,
            "board_types": {"type": "array", "items": _STRING},
            "roles": {"type": "array", "items": {"enum": list(ROLES)}},
            "hazards": {"type": "array", "items": {"enum": list(HAZARDS)}},
            "parameters": {"type": "object", "additionalProperties": {"$ref": "#/$defs/values"}},
            "defaults": {
                "type": "object",
                "additionalProperties": False,
                "properties": {k: _STRING for k in DEFAULT_KEYS},
            },
            "limits": {
                "anyOf": [
                    _STRING,
                    {
                        "type": "object",
                        "additionalProperties": False,
                        "properties": {"file": _STRING, "set": {"type": "array", "items": limit}},
                    },
                ]
            },
            "setup": steps_ref,
            "steps": steps_ref,
            "cleanup": steps_ref,
        },
        "$defs": {
            "values": {"anyOf": [scalar, {"type": "array", "items": scalar}, series]},
            "steps": {"type": ["array", "null"], "items": {"$ref": "#/$defs/step"}},
            "step": {"anyOf": [*leaf_steps, *structural.values()]},
        },
    }


def fragment_schema() -> dict[str, Any]:
    """The JSON Schema of a fragment (a file brought in by ``include:``).

    The same steps and values as a procedure; only ``name`` and ``steps`` are required and only the
    keys a fragment may have (``loader.FRAGMENT_KEYS``) are allowed: board type, limits, hazards and
    the setup/cleanup blocks belong to the procedure that includes it.
    """
    whole = procedure_schema()
    return {
        **whole,
        "$id": FRAGMENT_SCHEMA_ID,
        "title": "benchwright procedure fragment (for include:)",
        "required": ["name", "steps"],
        "properties": {k: whole["properties"][k] for k in FRAGMENT_KEYS},
    }


def schema_text(*, fragment: bool = False) -> str:
    """The schema as JSON text (what ``benchwright schema [--fragment]`` prints)."""
    schema = fragment_schema() if fragment else procedure_schema()
    return json.dumps(schema, indent=2, ensure_ascii=False) + "\n"
