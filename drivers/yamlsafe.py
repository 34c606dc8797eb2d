"""Safe, bounded, located YAML loading for every file benchwright reads.

* Only plain YAML types are built (mappings, sequences, strings, numbers, booleans, null, dates); any
  other tag (``!!python/object``, custom ``!tags``) is a located error, never an object.
* Bounded: the document size, the number of aliases and the size of the expanded tree are capped
  *before* anything is built, so an alias bomb is refused in milliseconds.
* Located: mappings and sequences come back as :class:`YamlMap` and :class:`YamlSeq`, which remember the
  line and column of every key and item, so a checker can report ``file:line:column: message``.
* Duplicate keys are errors.

This module is a leaf (imports only ``drivers.errors`` and PyYAML); every layer may use it.
"""

from __future__ import annotations

import errno
import re
from collections.abc import Hashable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from drivers.errors import LocatedError, Location, Problem

#: Defaults: a procedure or bench file is a few kB; these leave a wide margin.
DEFAULT_MAX_BYTES = 2_000_000
DEFAULT_MAX_ALIASES = 200
DEFAULT_MAX_NODES = 200_000
DEFAULT_MAX_DEPTH = 64

_ALLOWED_TAGS = {
    "tag:yaml.org,2002:str",
    "tag:yaml.org,2002:int",
    "tag:yaml.org,2002:float",
    "tag:yaml.org,2002:bool",
    "tag:yaml.org,2002:null",
    "tag:yaml.org,2002:timestamp",
    "tag:yaml.org,2002:map",
    "tag:yaml.org,2002:seq",
}


@dataclass(frozen=True)
class YamlLimits:
    """Bounds applied while loading."""

    max_bytes: int = DEFAULT_MAX_BYTES
    max_aliases: int = DEFAULT_MAX_ALIASES
    max_nodes: int = DEFAULT_MAX_NODES
    max_depth: int = DEFAULT_MAX_DEPTH


class YamlMap(dict):
    """A mapping that knows where it and each of its keys and values stand in the file."""

    location: Location
    key_locations: dict[Hashable, Location]
    value_locations: dict[Hashable, Location]

    def where(self, key: Hashable | None = None, *, of_key: bool = False) -> Location:
        """Location of the value at ``key`` (or of the key itself), else of the mapping."""
        if key is None:
            return self.location
        table = self.key_locations if of_key else self.value_locations
        return table.get(key, self.location)


class YamlSeq(list):
    """A sequence that knows where it and each of its items stand in the file."""

    location: Location
    item_locations: list[Location]

    def where(self, index: int | None = None) -> Location:
        """Location of item ``index``, else of the sequence."""
        if index is None or not 0 <= index < len(self.item_locations):
            return self.location
        return self.item_locations[index]


def location_of(node: Node, file: str) -> Location:
    """1-based location of a YAML node."""
    return Location(file, node.start_mark.line + 1, node.start_mark.column + 1)


def where(container: Any, key: Any = None, file: str = "<input>") -> Location:
    """Location of ``container[key]`` (or of ``container``) if it came from :func:`load_yaml`."""
    if isinstance(container, YamlMap | YamlSeq):
        return container.where(key)
    return Location(file, 1, 1)


def load_yaml(
    text: str | bytes,
    file: str,
    *,
    limits: YamlLimits = YamlLimits(),
    error: type[LocatedError] = LocatedError,
) -> Any:
    """Parse one YAML document into plain, located Python values.

    Raises ``error`` (a :class:`LocatedError` subclass) listing every problem found with its location.
    An empty document gives ``None``.
    """
    start = Location(file, 1, 1)
    if isinstance(text, bytes):
        if len(text) > limits.max_bytes:
            raise error([Problem(start, f"file is {len(text)} bytes, above the limit of {limits.max_bytes}")])
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise error([Problem(start, f"not UTF-8 text ({exc.reason} at byte {exc.start})")]) from None
    if len(text) > limits.max_bytes:
        raise error([Problem(start, f"file is {len(text)} characters, above the limit of {limits.max_bytes}")])
    if "\x00" in text:
        raise error([Problem(start, "file contains a NUL byte: not a text file")])
    too_deep = flow_nesting_beyond(text, limits.max_depth)
    if too_deep is not None:
        where = _position(text, too_deep, file)
        raise error([Problem(where, f"nesting deeper than {limits.max_depth} levels")])
    try:
        root = _compose(text, limits)
    except _Refused as exc:
        raise error([Problem(exc.location(file), str(exc))]) from None
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        loc = Location(file, mark.line + 1, mark.column + 1) if mark else start
        message = " ".join(p for p in (exc.context, exc.problem) if p) or "invalid YAML"
        raise error([Problem(loc, f"YAML syntax: {message}")]) from None
    except yaml.reader.ReaderError as exc:  # a character YAML does not allow: no mark, a position
        raise error([Problem(_position(text, exc.position, file), _reader_message(exc))]) from None
    except yaml.YAMLError as exc:
        raise error([Problem(start, "YAML syntax: " + " ".join(str(exc).split()))]) from None
    if root is None:
        return None
    problems: list[Problem] = []
    size = _expanded_size(root, {}, 0, limits, file, problems)
    if problems:
        raise error(problems[:1])
    if size > limits.max_nodes:
        raise error([Problem(location_of(root, file), f"document expands to {size} nodes, above the limit of {limits.max_nodes} (alias bomb?)")])
    builder = _Builder(file)
    value = builder.build(root)
    if builder.problems:
        raise error(builder.problems)
    return value


