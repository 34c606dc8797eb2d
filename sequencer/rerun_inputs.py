"""What a recorded run used, read back for ``run --repeat`` and ``resume``: the procedure with its
fragments and limit set as stored, and each role's dialect as stored; and the texts a new run keeps
(:func:`bench_inputs`).  Kept apart from ``compose`` (which wires a run together) because both
directions of "every input a run used is stored with it" belong together.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

from drivers.bench import BenchSpec
from drivers.dialect import shipped_dialect_path
from sequencer.errors import ConfigError, Location, Problem
from sequencer.inputs import RunInput, loader_files
from sequencer.procedure import Procedure, load_procedure_text


def stored_procedure(record: Any, inputs: Sequence[RunInput], warn: Callable[[str], None] | None) -> Procedure:
    """The procedure exactly as a recorded run used it: its text, fragments and limit set as stored.

    A run recorded before the inputs were kept (schema 0003) stored only the procedure file; its
    fragments and limits are read from today's disk, with a warning.
    """
    path = record.procedure_path or f"run-{record.id}.yaml"
    if not inputs:
        if warn is not None:
            warn(f"run {record.id} was recorded without its fragments and limit set: they are read "
                 "from today's files, so the rerun may differ")
        return load_procedure_text(record.procedure_text, path)
    return load_procedure_text(record.procedure_text, path, files=loader_files(inputs))


def bench_inputs(spec: BenchSpec) -> tuple[RunInput, ...]:
    """The bench file (as read, or the text recorded for a simulated bench) and each role's dialect,
    the dialect as the bench spec read it (the very text the instruments are driven by)."""
    found: list[RunInput] = []
    if spec.text:
        found.append(RunInput("bench", "bench", spec.text))
    for role, inst in sorted(spec.instruments.items()):
        text = inst.dialect_text or _read_dialect(spec, role, str(inst.dialect))
        found.append(RunInput("dialect", role, text))
    return tuple(found)


def _read_dialect(spec: BenchSpec, role: str, name: str) -> str:
    """A dialect's text for a spec built without one (a bench made in code)."""
    is_path = name.endswith((".yaml", ".yml")) or "/" in name or "\\" in name
    path = Path(name) if is_path else shipped_dialect_path(name)
    try:
        return path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(
            [Problem(Location(spec.source or "<bench>", 1, 1), f"{role}: cannot read dialect {path}: {exc}")]
        ) from None


def stored_dialects(inputs: Sequence[RunInput]) -> dict[str, str]:
    """role -> the dialect text a recorded run used (its ``dialect`` inputs)."""
    return {i.name: i.text for i in inputs if i.kind == "dialect"}


def with_dialects(spec: BenchSpec, dialects: Mapping[str, str]) -> BenchSpec:
    """``spec`` with each role's dialect replaced by the stored text, when one is stored."""
    if not dialects:
        return spec
    instruments = {
        role: replace(inst, dialect_text=dialects[role]) if role in dialects else inst
        for role, inst in spec.instruments.items()
    }
    return replace(spec, instruments=instruments)


def rerun_dialects(
    spec: BenchSpec, record: Any, inputs: Sequence[RunInput], warn: Callable[[str], None] | None
) -> BenchSpec:
    """For ``run --repeat`` and ``resume`` on the recorded run's own bench (same bench name): each
    role driven by the dialect text the run stored, not by today's file, with a warning naming a
    dialect file that changed since.  Another bench keeps its own dialects (its instruments may
    differ; resume records that as a caveat)."""
    if spec.name != record.bench:
        return spec
    stored = stored_dialects(inputs)
    for role, inst in sorted(spec.instruments.items()):
        if warn is not None and role in stored and inst.dialect_text and inst.dialect_text != stored[role]:
            warn(f"{role}: dialect {inst.dialect} differs from the text run {record.id} used; "
                 "the stored text drives the instrument")
    return with_dialects(spec, stored)
