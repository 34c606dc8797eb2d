"""Limits files (``procedures/limits/<board type>.yaml``) and inline limits of a procedure.

A limits file::

    board_type: PA8
    version: "1"
    limits:
      - {quantity: gain, output: x1, low: 0.95, high: 1.05, unit: V/V, reason: "..."}

``decision_rule`` (optional, default ``simple``): ``simple``, ``guarded`` or ``{rule: guarded,
coverage_factor: 2}`` — how a value and its uncertainty become a verdict (:mod:`.decision`).

Each entry: ``quantity`` (a DESIGN.md quantity name), ``unit`` (that quantity's unit, written out so a
reader never guesses), ``low`` and/or ``high`` (inclusive; omit or null for an open side), optional
``output`` (omitted = every output) and ``reason``.  One entry per quantity and output.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap, YamlSeq, load_yaml, read_bounded
from sequencer.errors import ProcedureError
from sequencer.quantities import QUANTITY_UNITS

from .decision import DEFAULT_COVERAGE_K, DEFAULT_RULE, RULES, DecisionRule
from .keys import check_keys, require_keys, suggest
from .plan_model import Limit

LIMIT_KEYS = ("quantity", "output", "low", "high", "unit", "reason")
FILE_KEYS = ("board_type", "version", "description", "decision_rule", "limits")
RULE_KEYS = ("rule", "coverage_factor")


def parse_limit_list(raw: Any, location: Location, problems: list[Problem]) -> list[Limit]:
    """Limits of a YAML list; problems appended for bad entries (and duplicates)."""
    if not isinstance(raw, YamlSeq):
        problems.append(
            Problem(location, "limits: needs a list of {quantity, low, high, unit} entries")
        )
        return []
    found: list[Limit] = []
    first: dict[tuple[str, str | None], Location] = {}
    for i, entry in enumerate(raw):
        limit = _parse_entry(entry, raw.where(i), problems)
        if limit is None:
            continue
        key = (limit.quantity, limit.output)
        if key in first:
            problems.append(
                Problem(
                    raw.where(i),
                    f"second limit for {limit.quantity}"
                    f"{' on ' + limit.output if limit.output else ''} (first at line {first[key].line})",
                )
            )
            continue
        first[key] = raw.where(i)
        found.append(limit)
    return found


def _parse_entry(entry: Any, location: Location, problems: list[Problem]) -> Limit | None:
    if not isinstance(entry, YamlMap):
        problems.append(Problem(location, "a limit is a mapping {quantity, low, high, unit}"))
        return None
    before = len(problems)
    check_keys(entry, LIMIT_KEYS, problems, "a limit")
    require_keys(entry, ("quantity", "unit"), problems, "a limit")
    quantity, unit = entry.get("quantity"), entry.get("unit")
    known = isinstance(quantity, str) and quantity in QUANTITY_UNITS
    if "quantity" in entry and not known:
        problems.append(
            Problem(
                entry.where("quantity"),
                f"unknown quantity {quantity!r}{suggest(quantity, QUANTITY_UNITS)}",
            )
        )
    elif known and "unit" in entry and unit != QUANTITY_UNITS[quantity]:
        problems.append(
            Problem(
                entry.where("unit"), f"{quantity} is in {QUANTITY_UNITS[quantity]}, not {unit!r}"
            )
        )
    bounds = {side: _bound(entry, side, problems) for side in ("low", "high")}
    if bounds["low"] is None and bounds["high"] is None and len(problems) == before:
        problems.append(Problem(location, "a limit needs low, high or both"))
    low, high = bounds["low"], bounds["high"]
    if low is not None and high is not None and low > high:
        problems.append(Problem(entry.where("low"), f"low {low} is above high {high}"))
    output = entry.get("output")
    if output is not None and not isinstance(output, str):
        problems.append(Problem(entry.where("output"), "output: needs an output name such as x1"))
    reason = entry.get("reason", "")
    if not isinstance(reason, str):
        problems.append(Problem(entry.where("reason"), "reason: needs a text"))
    if len(problems) != before:
        return None
    return Limit(quantity=quantity, low=low, high=high, unit=unit, output=output, reason=reason)


def _bound(entry: YamlMap, side: str, problems: list[Problem]) -> float | None:
    value = entry.get(side)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        problems.append(
            Problem(entry.where(side), f"{side}: needs a number in the limit's unit, got {value!r}")
        )
        return None
    return float(value)


def parse_limits_text(text: str | bytes, file: str) -> tuple[Limit, ...]:
    """Limits of a limits file's text; :class:`ProcedureError` with every problem located."""
    data = load_yaml(text, file, error=ProcedureError)
    start = Location(file, 1, 1)
    problems: list[Problem] = []
    if not isinstance(data, YamlMap):
        raise ProcedureError([Problem(start, "a limits file is a mapping with a 'limits:' list")])
    check_keys(data, FILE_KEYS, problems, "a limits file")
    require_keys(data, ("board_type", "limits"), problems, "a limits file")
    limits = (
        parse_limit_list(data["limits"], data.where("limits"), problems) if "limits" in data else []
    )
    rule = _decision_rule(data, problems)
    limits = [dataclasses.replace(lim, rule=rule) for lim in limits]
    if problems:
        raise ProcedureError(problems)
    return tuple(limits)


def _decision_rule(data: YamlMap, problems: list[Problem]) -> DecisionRule:
    """``decision_rule: simple | guarded`` or ``{rule: guarded, coverage_factor: 2}``."""
    raw = data.get("decision_rule", DEFAULT_RULE)
    at = data.where("decision_rule")
    k: Any = DEFAULT_COVERAGE_K
    if isinstance(raw, YamlMap):
        check_keys(raw, RULE_KEYS, problems, "decision_rule")
        k = raw.get("coverage_factor", DEFAULT_COVERAGE_K)
        at, raw = raw.where("rule"), raw.get("rule", DEFAULT_RULE)
    if raw not in RULES:
        problems.append(Problem(at, f"decision_rule: needs one of {', '.join(RULES)}, got {raw!r}"))
        return DecisionRule()
    if isinstance(k, bool) or not isinstance(k, int | float) or not math.isfinite(k) or k <= 0:
        problems.append(Problem(at, f"coverage_factor: needs a number > 0, got {k!r}"))
        return DecisionRule()
    return DecisionRule(rule=str(raw), coverage_k=float(k))


def load_limits(path: str | Path) -> tuple[Limit, ...]:
    """Limits of the file at ``path``."""
    path = Path(path)
    try:
        raw = read_bounded(path)
    except OSError as exc:
        raise ProcedureError(
            [Problem(Location(str(path), 1, 1), f"cannot read limits file: {exc.strerror}")]
        ) from None
    return parse_limits_text(raw, str(path))


def merge_limits(base: Iterable[Limit], override: Iterable[Limit]) -> tuple[Limit, ...]:
    """``base`` with each (quantity, output) of ``override`` replaced or added."""
    merged = {(lim.quantity, lim.output): lim for lim in base}
    for lim in override:
        merged[(lim.quantity, lim.output)] = lim
    return tuple(merged.values())