def _position(text: str, index: int, file: str) -> Location:
    """1-based line and column of character ``index`` of ``text``."""
    index = max(0, min(index, len(text)))
    line_start = text.rfind("\n", 0, index) + 1
    return Location(file, text.count("\n", 0, index) + 1, index - line_start + 1)


def _reader_message(exc: yaml.reader.ReaderError) -> str:
    char = exc.character
    code = f"#x{char:04x}" if isinstance(char, int) else repr(char)
    return f"YAML syntax: unacceptable character {code}: {exc.reason}"


_FLOW_MARKS = re.compile(r"[\[\]{}'\"#\n]")
_QUOTE_MAY_FOLLOW = " \t\n[{,:"


def flow_nesting_beyond(text: str, max_depth: int) -> int | None:
    """The offset of the first ``[`` or ``{`` nested deeper than ``max_depth``, else None.

    A linear look at the brackets before PyYAML sees the text: its scanner keeps every open
    bracket as a possible simple key and re-examines them all at each token, so thousands of ``[``
    on one line take seconds before the composer's own depth check is reached.  Brackets inside
    quoted scalars and comments do not count; a text with few brackets is not looked at at all.
    """
    if text.count("[") + text.count("{") <= max_depth:
        return None
    depth = 0
    quote = ""  # the quote character of the scalar we are in, or ''
    in_comment = False
    skip_to = -1
    for match in _FLOW_MARKS.finditer(text):
        pos = match.start()
        if pos < skip_to:
            continue
        c = text[pos]
        if in_comment:
            in_comment = c != "\n"
        elif quote == "'":
            if c == "'":
                if text.startswith("''", pos):  # an escaped quote inside '...'
                    skip_to = pos + 2
                else:
                    quote = ""
        elif quote == '"':
            if c == '"' and _backslashes_before(text, pos) % 2 == 0:
                quote = ""
        elif c == "#":
            in_comment = pos == 0 or text[pos - 1] in " \t\n"
        elif c in "'\"":
            if pos == 0 or text[pos - 1] in _QUOTE_MAY_FOLLOW:
                quote = c
        elif c in "[{":
            depth += 1
            if depth > max_depth:
                return pos
        elif c in "]}":
            depth = max(0, depth - 1)
    return None


def _backslashes_before(text: str, pos: int) -> int:
    n = 0
    while pos - n > 0 and text[pos - n - 1] == "\\":
        n += 1
    return n


class _Refused(yaml.YAMLError):
    """A document refused while composing, before anything is built."""

    def __init__(self, message: str, mark: Any) -> None:
        super().__init__(message)
        self.mark = mark

    def location(self, file: str) -> Location:
        if self.mark is None:
            return Location(file, 1, 1)
        return Location(file, self.mark.line + 1, self.mark.column + 1)


class _BoundedLoader(yaml.SafeLoader):
    """SafeLoader that counts aliases and nesting depth while composing (PyYAML's composer recurses
    once per level: thousands of ``[`` would otherwise end in a RecursionError)."""

    max_aliases = DEFAULT_MAX_ALIASES
    max_depth = DEFAULT_MAX_DEPTH
    alias_count = 0
    depth = 0

    def compose_node(self, parent: Node | None, index: Any) -> Node | None:  # type: ignore[override]
        if self.check_event(yaml.AliasEvent):
            self.alias_count += 1
            if self.alias_count > self.max_aliases:
                raise _Refused(
                    f"more than {self.max_aliases} aliases: refused (alias bomb?)",
                    self.peek_event().start_mark,
                )
        self.depth += 1
        try:
            if self.depth > self.max_depth:
                raise _Refused(
                    f"nesting deeper than {self.max_depth} levels", self.peek_event().start_mark
                )
            return super().compose_node(parent, index)
        finally:
            self.depth -= 1


