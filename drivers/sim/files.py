"""One entry for the simulator's input files: a preamp board file or a light-sensor file."""

from __future__ import annotations

from pathlib import Path

from drivers.errors import ConfigError, Problem
from drivers.sim.board import BoardSpec
from drivers.sim.board_loader import board_from_mapping
from drivers.sim.sensor import SensorSpec
from drivers.sim.sensor_loader import is_sensor_file, sensor_from_mapping
from drivers.yamlsafe import load_yaml, read_bounded, where


def load_sim_file(path: str | Path) -> BoardSpec | SensorSpec:
    """A board file, or a sensor file (told apart by its ``sensors:`` list)."""
    source = str(path)
    try:
        text = read_bounded(path)
    except OSError as exc:
        raise ConfigError(
            [Problem(where(None, None, source), f"cannot read board file: {exc.strerror}")]
        ) from None
    data = load_yaml(text, source, error=ConfigError)
    if is_sensor_file(data):
        return sensor_from_mapping(data, source=source)
    return board_from_mapping(data, source=source)
