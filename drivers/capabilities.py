"""Capabilities declared, never faked: what each role must be able to do, what may be declared
absent (and what the driver then does instead), and the queries that can never report a state.

* :data:`NEEDED`: the operations the shipped step kinds use, per role.  A bench entry whose dialect
  lacks one (neither written nor declared ``absent``) is refused at load, located.
* :data:`FALLBACKS`: the only needed operations that may be declared absent, with what happens then.
  A supply without a slew command is ramped by the driver in software at the bench's permitted
  rate, reading back as it goes; a supply whose interlock cannot be read is usable only when the
  bench file declares a hardware interlock on its inhibit input (``hardware_interlock:``), and the
  operator acknowledges it for each run.
* :func:`faked_state_problems`: ``interlock_closed`` and ``tripped`` must ask the instrument for that
  state.  A query that answers the same whatever the state (``*OPC?``, ``*IDN?``, a word map with one
  answer, a pattern without a capture) would report safety that is not measured: refused at load.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import TYPE_CHECKING

from drivers.dialect_ops import Operation
from drivers.errors import Location, Problem

if TYPE_CHECKING:
    from drivers.dialect import Dialect

# fmt: off
NEEDED: dict[str, tuple[str, ...]] = {
    "pulser": ("set_amplitude", "set_width", "set_leading_edge", "set_trailing_edge",
               "set_frequency", "set_burst_count", "set_burst_state", "set_trigger_source",
               "trigger", "set_output"),
    "scope": ("set_range", "set_offset", "set_sample_rate", "set_points", "set_average_count",
              "set_trigger_source", "set_trigger_level", "set_trigger_delay", "acquire"),
    "threshold": ("set_level",),
    "counter": ("set_gate_time", "select_channel", "start", "counts"),
    "bias": ("set_voltage", "get_voltage_setpoint", "set_ramp_rate", "set_current_limit",
             "set_output", "get_output", "measure_voltage", "measure_current", "interlock_closed",
             "tripped"),
    "switch": ("route", "inject", "open_all"),
}
# fmt: on

FALLBACKS: Mapping[tuple[str, str], str] = {
    ("bias", "set_ramp_rate"): "the driver ramps in software at the bench's permitted rate, "
    "reading back as it goes",
    ("bias", "get_ramp_rate"): "the ramp rate is the driver's own (software ramp)",
    ("bias", "interlock_closed"): "usable only with a hardware interlock on the supply's inhibit "
    "input declared in the bench file (hardware_interlock:) and acknowledged for each run",
    ("bias", "clear_trip"): "a trip is cleared at the supply by hand",
    ("bias", "set_keep_alive"): "a supply left live by a runner that died stays live until "
    "`benchwright safe --bench FILE` or a hand switches it off",
}

#: Operations whose reply is a safety state the runner decides on.
STATE_QUERIES = (("bias", "interlock_closed"), ("bias", "tripped"))
#: IEEE 488.2 common queries (§10, from memory): none of them reports an interlock or a trip.
NOT_A_STATE = ("*OPC?", "*IDN?", "*TST?", "*OPT?", "*ESE?", "*SRE?", "*LRN?", "*CAL?", "*PSC?")


def faked_state_problems(operations: Mapping[tuple[str, str], Operation]) -> list[Problem]:
    """Problems with the queries that must report a real state (checked when a dialect loads)."""
    problems: list[Problem] = []
    for key in STATE_QUERIES:
        op = operations.get(key)
        if op is None or op.absent:
            continue
        label = f"{op.role}.{op.name}"
        reason = _why_not_a_state(op)
        if reason:
            problems.append(Problem(op.location, f"{label} {reason}: it cannot report the state, "
                                                 "so it would report safety that is not measured"))  # fmt: skip
    return problems


def _why_not_a_state(op: Operation) -> str:
    step = op.single
    if step is None or step.template is None:
        return "is a sequence, not one query of the state"
    if step.when is not None:
        return "is conditional"
    text = step.template.text.strip()
    header = text.split(" ", 1)[0].upper()
    if header in NOT_A_STATE or any(text.upper().startswith(h) for h in NOT_A_STATE):
        return f"asks {header!r}, which answers the same whatever the state"
    if "?" not in text:
        return f"sends {text!r}, which asks the instrument nothing"
    if step.template.names:
        return f"puts fields into {text!r}, so the question depends on the driver, not the supply"
    rule = op.reply
    if rule.words and len(set(map(repr, rule.words.values()))) < 2:
        return "maps every reply to the same value"
    if (
        rule.pattern
        and rule.bit is None
        and not rule.words
        and re.compile(rule.pattern).groups == 0
    ):
        return "reads a pattern without a (capture), so every match reads the same"
    return ""


def role_problems(
    dialect: Dialect, role: str, *, hardware_interlock: str, entry: Location
) -> list[Problem]:
    """What ``dialect`` lacks for ``role`` as the shipped steps use it (``entry``: the bench entry)."""
    ops, source, name = dialect.operations, dialect.source, dialect.name
    problems: list[Problem] = []
    for op in NEEDED.get(role, ()):
        found = ops.get((role, op))
        if found is None:
            problems.append(Problem(entry, f"{role}: dialect {name!r} ({source}) has no "
                                           f"{role}.{op}, which the shipped steps need; write it"
                                           + (" or declare it absent" if (role, op) in FALLBACKS
                                              else "")))  # fmt: skip
        elif found.absent and (role, op) not in FALLBACKS:
            problems.append(Problem(found.location, f"{role}.{op} is declared absent, but the "
                                                    "shipped steps need it and nothing may stand "
                                                    "in for it"))  # fmt: skip
        elif found.absent and op == "interlock_closed" and not hardware_interlock:
            problems.append(Problem(entry, f"{role}: the dialect cannot read the interlock "
                                           f"(declared absent at {found.location}); the supply is "
                                           "usable only with a hardware interlock on its inhibit "
                                           "input: say how it is wired in 'hardware_interlock:'"))  # fmt: skip
    if role == "scope" and dialect.waveform is None:
        legacy = [op for op in ("preamble", "fetch") if (role, op) not in ops]
        if legacy:
            problems.append(Problem(entry, f"scope: dialect {name!r} ({source}) says neither how "
                                           "a record is read ('waveform:') nor has "
                                           f"{', '.join(legacy)}"))  # fmt: skip
    return problems


def absences(dialect: Dialect, role: str) -> list[str]:
    """One line per operation of ``role`` declared absent, with what the driver does instead."""
    out = []
    for (r, op), found in dialect.operations.items():
        if r == role and found.absent:
            what = FALLBACKS.get((r, op), "not used by the shipped steps")
            out.append(f"{r}.{op} absent ({found.absent}): {what}")
    return out