def _compose(text: str, limits: YamlLimits) -> Node | None:
    loader = _BoundedLoader(text)
    loader.max_aliases = limits.max_aliases
    loader.max_depth = limits.max_depth
    try:
        return loader.get_single_node()
    finally:
        loader.dispose()


def _expanded_size(node: Node, memo: dict[int, int], depth: int, limits: YamlLimits, file: str, problems: list[Problem]) -> int:
    """Number of nodes the tree has once aliases are expanded (memoised per node, so linear)."""
    key = id(node)
    if key in memo:
        return memo[key]
    if depth > limits.max_depth:
        problems.append(Problem(location_of(node, file), f"nesting deeper than {limits.max_depth} levels"))
        return 1
    memo[key] = limits.max_nodes + 1  # a node met again while being sized is a cycle
    total = 1
    if isinstance(node, SequenceNode):
        for child in node.value:
            total += _expanded_size(child, memo, depth + 1, limits, file, problems)
            if total > limits.max_nodes or problems:
                break
    elif isinstance(node, MappingNode):
        for k, v in node.value:
            total += _expanded_size(k, memo, depth + 1, limits, file, problems)
            total += _expanded_size(v, memo, depth + 1, limits, file, problems)
            if total > limits.max_nodes or problems:
                break
    memo[key] = total
    return total


_SURROGATE = re.compile("[\ud800-\udfff]")


class _Builder:
    """Turns a composed node tree into YamlMap / YamlSeq / scalars, collecting located problems."""

    def __init__(self, file: str) -> None:
        self.file = file
        self.problems: list[Problem] = []
        self._constructor = yaml.constructor.SafeConstructor()

    def build(self, node: Node) -> Any:
        if node.tag not in _ALLOWED_TAGS:
            self.problems.append(Problem(location_of(node, self.file), f"tag {node.tag!r} is not allowed (plain YAML only)"))
            return None
        if isinstance(node, ScalarNode):
            return self._scalar(node)
        if isinstance(node, SequenceNode):
            seq = YamlSeq(self.build(child) for child in node.value)
            seq.location = location_of(node, self.file)
            seq.item_locations = [location_of(child, self.file) for child in node.value]
            return seq
        return self._mapping(node)

    def _scalar(self, node: ScalarNode) -> Any:
        try:
            value = self._constructor.construct_object(node, deep=True)
        except (yaml.YAMLError, ValueError, OverflowError) as exc:
            self.problems.append(Problem(location_of(node, self.file), f"bad value {node.value!r}: {exc}"))
            return None
        if isinstance(value, str) and _SURROGATE.search(value):
            # a "\ud800" escape: not Unicode text, no UTF-8 file, database or socket takes it
            self.problems.append(Problem(location_of(node, self.file), f"bad value {value!r}: a lone surrogate is not text"))
            return None
        return value

    def _mapping(self, node: MappingNode) -> YamlMap:
        out = YamlMap()
        out.location = location_of(node, self.file)
        out.key_locations = {}
        out.value_locations = {}
        for key_node, value_node in node.value:
            if key_node.tag == "tag:yaml.org,2002:merge":
                self.problems.append(Problem(location_of(key_node, self.file), "merge keys ('<<') are not supported"))
                continue
            key = self.build(key_node)
            if not isinstance(key, Hashable) or isinstance(key, YamlMap | YamlSeq):
                self.problems.append(Problem(location_of(key_node, self.file), "a mapping key must be a plain value"))
                continue
            if key in out:
                first = out.key_locations[key]
                self.problems.append(Problem(location_of(key_node, self.file), f"duplicate key {key!r} (first at line {first.line})"))
                continue
            out[key] = self.build(value_node)
            out.key_locations[key] = location_of(key_node, self.file)
            out.value_locations[key] = location_of(value_node, self.file)
        return out


def read_bounded(path: str | Path, *, max_bytes: int = DEFAULT_MAX_BYTES) -> bytes:
    """The bytes of a regular file of at most ``max_bytes``.

    A device, FIFO or directory (``/dev/zero``, ``/dev/stdin``) or a file over the limit raises
    ``OSError`` at once instead of being read forever; callers turn it into a located error.
    """
    path = Path(path)
    if path.exists() and not path.is_file():
        raise OSError(errno.EINVAL, "not a regular file")
    with path.open("rb") as f:
        data = f.read(max_bytes + 1)
    if len(data) > max_bytes:
        raise OSError(errno.EFBIG, f"larger than the limit of {max_bytes} bytes")
    return data
