"""Load and check a simulated sensor file (keys and defaults: :mod:`drivers.sim.sensor`).

Problems are collected and reported together as ``file:line:column: message``, like board files.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from drivers.errors import ConfigError, Problem
from drivers.sim.board_loader import (
    Check,
    _Bad,
    _choice,
    _faults,
    _integer,
    _number,
    _Reader,
    _text,
)
from drivers.sim.sensor import LedSpec, PlateSpec, ReadoutSpec, SensorSpec, SipmSpec
from drivers.yamlsafe import load_yaml, read_bounded, where

MAX_SENSORS = 16


def _pair(value: Any) -> tuple[float, float]:
    check = _number(0.0, 1e9)
    if not isinstance(value, list) or len(value) != 2:
        raise _Bad("expected a list of two numbers, one per sensor")
    return (check(value[0]), check(value[1]))


_SIPM: dict[str, Check] = {
    "breakdown_V": _number(0.0, 1e4, above=True),
    "reference_C": _number(-273.15, 200.0),
    "breakdown_coeff_mV_per_K": _number(-1e4, 1e4),
    "cell_capacitance_fF": _number(0.0, 1e6, above=True),
    "dark_rate_hz_per_V": _number(0.0, 1e9),
    "crosstalk_lambda_per_V": _number(0.0, 1.0),
    "cell_gain_spread": _number(0.0, 1.0),
    "light_scale": _number(0.0, 100.0),
}
_READOUT: dict[str, Check] = {
    "mV_per_fC": _number(0.0, 1e4, above=True),
    "noise_mV": _number(0.0, 1e4, above=True),
    "baseline_mV": _number(-5000.0, 5000.0),
    "polarity": _choice("positive", "negative"),
    "discriminator_tau_ns": _number(0.0, 1e6, above=True),
}
_LED: dict[str, Check] = {"pe_per_V": _number(0.0, 1e6), "threshold_V": _number(0.0, 10.0)}
_PLATE: dict[str, Check] = {
    "area_cm2": _number(0.0, 1e7, above=True),
    "muon_rate_per_cm2_min": _number(0.0, 1e6),
    "mpv_pe": _number(0.0, 1e5, above=True),
    "landau_width_pe": _number(0.0, 1e5, above=True),
    "attenuation_length_cm": _number(0.0, 1e6, above=True),
    "fibre_cm": _pair,
    "singles_rate_hz": _pair,
    "singles_mean_pe": _number(0.0, 1e5, above=True),
}
_TOP: dict[str, Check] = {
    "serial": _text,
    "sensor_type": _text,
    "seed": _integer(0, 2**63 - 1),
    "time_scale": _number(0.0, 1e3),
    "temperature_C": _number(-273.15, 200.0),
    "temperature_noise_C": _number(0.0, 100.0),
    "bias_resistance_Mohm": _number(0.0, 1e12, above=True),
    "readout": lambda v: v,
    "led": lambda v: v,
    "plate": lambda v: v,
    "sensors": lambda v: v,
    "faults": lambda v: v,
}


def is_sensor_file(data: Any) -> bool:
    """A parsed simulator file describes sensors (not a preamp board) when it lists ``sensors:``."""
    return isinstance(data, dict) and "sensors" in data


def load_sensor(path: str | Path) -> SensorSpec:
    """Read a sensor file; ``ConfigError`` lists every problem as ``file:line:column: message``."""
    source = str(path)
    try:
        text = read_bounded(path)
    except OSError as exc:
        raise ConfigError(
            [Problem(where(None, None, source), f"cannot read sensor file: {exc.strerror}")]
        ) from None
    return sensor_from_mapping(load_yaml(text, source, error=ConfigError), source=source)


def sensor_from_mapping(data: Any, source: str = "<sensor>") -> SensorSpec:
    problems: list[Problem] = []
    reader = _Reader(source, problems)
    top = reader.mapping(data, _TOP, "sensor file", required=("serial", "sensors"))
    sensors = _sensors(reader, data, top.get("sensors"))
    readout = ReadoutSpec(**_section(reader, top, "readout", _READOUT))
    led = LedSpec(**_section(reader, top, "led", _LED))
    plate = PlateSpec(**_section(reader, top, "plate", _PLATE)) if "plate" in top else None
    if plate is not None and len(sensors) < 2:
        reader.problem(data, "plate", "a plate is read by two sensors: list two under sensors:")
    faults = _faults(reader, data, top.get("faults"))
    if problems:
        raise ConfigError(sorted(problems, key=lambda p: (p.location.line, p.location.column)))
    extras = {
        k: v for k, v in top.items() if k not in ("sensors", "readout", "led", "plate", "faults")
    }
    return SensorSpec(
        sensors=sensors,
        readout=readout,
        led=led,
        plate=plate,
        faults=faults,
        source=source,
        **extras,
    )


def _section(reader: _Reader, top: dict[str, Any], key: str, table: dict[str, Check]) -> dict:
    return reader.mapping(top[key], table, key) if key in top else {}


def _sensors(reader: _Reader, data: Any, raw: Any) -> tuple[SipmSpec, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, list) or not raw or len(raw) > MAX_SENSORS:
        reader.problem(data, "sensors", f"sensors must be a list of 1 to {MAX_SENSORS} mappings")
        return ()
    return tuple(
        SipmSpec(**reader.mapping(item, _SIPM, f"sensors[{i + 1}]")) for i, item in enumerate(raw)
    )
