"""The typed model of a loaded procedure (before expansion into a plan).

Step forms (each a YAML mapping whose first key names its kind; ``name:`` and ``when:`` are allowed on
every step):

* a leaf: a key of ``kinds.KINDS`` with its arguments (a mapping, or one scalar for a kind with one
  required argument, or nothing for a kind without arguments);
* ``group: NAME`` with ``do: [steps]``;
* ``sweep: {var: values, ...}`` with ``do:`` and ``mode: product | zip`` (default product, first
  variable outermost);
* ``for_channels: all | [channels]`` and ``for_outputs: all | [outputs]`` with ``do:``; they bind
  ``channel`` and ``output``;
* ``include: FILE`` with ``with: {param: value}``: the steps of another procedure file.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Literal as TypingLiteral

from drivers.errors import Location
from sequencer.inputs import RunInput, from_files

from .plan_model import Limit
from .values import Expr, Template


@dataclass(frozen=True, kw_only=True)
class Step:
    """What every step has: where it stands, an optional path segment and condition."""

    location: Location
    name: str | None = None
    when: Expr | None = None


@dataclass(frozen=True, kw_only=True)
class Leaf(Step):
    kind: str
    args: Mapping[str, Template]
    segment: str  # path segment: ``name`` or derived from the kind


@dataclass(frozen=True, kw_only=True)
class Group(Step):
    body: tuple[Step, ...]


@dataclass(frozen=True, kw_only=True)
class Sweep(Step):
    variables: tuple[tuple[str, Template], ...]
    mode: TypingLiteral["product", "zip"] = "product"
    body: tuple[Step, ...] = ()


@dataclass(frozen=True, kw_only=True)
class ChannelLoop(Step):
    channels: Template | None  # None = every channel of the board
    body: tuple[Step, ...] = ()


@dataclass(frozen=True, kw_only=True)
class OutputLoop(Step):
    outputs: Template | None  # None = every output of the board
    body: tuple[Step, ...] = ()


@dataclass(frozen=True, kw_only=True)
class Include(Step):
    target: str  # key of the included file (relative to the root procedure)
    arguments: Mapping[str, Template]
    procedure: Procedure


@dataclass(frozen=True)
class Parameter:
    name: str
    value: Template
    location: Location


@dataclass(frozen=True, kw_only=True)
class Procedure:
    """A loaded, validated procedure (or an included fragment of one)."""

    name: str
    version: str
    description: str = ""
    board_type: str = ""
    roles: tuple[str, ...] = ()
    hazards: tuple[str, ...] = ()
    parameters: tuple[Parameter, ...] = ()
    ramp_rate: Template | None = None  # defaults.ramp_rate
    limits: tuple[Limit, ...] = ()
    board_types: tuple[str, ...] = ()  # the board types it accepts (empty: any)
    limits_by_type: str = ""  # the board type its limits file was named by (limits: PA8), or ""
    limits_inline: tuple[Limit, ...] = ()  # limits: {set: [...]} that override the file's
    setup: tuple[Step, ...] = ()
    steps: tuple[Step, ...] = ()
    cleanup: tuple[Step, ...] = ()
    source_text: str = ""
    source_path: str = ""
    location: Location = field(default_factory=lambda: Location("<input>", 1, 1))
    board_type_location: Location | None = None
    files: Mapping[str, str] = field(default_factory=dict)
    limits_files: tuple[str, ...] = ()  # the keys of ``files`` read as limit sets

    def source_files(self) -> dict[str, str]:
        """Relative path -> text of every other file this procedure read (includes, limits)."""
        return dict(self.files)

    def inputs(self) -> tuple[RunInput, ...]:
        """The procedure file, its fragments and its limit set as run inputs (``sequencer.inputs``)."""
        main = RunInput("procedure", self.name, self.source_text)  # its own name: not the file's
        return (main, *from_files(self.files, self.limits_files))

    def parameter(self, name: str) -> Parameter | None:
        """The parameter called ``name``."""
        return next((p for p in self.parameters if p.name == name), None)


def leaves(steps: tuple[Step, ...]) -> list[Leaf]:
    """Every leaf step, included files' too, in file order."""
    found: list[Leaf] = []
    for step in steps:
        if isinstance(step, Leaf):
            found.append(step)
        elif isinstance(step, Include):
            found.extend(leaves(step.procedure.steps))
        elif isinstance(step, Group | Sweep | ChannelLoop | OutputLoop):
            found.extend(leaves(step.body))
    return found
