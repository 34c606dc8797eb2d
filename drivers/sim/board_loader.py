"""Load and check a simulated board file (keys and defaults: :mod:`drivers.sim.board`).

Every problem is collected and reported together as ``file:line:column: message``; an unknown key is
reported with the nearest known key ("did you mean ...").
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Mapping
from pathlib import Path
from types import MappingProxyType
from typing import Any

from drivers.errors import ConfigError, Problem
from drivers.sim.board import (
    DISCRIMINATOR_MODES,
    FAULT_KINDS,
    MAX_CHANNELS,
    OUTPUT_INDEX,
    ROLES,
    BoardSpec,
    ChannelSpec,
    CoincidenceSpec,
    ConverterSpec,
    DiscriminatorSpec,
    FaultSpec,
    PulseSpec,
    ShaperSpec,
)
from drivers.sim.physics import fast_time_constants
from drivers.timing import DEFAULT_TIMING, KEYS, BenchTiming, InstrumentTiming
from drivers.yamlsafe import YamlMap, load_yaml, read_bounded, where

Check = Callable[[Any], Any]


class _Bad(ValueError):
    """A value failed its check; the message says why."""


def _number(lo: float = -math.inf, hi: float = math.inf, *, above: bool = False) -> Check:
    def check(value: Any) -> float:
        if (
            isinstance(value, bool)
            or not isinstance(value, int | float)
            or not math.isfinite(value)
        ):
            raise _Bad(f"expected a number, got {value!r}")
        if value < lo or value > hi or (above and value == lo):
            low = f"> {lo:g}" if above else f">= {lo:g}"
            raise _Bad(
                f"{value!r} out of range (must be {low}"
                + (f" and <= {hi:g})" if hi < math.inf else ")")
            )
        return float(value)

    return check


def _integer(lo: int, hi: int) -> Check:
    def check(value: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise _Bad(f"expected an integer, got {value!r}")
        if not lo <= value <= hi:
            raise _Bad(f"{value} out of range ({lo}..{hi})")
        return value

    return check


def _boolean(value: Any) -> bool:
    if not isinstance(value, bool):
        raise _Bad(f"expected true or false, got {value!r}")
    return value


def _text(value: Any) -> str:
    if not isinstance(value, str) or not value.strip():
        raise _Bad(f"expected a non-empty string, got {value!r}")
    return value


def _choice(*choices: str) -> Check:
    def check(value: Any) -> str:
        if value not in choices:
            raise _Bad(f"expected one of {', '.join(choices)}, got {value!r}")
        return value

    return check


class _Reader:
    """Reads one mapping against a table of key -> check, collecting located problems."""

    def __init__(self, source: str, problems: list[Problem]) -> None:
        self.source = source
        self.problems = problems

    def problem(self, container: Any, key: Any, message: str) -> None:
        self.problems.append(Problem(where(container, key, self.source), message))

    def mapping(
        self, data: Any, table: Mapping[str, Check], context: str, *, required: tuple[str, ...] = ()
    ) -> dict[str, Any]:
        if not isinstance(data, Mapping):
            self.problem(data, None, f"{context} must be a mapping")
            return {}
        out: dict[str, Any] = {}
        for key, value in data.items():
            if key not in table:
                near = difflib.get_close_matches(str(key), list(table), n=1)
                hint = (
                    f"; did you mean {near[0]!r}?" if near else f"; known keys: {', '.join(table)}"
                )
                loc = (
                    data.where(key, of_key=True)
                    if isinstance(data, YamlMap)
                    else where(data, None, self.source)
                )
                self.problems.append(Problem(loc, f"unknown key {key!r} in {context}{hint}"))
                continue
            try:
                out[key] = table[key](value)
            except _Bad as exc:
                self.problem(data, key, f"{context}.{key}: {exc}")
        for key in required:
            if key not in data:
                self.problem(data, None, f"{context}: missing required key {key!r}")
        return out


def _output_levels(value: Any) -> Mapping[str, float]:
    """``{output: DC level in mV}`` for outputs of ``OUTPUT_INDEX`` (x1, x5, shaped)."""
    if not isinstance(value, Mapping):
        raise _Bad(f"expected a mapping of output to mV, e.g. {{x1: 2.0, x5: -12.0}}, got {value!r}")
    level = _number(-5000.0, 5000.0)
    out: dict[str, float] = {}
    for name, mV in value.items():
        if name not in OUTPUT_INDEX:
            raise _Bad(f"unknown output {name!r}; known outputs: {', '.join(OUTPUT_INDEX)}")
        try:
            out[str(name)] = level(mV)
        except _Bad as exc:
            raise _Bad(f"{name}: {exc}") from None
    return MappingProxyType(out)


_CHANNEL = {
    "gain_x1": _number(0.0, 1e4, above=True),
    "gain_x5": _number(0.0, 1e4, above=True),
    "baseline_mV": _number(-5000.0, 5000.0),
    "noise_in_mV": _number(0.0, 1000.0),
    "saturation_mV": _number(0.0, 1e5, above=True),
    "discriminator_offset_mV": _number(-5000.0, 5000.0),
    "dead": _boolean,
    "output_baseline_mV": _output_levels,
}
_SHAPER = {
    "order": _integer(1, 10),
    "tau_ns": _number(0.0, 1e6, above=True),
    "kind": _choice("unipolar", "bipolar"),
    "gain": _number(0.0, 1e4, above=True),
}
_PULSE = {"rise_ns": _number(0.0, 1e5, above=True), "decay_ns": _number(0.0, 1e6, above=True)}
_COINCIDENCE = {
    "singles1_hz": _number(0.0, 1e8),
    "singles2_hz": _number(0.0, 1e8),
    "correlated_hz": _number(0.0, 1e8),
    "height_mV": _number(0.0, 1e5),
    "noise_mV": _number(0.0, 1e4),
    "jitter_ns": _number(0.0, 1e4),
    "skew_ns": _number(-500.0, 500.0),
    "resolving_extra_ns": _number(-1000.0, 1e4),
    "efficiency1": _number(0.0, 1.0),
    "efficiency2": _number(0.0, 1.0),
    "output_width_ns": _number(0.0, 1e5, above=True),
    "output_delay_ns": _number(0.0, 1e4),
}


def _codes(value: Any) -> tuple[int, ...]:
    if not isinstance(value, list) or not all(
        isinstance(v, int) and not isinstance(v, bool) and 1 <= v <= 65534 for v in value
    ):
        raise _Bad(f"expected a list of codes 1..65534, got {value!r}")
    return tuple(value)


_CONVERTER = {
    "bits": _integer(0, 16),
    "dnl_rms_lsb": _number(0.0, 1.0),
    "missing_codes": _codes,
    "noise_lsb": _number(0.0, 1e4),
    "aperture_jitter_ps": _number(0.0, 1e6),
    "bandwidth_mhz": _number(0.0, 1e5),
}
_DISCRIMINATOR = {
    "mode": _choice(*DISCRIMINATOR_MODES),
    "fraction": _number(0.0, 1.0, above=True),
    "delay_ns": _number(0.0, 1e3, above=True),
    "propagation_ns": _number(0.0, 1e4),
    "width_ns": _number(0.0, 1e5, above=True),
    "logic_mV": _number(0.0, 5000.0, above=True),
    "edge_ns": _number(0.0, 1e3, above=True),
    "logic_noise_mV": _number(0.0, 1e3),
}
_FAULT = {
    "kind": _choice(*FAULT_KINDS),
    "role": _choice(*ROLES),
    "after_s": _number(0.0, 1e7),
    "after_commands": _integer(0, 10**9),
    "after_message": _text,
    "code": _integer(-999, 999),
    "message": _text,
}
#: Per role, the command structures the simulator speaks (``generic`` unless the board file says).
_COMMAND_SETS: dict[str, Check] = {
    "scope": _choice("generic", "wavescope"),
    "bias": _choice("generic", "sourcemeter"),
}
_TOP: dict[str, Check] = {
    "serial": _text,
    "board_type": _text,
    "outputs": lambda v: v,
    "shaper": lambda v: v,
    "pulse": lambda v: v,
    "coincidence": lambda v: v,
    "converter": lambda v: v,
    "discriminator": lambda v: v,
    "faults": lambda v: v,
    "channels": lambda v: v,
    "command_sets": lambda v: v,
    "timing": lambda v: v,
    "crosstalk_pct": _number(0.0, 100.0),
    "bias_resistance_Mohm": _number(0.0, 1e9, above=True),
    "seed": _integer(0, 2**63 - 1),
    "polarity": _choice("positive", "negative"),
    "inverter": _boolean,
    "output_polarity": lambda v: v,
    "pulse_delay_ns": _number(0.0, 1e6),
    "adc_bits": _integer(6, 16),
    "time_scale": _number(0.0, 1e3),
    "discriminator_tau_ns": _number(0.0, 1e6, above=True),
    "dark_rate_hz": _number(0.0, 1e9),
    "dark_height_mV": _number(0.0, 1e5),
    "bias_current_offset_nA": _number(-1e6, 1e6),
    "bias_current_noise_nA": _number(0.0, 1e6),
    "bias_voltage_noise_mV": _number(0.0, 1e6),
}


def load_board(path: str | Path) -> BoardSpec:
    """Read a board file; ``ConfigError`` lists every problem as ``file:line:column: message``."""
    source = str(path)
    try:
        text = read_bounded(path)
    except OSError as exc:
        raise ConfigError(
            [Problem(where(None, None, source), f"cannot read board file: {exc.strerror}")]
        ) from None
    return board_from_mapping(load_yaml(text, source, error=ConfigError), source=source)


def board_from_mapping(data: Any, source: str = "<board>") -> BoardSpec:
    """Check a parsed board mapping (located if it came from :func:`drivers.yamlsafe.load_yaml`)."""
    problems: list[Problem] = []
    reader = _Reader(source, problems)
    top = reader.mapping(data, _TOP, "board", required=("serial", "channels"))
    channels = _channels(reader, data, top.get("channels"))
    shaper = (
        ShaperSpec(**reader.mapping(top["shaper"], _SHAPER, "shaper"))
        if "shaper" in top
        else ShaperSpec()
    )
    pulse = _pulse(reader, data, top.get("pulse"))
    coincidence = (
        CoincidenceSpec(**reader.mapping(top["coincidence"], _COINCIDENCE, "coincidence"))
        if "coincidence" in top
        else CoincidenceSpec()
    )
    converter = (
        ConverterSpec(**reader.mapping(top["converter"], _CONVERTER, "converter"))
        if "converter" in top
        else ConverterSpec()
    )
    discriminator = (
        DiscriminatorSpec(**reader.mapping(top["discriminator"], _DISCRIMINATOR, "discriminator"))
        if "discriminator" in top
        else DiscriminatorSpec()
    )
    outputs = _outputs(reader, data, top.get("outputs"))
    faults = _faults(reader, data, top.get("faults"))
    command_sets = (
        reader.mapping(top["command_sets"], _COMMAND_SETS, "command_sets")
        if "command_sets" in top
        else {}
    )
    timing = _timing(reader, data, top.get("timing"))
    if "output_polarity" in top:
        polarity = _choice("positive", "negative")
        table = {name: polarity for name in ("x1", "x5", "shaped")}
        top["output_polarity"] = MappingProxyType(
            reader.mapping(top["output_polarity"], table, "output_polarity")
        )
    if problems:
        raise ConfigError(sorted(problems, key=lambda p: (p.location.line, p.location.column)))
    extras = {
        k: v
        for k, v in top.items()
        if k
        not in (
            "channels",
            "shaper",
            "pulse",
            "coincidence",
            "converter",
            "discriminator",
            "outputs",
            "faults",
            "command_sets",
            "timing",
        )
    }
    return BoardSpec(
        channels=channels,
        shaper=shaper,
        pulse=pulse,
        coincidence=coincidence,
        converter=converter,
        discriminator=discriminator,
        outputs=outputs,
        faults=faults,
        command_sets=MappingProxyType(dict(command_sets)),
        timing=timing,
        source=source,
        **extras,
    )


def _channels(reader: _Reader, data: Any, raw: Any) -> tuple[ChannelSpec, ...]:
    if raw is None:
        return ()
    if isinstance(raw, int) and not isinstance(raw, bool) and 1 <= raw <= MAX_CHANNELS:
        # a module whose inputs have no per-channel physics (a digitizer's inputs, a coincidence
        # unit's): the count alone, each channel with the documented defaults
        return tuple(ChannelSpec() for _ in range(raw))
    if not isinstance(raw, list) or not raw:
        reader.problem(
            data,
            "channels",
            "channels must be a non-empty list of mappings, or a count "
            f"1..{MAX_CHANNELS} of channels with the default keys",
        )
        return ()
    if len(raw) > MAX_CHANNELS:
        reader.problem(
            data,
            "channels",
            f"at most {MAX_CHANNELS} channels (the switch numbers them with two digits)",
        )
    return tuple(
        ChannelSpec(**reader.mapping(item, _CHANNEL, f"channels[{i + 1}]"))
        for i, item in enumerate(raw)
    )


def _pulse(reader: _Reader, data: Any, raw: Any) -> PulseSpec:
    values = reader.mapping(raw, _PULSE, "pulse") if raw is not None else {}
    rise = values.get("rise_ns", PulseSpec.rise_ns)
    decay = values.get("decay_ns", PulseSpec.decay_ns)
    try:
        tau_r, tau_d = fast_time_constants(rise, decay)
    except ValueError as exc:
        reader.problem(data, "pulse", f"pulse: {exc}")
        return PulseSpec()
    return PulseSpec(rise_ns=rise, decay_ns=decay, tau_rise_ns=tau_r, tau_decay_ns=tau_d)


def _outputs(reader: _Reader, data: Any, raw: Any) -> Mapping[str, float]:
    if raw is None:
        return MappingProxyType({"x1": 1.0, "x5": 5.0})
    table = {name: _number(0.0, 1e4, above=True) for name in ("x1", "x5", "shaped")}
    return MappingProxyType(reader.mapping(raw, table, "outputs"))


_TIMING = {key: _number(0.0, 1e6) for key in KEYS}


def _timing(reader: _Reader, data: Any, raw: Any) -> BenchTiming:
    """The ``timing:`` section: per role, the keys of :mod:`drivers.timing` (each optional)."""
    if raw is None:
        return DEFAULT_TIMING
    roles = reader.mapping(raw, {role: lambda v: v for role in ROLES}, "timing")
    out: dict[str, InstrumentTiming] = {}
    for role, entry in roles.items():
        values = reader.mapping(entry, _TIMING, f"timing.{role}")
        out[role] = InstrumentTiming(**{KEYS[k][0]: v * KEYS[k][1] for k, v in values.items()})
    return BenchTiming(roles=MappingProxyType(out))


_DEFAULT_ROLE = {"interlock_open": "bias"}


def _faults(reader: _Reader, data: Any, raw: Any) -> tuple[FaultSpec, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, list):
        reader.problem(data, "faults", "faults must be a list of mappings")
        return ()
    out = []
    for i, item in enumerate(raw):
        context = f"faults[{i + 1}]"
        values = reader.mapping(item, _FAULT, context, required=("kind",))
        if "kind" not in values:
            continue
        kind = values["kind"]
        role = values.setdefault("role", _DEFAULT_ROLE.get(kind, "scope"))
        if kind == "interlock_open" and role != "bias":
            reader.problem(
                item, "role", f"{context}: interlock_open acts on the bias supply, not {role!r}"
            )
        if "after_s" in values and "after_commands" in values:
            reader.problem(
                item, "after_commands", f"{context}: give after_s or after_commands, not both"
            )
        if kind == "interlock_open" and "after_commands" in values:
            reader.problem(
                item, "after_commands", f"{context}: interlock_open takes after_s (from output on)"
            )
        if kind == "scpi_error" and "code" not in values:
            reader.problem(item, None, f"{context}: scpi_error needs a 'code' (e.g. -310)")
        if "after_s" not in values and "after_commands" not in values:
            if kind == "interlock_open":
                values["after_s"] = 0.0
            else:
                values["after_commands"] = 0
        out.append(FaultSpec(**values))
    return tuple(out)
