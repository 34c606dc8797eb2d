"""The inputs of a run, content-addressed: every text a run used, and the digests defined over them.

A leaf module (hashlib only) shared by the procedure layer (which reads the texts), the engine (which
hands them to the store with the run's provenance), the store (which keeps each text once, keyed by
its SHA-256) and the reports.

Kinds of input::

    procedure    the procedure file itself (name: its file name)
    include      each included fragment (name: its path relative to the procedure, as the loader keys it)
    limits       the limit set (name: ``@limits/PA8.yaml`` for a shipped set, else its relative path)
    board_type   the board-type file of the run (name: the board type)
    bench        the bench file (name: ``bench``); for a simulated bench, the text recorded for it
    dialect      each dialect file a bench role uses (name: the role)

``procedure_sha256`` (the run's, the export column's) is :func:`procedure_digest` over the inputs of
the kinds in ``PROCEDURE_KINDS``: SHA-256 of the UTF-8 manifest with one line
``<kind> <name> <sha256 of the text's UTF-8 bytes>`` per input, sorted, each line ending in ``\\n``.
The bench file and the dialects are stored with the run too, but are not part of that digest: they
describe the bench, not the procedure, and a simulated bench gets new addresses every time it starts.
``inputs_digest`` covers all of them.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Literal

InputKind = Literal["procedure", "include", "limits", "board_type", "bench", "dialect"]
INPUT_KINDS: tuple[InputKind, ...] = (
    "procedure",
    "include",
    "limits",
    "board_type",
    "bench",
    "dialect",
)
PROCEDURE_KINDS: frozenset[str] = frozenset({"procedure", "include", "limits", "board_type"})
TEXT_KINDS: frozenset[str] = frozenset({"procedure", "include"})  # "the procedure's text"
LIMITS_PREFIX = "@limits/"


def text_sha256(text: str) -> str:
    """SHA-256 (hex) of ``text`` as UTF-8: the key a text is stored under."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class RunInput:
    """One text a run used."""

    kind: InputKind
    name: str
    text: str

    @property
    def sha256(self) -> str:
        return text_sha256(self.text)


def manifest_digest(entries: Iterable[tuple[str, str, str]]) -> str:
    """SHA-256 of the manifest of ``(kind, name, sha256 of the text)`` entries (module docstring)."""
    lines = sorted(f"{kind} {name} {sha}\n" for kind, name, sha in entries)
    return hashlib.sha256("".join(lines).encode("utf-8")).hexdigest()


def _digest(inputs: Iterable[RunInput], kinds: frozenset[str] | None) -> str:
    return manifest_digest((i.kind, i.name, i.sha256) for i in inputs if kinds is None or i.kind in kinds)


def procedure_digest(inputs: Iterable[RunInput]) -> str:
    """``procedure_sha256``: the procedure, its fragments, the limit set and the board type."""
    return _digest(inputs, PROCEDURE_KINDS)


def text_digest(inputs: Iterable[RunInput]) -> str:
    """The procedure's own text (file and fragments): what a name and version promise to keep."""
    return _digest(inputs, TEXT_KINDS)


def inputs_digest(inputs: Iterable[RunInput]) -> str:
    """Every input, bench and dialects included."""
    return _digest(inputs, None)


def loader_files(inputs: Iterable[RunInput]) -> dict[str, str]:
    """The fragments and the limit set as the procedure loader keys them (for a stored rerun)."""
    return {i.name: i.text for i in inputs if i.kind in ("include", "limits")}


def of_kind(inputs: Iterable[RunInput], kind: str) -> list[RunInput]:
    return [i for i in inputs if i.kind == kind]


def from_files(files: Mapping[str, str], limits_keys: Iterable[str] = ()) -> tuple[RunInput, ...]:
    """Fragments and limit set from the loader's ``key -> text`` (limits: ``@limits/`` or listed)."""
    limits = set(limits_keys)
    return tuple(
        RunInput("limits" if k.startswith(LIMITS_PREFIX) or k in limits else "include", k, t)
        for k, t in files.items()
    )


def is_released(version: str) -> bool:
    """A released version has no pre-release part: Semantic Versioning 2.0.0 §9 marks one with a
    hyphen (``1.2.0-draft``); ``dev`` in the version (``1.2.dev1``, PEP 440) counts as one too."""
    text = version.strip().lower()
    return bool(text) and "-" not in text and "dev" not in text and "draft" not in text
