"""Hypothesis strategies for the bad-input tests: structure-aware mutations of a valid file, text
edits, random bytes; and the loaders of every file the tool reads, keyed by the file's kind."""

from __future__ import annotations

import copy
from collections.abc import Callable
from pathlib import Path
from typing import Any

import yaml
from hypothesis import strategies as st

from drivers.bench import bench_from_mapping
from drivers.dialect import parse_dialect
from drivers.errors import ConfigError
from drivers.sim import board_from_mapping
from drivers.yamlsafe import load_yaml
from sequencer.procedure import board_info, build_plan, load_procedure_text
from sequencer.procedure.batch import parse_batch_text
from sequencer.procedure.boards import parse_board_type
from sequencer.procedure.limits import parse_limits_text
from tests.reliability.kit import EXAMPLE_BOARD, PROCEDURE, ROOT

PA8 = board_info("PA8", "NR-PA8-FUZZ")

BENCH_TEXT = """\
bench: bench-2
instruments:
  pulser: {address: "TCPIP0::127.0.0.1::5025::SOCKET", dialect: generic, expect_id: "Larchmoor,LTS-PG2", calibration_due: 2027-06-30}
  scope: {address: "TCPIP0::127.0.0.1::5026::SOCKET", timeout_ms: 5000, read_termination: "\\n"}
  threshold: {address: "TCPIP0::127.0.0.1::5027::SOCKET"}
  counter: {address: "TCPIP0::127.0.0.1::5028::SOCKET"}
  bias: {address: "TCPIP0::127.0.0.1::5029::SOCKET", max_volts: 60, max_ramp_V_per_s: 5, max_current_uA: 10}
  switch: {address: "TCPIP0::127.0.0.1::5030::SOCKET", dialect: generic}
"""
BATCH_TEXT = """\
batch: NR-2026-W20
procedure: ../procedures/qualify-preamp.yaml
board_type: PA8
operator: reliability (invented)
description: two invented boards
boards:
  - serial: NR-PA8-0201
  - {serial: NR-PA8-0202, operator: second shift, sim_board: boards/NR-PA8-0202.yaml}
"""


def _board_text() -> str:
    data = yaml.safe_load(EXAMPLE_BOARD.read_text())
    data["faults"] = [
        {"kind": "no_reply", "role": "scope", "after_commands": 30},
        {"kind": "scpi_error", "role": "pulser", "after_s": 1.5, "code": -222},
    ]
    return yaml.safe_dump(data, sort_keys=False)


def _plan(text: str | bytes, file: str) -> Any:
    """Load a procedure and expand it for a PA8 board: both raise only ``ProcedureError``."""
    return build_plan(load_procedure_text(text, file), PA8)


def _via_yaml(check: Callable[..., Any]) -> Callable[[str | bytes, str], Any]:
    def load(text: str | bytes, file: str) -> Any:
        return check(load_yaml(text, file, error=ConfigError), source=file)

    return load


#: kind -> (loader(text, file), seed texts): every file benchwright reads.
KINDS: dict[str, tuple[Callable[[str | bytes, str], Any], tuple[str, ...]]] = {
    "procedure": (
        _plan,
        (PROCEDURE.read_text(), (ROOT / "procedures/examples/quick-gain.yaml").read_text()),
    ),
    "bench": (_via_yaml(bench_from_mapping), (BENCH_TEXT,)),
    "board": (_via_yaml(board_from_mapping), (_board_text(),)),
    "limits": (parse_limits_text, ((ROOT / "procedures/limits/PA8.yaml").read_text(),)),
    "dialect": (parse_dialect, ((ROOT / "drivers/dialects/generic.yaml").read_text(),)),
    "batch": (parse_batch_text, (BATCH_TEXT,)),
    "board_type": (parse_board_type, ((ROOT / "procedures/boards/PA8.yaml").read_text(),)),
}

