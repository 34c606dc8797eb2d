"""Board-type files (``procedures/boards/<type>.yaml``): channels and outputs of a kind of board.

::

    board_type: PA8
    description: ...
    channels: 8
    outputs:                      # in order; nominal_gain in V/V for the outputs that have one
      x1: {nominal_gain: 1.0}
      x5: {nominal_gain: 5.0, polarity: negative}   # polarity: positive (default) or negative
      shaped: {}
    input_range: [0 mV, 1 V]      # optional: test-pulse amplitudes the input accepts (checked
                                  # against every pulser.amplitude and pulser.sine of a plan)
    threshold_range: [-1 V, 1 V]  # optional: discriminator thresholds it accepts (threshold.level)

:func:`load_board_type` gives a :class:`BoardInfo` template (serial empty); :func:`board_info` fills in
the serial of the board under test.
"""

from __future__ import annotations

import dataclasses
import math
import re
from pathlib import Path

import procedures
from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap, load_yaml, read_bounded
from sequencer.errors import ProcedureError
from sequencer.inputs import RunInput

from .checking import check_keys, require_keys
from .plan_model import BoardInfo
from .units import Quantity, read_quantity

BOARD_KEYS = (
    "board_type", "description", "channels", "outputs", "input_range", "threshold_range",
)
OUTPUT_KEYS = ("nominal_gain", "polarity", "description")
POLARITIES = {"positive": 1, "negative": -1}
MAX_CHANNELS = 1024
_OUTPUT_NAME = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.+-]*$")


def shipped_dir(kind: str) -> Path:
    """``procedures/<kind>`` of the installed package (``boards``, ``limits``)."""
    return Path(procedures.__file__).resolve().parent / kind


def board_type_path(name_or_path: str | Path) -> Path:
    """A path as given, or the shipped file of a board-type name."""
    text = str(name_or_path)
    if text.endswith((".yaml", ".yml")) or "/" in text or "\\" in text:
        return Path(text)
    return shipped_dir("boards") / f"{text}.yaml"


def parse_board_type(text: str | bytes, file: str) -> BoardInfo:
    """A board-type file's text as a :class:`BoardInfo` template."""
    data = load_yaml(text, file, error=ProcedureError)
    problems: list[Problem] = []
    if not isinstance(data, YamlMap):
        raise ProcedureError(
            [
                Problem(
                    Location(file, 1, 1),
                    "a board-type file is a mapping (board_type, channels, outputs)",
                )
            ]
        )
    check_keys(data, BOARD_KEYS, problems, "a board-type file")
    require_keys(data, ("board_type", "channels", "outputs"), problems, "a board-type file")
    name = data.get("board_type", "")
    if not isinstance(name, str) or not name:
        problems.append(Problem(data.where("board_type"), "board_type: needs a name such as PA8"))
    channels = data.get("channels", 1)
    if (
        isinstance(channels, bool)
        or not isinstance(channels, int)
        or not 1 <= channels <= MAX_CHANNELS
    ):
        problems.append(
            Problem(
                data.where("channels"), f"channels: needs a whole number from 1 to {MAX_CHANNELS}"
            )
        )
    outputs, gains, signs = _outputs(data, problems)
    input_range = _voltage_range(data, "input_range", problems)
    threshold_range = _voltage_range(data, "threshold_range", problems)
    if problems:
        raise ProcedureError(problems)
    return BoardInfo(
        serial="",
        board_type=name,
        channels=channels,
        outputs=outputs,
        nominal_gain=gains,
        polarity=signs,
        source=file,
        input_range_mV=input_range,
        input_range_at=str(data.where("input_range")) if input_range else "",
        threshold_range_mV=threshold_range,
        threshold_range_at=str(data.where("threshold_range")) if threshold_range else "",
    )


