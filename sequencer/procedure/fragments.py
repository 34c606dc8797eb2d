"""Fragments (files brought in by ``include:``) checked on their own, and which schema a file names.

A fragment has no board type, limits or hazards of its own: those belong to the procedure that
includes it.  To check one alone it is included, by its own file name, from a small procedure made
here for the purpose (hazards declared, a ramp rate given, as a careful includer would), so every
problem is located in the fragment file exactly as when a real procedure includes it.  With a board
type the fragment is also planned for that type (expressions evaluated, units converted, channels
and outputs checked); without one only what does not need a board is checked.

Which schema a file follows is written in its first line, the editor modeline
``# yaml-language-server: $schema=../fragment.schema.json``; ``validate`` reads it the same way an
editor does, so a file marked as a fragment is checked as one.
"""

from __future__ import annotations

import json
import posixpath
import re
from pathlib import Path

from drivers.errors import Location, Problem
from drivers.yamlsafe import read_bounded
from sequencer.errors import ProcedureError

from .boards import board_info
from .expand import build_plan
from .loader import load_procedure_text
from .schema import FRAGMENT_SCHEMA_FILE

MODELINE = re.compile(r"^#\s*yaml-language-server:\s*\$schema=(?P<target>\S+)\s*$")
#: The includer's ramp rate: any positive rate will do, the bench's limit is checked at run time.
_CHECK_RAMP_RATE = "1 V/s"


def modeline_schema(text: str) -> str | None:
    """The schema file named in the first line's editor modeline (``None`` when there is none)."""
    first = text.split("\n", 1)[0].strip()
    match = MODELINE.match(first)
    return match["target"] if match else None


def is_fragment_text(text: str) -> bool:
    """Whether the file's modeline names the fragment schema."""
    target = modeline_schema(text)
    return target is not None and posixpath.basename(target) == FRAGMENT_SCHEMA_FILE


def _wrapper(file_name: str, board_type: str) -> str:
    lines = {
        "name": "fragment-check",
        "version": "0",
        "board_type": board_type,
        "hazards": ["bias"],
        "defaults": {"ramp_rate": _CHECK_RAMP_RATE},
        "steps": [{"include": file_name}],
    }
    # JSON is YAML: every name is quoted whatever characters the file name holds
    return json.dumps(lines)


def check_fragment(path: str | Path, board_type: str | None = None) -> list[Problem]:
    """Every problem of the fragment at ``path`` (empty: fine), planned for ``board_type`` if given."""
    path = str(path)
    try:
        read_bounded(path)
    except OSError as exc:
        return [Problem(Location(path, 1, 1), f"cannot read fragment: {exc.strerror or exc}")]
    # the made-up includer sits beside the fragment, so the include resolves to the file itself
    here = posixpath.dirname(path.replace("\\", "/"))
    host = posixpath.join(here, "(fragment check).yaml") if here else "(fragment check).yaml"
    name = posixpath.basename(path.replace("\\", "/"))
    try:
        procedure = load_procedure_text(_wrapper(name, board_type or "any"), host)
    except ProcedureError as exc:
        return list(exc.problems)
    if board_type is None:
        return []
    try:
        build_plan(procedure, board_info(board_type, "VALIDATION"))
    except ProcedureError as exc:
        return list(exc.problems)
    return []
