"""Carrying out one dialect operation over a session: its steps in order, each reply parsed.

``write`` steps go through :meth:`ScpiSession.write` (error-queue check as the dialect says, with
the operation's timeout), ``query`` steps through :meth:`ScpiSession.query_parsed` with the reply
rule (a reply the rule cannot read is a ``ProtocolError``, retried once after a resync), ``wait``
sleeps a bounded time, ``poll`` repeats a query until its condition holds or its own deadline
passes (then :class:`InstrumentTimeout`).  A step with ``when:`` runs only when its condition holds.
Both waits look at the session's ``stop_check`` (the run's stop flag) and give up with
:class:`ReadStopped` when a stop was requested.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from typing import Any

from drivers.dialect import Dialect
from drivers.dialect_ops import Operation, Step
from drivers.errors import ConfigError, InstrumentTimeout, Problem, ReadStopped
from drivers.scpi.replies import ReplyRule, parse_reply
from drivers.scpi.session import ScpiSession
from drivers.scpi.templates import ExpressionError


def perform(
    session: ScpiSession,
    dialect: Dialect,
    op: Operation,
    values: Mapping[str, Any],
    *,
    reapply: bool = True,
    key: str | None = None,
    timeout_ms: int | None = None,
    track: bool = True,
) -> Any:
    """Run ``op`` with ``values`` (fields and current settings); the last query's parsed reply.
    ``track``: whether its writes may be skipped when unchanged (see :meth:`ScpiSession.write`)."""
    result: Any = None
    wait_ms = op.timeout_ms or timeout_ms
    with session.lock:
        for index, step in enumerate(op.steps):
            if step.when is not None and not _holds(op, step, step.when, values):
                continue
            if step.action == "wait":
                _pause(session, step.seconds, f"{op.role}.{op.name}")
                continue
            assert step.template is not None
            text = dialect.render(op, step.template, values)
            step_ms = step.timeout_ms or wait_ms
            if step.action == "write":
                step_key = key if index == 0 or key is None else f"{key}#{index}"
                session.write(text, reapply=reapply, key=step_key, check=op.check_errors,
                              timeout_ms=step_ms, track=track)  # fmt: skip
            elif step.action == "query":
                result = query(session, text, op.returns or "str", _rule(op, step), step_ms)
            else:
                result = _poll(session, op, step, text, values)
    return result


def query(
    session: ScpiSession, command: str, kind: str, rule: ReplyRule, timeout_ms: int | None
) -> Any:
    """One query, its reply read by ``rule`` as ``kind``."""
    return session.query_parsed(
        command, lambda reply: parse_reply(reply, kind, rule), timeout_ms=timeout_ms
    )


def _rule(op: Operation, step: Step) -> ReplyRule:
    return op.reply if step.reply is None else step.reply


def _poll(
    session: ScpiSession, op: Operation, step: Step, command: str, values: Mapping[str, Any]
) -> Any:
    """Query until ``until`` holds over ``value``; its own deadline (default: the OPC timeout)."""
    limit_ms = step.timeout_ms or op.timeout_ms or session.opc_timeout_ms
    deadline = time.monotonic() + limit_ms / 1000.0
    assert step.until is not None
    while True:
        value = query(session, command, "float", _rule(op, step), None)
        if _holds(op, step, step.until, {**values, "value": value}):
            return value
        if time.monotonic() >= deadline:
            raise InstrumentTimeout(
                f"{op.role}.{op.name}: {step.until.text!r} did not hold within {limit_ms} ms "
                f"(last value {value!r})",
                address=session.address,
                command=command,
            )
        _pause(session, step.every_s, f"{op.role}.{op.name}")


#: A pause looks at the stop flag at least this often (seconds).
STOP_SLICE_S = 0.1


def _pause(session: ScpiSession, seconds: float, what: str) -> None:
    """Sleep ``seconds`` in slices, giving up when the session's stop check says so."""
    end = time.monotonic() + seconds
    while True:
        if session.stop_check is not None and session.stop_check():
            raise ReadStopped(f"{what}: wait given up by a stop request", address=session.address)
        left = end - time.monotonic()
        if left <= 0:
            return
        time.sleep(min(left, STOP_SLICE_S))


def _holds(op: Operation, step: Step, condition: Any, values: Mapping[str, Any]) -> bool:
    try:
        return bool(condition.evaluate(values))
    except ExpressionError as exc:
        raise ConfigError([Problem(step.location, f"{op.role}.{op.name}: {exc}")]) from None