def _voltage_range(data: YamlMap, key: str, problems: list[Problem]) -> tuple[float, float] | None:
    """``key: [low, high]``, voltages with units (``[0 mV, 1 V]``), as mV; low below high."""
    raw = data.get(key)
    if raw is None:
        return None
    bounds: list[float] = []
    if isinstance(raw, list) and len(raw) == 2:
        for item in raw:
            value = read_quantity(item) if isinstance(item, str) else item
            if isinstance(value, Quantity) and value.dimension == "V":
                bounds.append(value.si * 1e3)
            elif value == 0 and not isinstance(value, bool):
                bounds.append(0.0)
    if len(bounds) != 2 or not bounds[0] < bounds[1]:
        problems.append(
            Problem(
                data.where(key),
                f"{key}: needs [low, high] voltages with units, low below high, e.g. [0 mV, 1 V]",
            )
        )
        return None
    return (bounds[0], bounds[1])


def _outputs(
    data: YamlMap, problems: list[Problem]
) -> tuple[tuple[str, ...], dict[str, float], dict[str, int]]:
    raw = data.get("outputs")
    signs: dict[str, int] = {}
    if raw is None:
        return (), {}, signs
    if not isinstance(raw, YamlMap) or not raw:
        problems.append(
            Problem(
                data.where("outputs"),
                "outputs: needs a mapping of output name: {nominal_gain: ...}",
            )
        )
        return (), {}, signs
    gains: dict[str, float] = {}
    for key, spec in raw.items():
        if not isinstance(key, str) or not _OUTPUT_NAME.match(key):
            problems.append(
                Problem(
                    raw.where(key, of_key=True),
                    f"output name {key!r} must be letters, digits, '_', '.', '+', '-'",
                )
            )
            continue
        if spec is None:
            continue
        if not isinstance(spec, YamlMap):
            problems.append(
                Problem(raw.where(key), "an output is a mapping such as {nominal_gain: 5.0}")
            )
            continue
        check_keys(spec, OUTPUT_KEYS, problems, f"output {key!r}")
        polarity = spec.get("polarity", "positive")
        if polarity not in POLARITIES:
            problems.append(
                Problem(spec.where("polarity"), "polarity: needs positive or negative")
            )
        else:
            signs[key] = POLARITIES[polarity]
        gain = spec.get("nominal_gain")
        if gain is None:
            continue
        if (
            isinstance(gain, bool)
            or not isinstance(gain, int | float)
            or not math.isfinite(gain)
            or gain <= 0
        ):
            problems.append(
                Problem(spec.where("nominal_gain"), "nominal_gain: needs a positive number (V/V)")
            )
            continue
        gains[key] = float(gain)
    return tuple(str(k) for k in raw), gains, signs


def load_board_type(name_or_path: str | Path) -> BoardInfo:
    """The board type called ``name_or_path`` (shipped) or in that file; serial left empty."""
    path = board_type_path(name_or_path)
    try:
        raw = read_bounded(path)
    except OSError as exc:
        raise ProcedureError(
            [Problem(Location(str(path), 1, 1), f"cannot read board-type file: {exc.strerror}")]
        ) from None
    return parse_board_type(raw, str(path))


def board_info(board_type: BoardInfo | str | Path, serial: str) -> BoardInfo:
    """The board under test: its type (a template, a name or a file) with ``serial`` filled in."""
    template = board_type if isinstance(board_type, BoardInfo) else load_board_type(board_type)
    return dataclasses.replace(template, serial=serial)


def board_type_input(name_or_path: str | Path) -> RunInput:
    """The board-type file's text as a run input (kind ``board_type``, named by the type as given)."""
    path = board_type_path(name_or_path)
    try:
        raw = read_bounded(path)
    except OSError as exc:
        raise ProcedureError(
            [Problem(Location(str(path), 1, 1), f"cannot read board-type file: {exc.strerror}")]
        ) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ProcedureError(
            [Problem(Location(str(path), 1, 1), f"board-type file is not UTF-8 ({exc.reason})")]
        ) from None
    return RunInput("board_type", str(name_or_path), text)


def board_type_of_input(given: RunInput, *, file: str | None = None) -> BoardInfo:
    """The :class:`BoardInfo` template of a board-type text (read once, or as a run stored it)."""
    return parse_board_type(given.text, file or f"<board type {given.name} as stored>")