HOSTILE_STRINGS = [
    "",
    " ",
    "~",
    "null",
    "-1",
    "1e999",
    "nan",
    "0x7fffffffffffffffffff",
    "10 mV",
    "-5 V",
    "1 GS/s",
    "60 V/s",
    "{channel}",
    "{1 +}",
    "{__import__('os').system('true')}",
    "{board.channels * 1e308}",
    "{max(amplitudes)}",
    "all",
    "x1",
    "x9",
    "/dev/zero",
    "../../../../etc/passwd",
    "PA8",
    "TCPIP0::127.0.0.1::0::SOCKET",
    "generic",
    "no_reply",
    "\u202e\u0000",
    "é" * 3,
    "x" * 300,
]
SCALARS = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(HOSTILE_STRINGS),
    st.text(max_size=12),
    st.dates(),
)
VALUES = st.recursive(
    SCALARS,
    lambda inner: (
        st.lists(inner, max_size=3)
        | st.dictionaries(
            st.one_of(st.text(max_size=8), st.sampled_from(HOSTILE_STRINGS)), inner, max_size=3
        )
    ),
    max_leaves=6,
)
ACTIONS = ("descend", "descend", "replace", "delete", "rename", "add", "duplicate")
TYPO = st.sampled_from(["s", "_", "X", "", " "])


def _mutate(node: Any, data: st.DataObject, depth: int = 0) -> Any:
    """One mutation somewhere below ``node`` (a random walk down the tree); returns the new node."""
    action = data.draw(st.sampled_from(ACTIONS)) if depth < 12 else "replace"
    if isinstance(node, dict) and node:
        key = data.draw(st.sampled_from(sorted(node, key=repr)))
        child = node[key]
        if action == "descend" and isinstance(child, dict | list) and child:
            node[key] = _mutate(child, data, depth + 1)
        elif action == "delete":
            del node[key]
        elif action == "rename":
            node[f"{key}{data.draw(TYPO)}" if data.draw(st.booleans()) else str(key)[:-1]] = (
                node.pop(key)
            )
        elif action == "add":
            node[data.draw(st.text(max_size=10))] = data.draw(VALUES)
        elif action == "duplicate" and isinstance(child, list) and child:
            child.append(copy.deepcopy(child[0]))
        else:
            node[key] = data.draw(VALUES)
        return node
    if isinstance(node, list) and node:
        i = data.draw(st.integers(0, len(node) - 1))
        if action == "descend" and isinstance(node[i], dict | list) and node[i]:
            node[i] = _mutate(node[i], data, depth + 1)
        elif action == "delete":
            del node[i]
        elif action == "duplicate":
            node.insert(i, copy.deepcopy(node[i]))
        else:
            node[i] = data.draw(VALUES)
        return node
    return data.draw(VALUES)


def mutated_text(seed: str, data: st.DataObject) -> str:
    """The seed file parsed, mutated one to four times, written back as YAML."""
    tree = yaml.safe_load(seed)
    for _ in range(data.draw(st.integers(1, 4))):
        tree = _mutate(tree, data)
    return yaml.safe_dump(tree, sort_keys=False, allow_unicode=True)


#: Fragments that matter to a YAML parser, for text-level edits.
FRAGMENTS = st.sampled_from(
    [
        ":",
        ": ",
        "- ",
        "  ",
        "\n",
        "\t",
        "{",
        "}",
        "[",
        "]",
        ",",
        "&a ",
        "*a",
        "*b",
        "!!python/object/apply:os.system ['true']",
        "!custom ",
        "? ",
        "|",
        ">",
        '"',
        "'",
        "#",
        "%YAML 1.1\n",
        "---\n",
        "...\n",
        "<<: *a",
        "\x00",
        "\ufeff",
        "\x85",
        "9" * 40,
        "0o777",
        "2027-13-45",
        "@",
        "`",
        "\\",
    ]
)


def edited_text(seed: str, data: st.DataObject) -> str:
    """The seed text with one to three spans replaced by YAML fragments (line structure mostly kept)."""
    text = seed
    for _ in range(data.draw(st.integers(1, 3))):
        at = data.draw(st.integers(0, len(text)))
        span = data.draw(st.integers(0, 12))
        piece = data.draw(st.one_of(FRAGMENTS, st.text(max_size=6)))
        text = text[:at] + piece + text[at + span :]
    return text


def fuzz_file(kind: str) -> str:
    """A file name for messages that no real file has."""
    return str(Path("fuzzed") / f"{kind}.yaml")
