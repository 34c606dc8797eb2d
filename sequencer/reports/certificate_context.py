"""What a QA engineer needs beside the values: test conditions, the decision rule, the bias record
summarised, and why a value is missing.  Each is gathered from the stored run (never re-measured).

Decision rule: the one the run's stored limit set states (``decision_rule:``, described by
``sequencer.procedure.decision``); for a run that kept no limit set, simple acceptance — a value passes when it lies within its limits, its uncertainty is stated but not
used to guard the limits (ILAC-G8:09/2019 names this "simple acceptance", from memory).  The stored
uncertainties are one standard uncertainty (the analyses' one-sigma errors), so the coverage factor
is k = 1.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from typing import Any

SIMPLE_ACCEPTANCE = (
    "simple acceptance: a value passes when it lies within its limits; its uncertainty is stated, "
    "not used to guard the limits (ILAC-G8:09/2019, from memory)"
)
COVERAGE = "uncertainties are one standard uncertainty (coverage factor k = 1)"


def decision_rule(inputs: Iterable[Any]) -> tuple[str, str]:
    """(rule, coverage) as the run's stored limit set states them (``decision_rule:``, described by
    ``sequencer.procedure.decision``), else simple acceptance with standard uncertainties."""
    from sequencer.errors import ProcedureError
    from sequencer.procedure.limits import parse_limits_text

    for given in inputs:
        if given.kind != "limits":
            continue
        try:
            limits = parse_limits_text(given.text, given.name)
        except ProcedureError:
            continue
        rule = next((getattr(lim, "rule", None) for lim in limits), None)
        if rule is not None:
            return rule.describe(), (
                f"the ± column is the standard uncertainty u; the rule uses U = k·u with "
                f"k = {rule.coverage_k:g}"
            )
    return SIMPLE_ACCEPTANCE, COVERAGE


def conditions(parameters: Mapping[str, Any]) -> tuple[str, ...]:
    """The run's resolved parameters (pulse amplitudes, averages, temperatures...), one line each."""
    return tuple(f"{name} = {_plain(value)}" for name, value in sorted(parameters.items()))


def _plain(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_plain(v) for v in value) + "]"
    if isinstance(value, Mapping):
        return json.dumps(value, sort_keys=True, default=str)
    return str(value)


def bias_summary(events: Iterable[Any]) -> tuple[tuple[str, str], ...]:
    """The bias record in five lines: peak voltage and current, ramp rate, interlock, acknowledgement.

    ``()`` when the run made no voltage live (no safety event at all)."""
    events = list(events)
    if not events:
        return ()
    volts = [abs(float(v)) for e in events for k, v in dict(e.detail).items()
             if k in ("volts", "to_V", "from_V") and _finite(v)]
    amps = [abs(float(e.detail["current_A"])) for e in events
            if _finite(dict(e.detail).get("current_A"))]
    rates = [float(e.detail["rate_V_per_s"]) for e in events
             if _finite(dict(e.detail).get("rate_V_per_s"))]
    interlock = [e for e in events if e.kind == "interlock" or "interlock_closed" in dict(e.detail)]
    acks = [e for e in events if e.kind == "acknowledgement"]
    return (
        ("Peak bias voltage", f"{max(volts):.4g} V" if volts else "none read"),
        ("Peak bias current", f"{max(amps) * 1e9:.4g} nA" if amps else "none read"),
        ("Ramp rate", f"up to {max(rates):.3g} V/s" if rates else "no ramp"),
        ("Interlock", _interlock(interlock)),
        ("Acknowledgement", _acknowledgement(acks)),
    )


def _interlock(events: list[Any]) -> str:
    if not events:
        return "not checked"
    values = [dict(e.detail).get("closed", dict(e.detail).get("interlock_closed")) for e in events]
    states = [bool(v) for v in values if v is not None]  # None: a supply that cannot tell
    if not states:
        hardware = _hardware(events)
        declared = f"; hardware interlock declared: {hardware}" if hardware else ""
        return f"not readable from the supply{declared}"
    opened = states.count(False)
    return "closed at every check" if not opened else f"found open {opened} time(s) of {len(states)}"


def _acknowledgement(events: list[Any]) -> str:
    if not events:
        return "none recorded"
    d = dict(events[-1].detail)
    said = f"{d.get('mode', '?')} by {d.get('operator') or 'an unnamed operator'} at {d.get('at', '?')}"
    if d.get("hardware"):  # the run rested on a hardware interlock the software cannot read
        said += f", with the hardware interlock declared: {d['hardware']}"
    return said


def _hardware(events: list[Any]) -> str:
    """The bench's hardware-interlock declaration recorded with the run's events, or ''."""
    return next((str(dict(e.detail)["hardware"]) for e in events if dict(e.detail).get("hardware")), "")


def _finite(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def missing_reason(step: Any) -> str:
    """Why an analysis step stored no value (its recorded error), or ""."""
    results = dict(getattr(step, "results", None) or {})
    return str(results.get("error") or results.get("skipped") or "")
