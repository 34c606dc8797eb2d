"""Handlers of ``wait`` and ``prompt``."""

from __future__ import annotations

from sequencer.errors import RunAborted
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, StepResult


def wait(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Settle; wakes at once for a stop request (signal, interlock)."""
    seconds = float(step.args["seconds"])
    if seconds > 0:
        ctx.sleep(seconds)
    return EMPTY_RESULT


def prompt(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Show a message; with ``enter``, keep the typed text as a reading of that name.

    Unattended (``--yes``) a plain message is recorded and passed; a prompt that wants a value
    cannot be answered without a terminal and aborts (cause ``operator``).
    """
    message = str(step.args["message"])
    name = step.args.get("enter")
    ask = ctx.options.prompt
    if ask is None:
        if name is None and ctx.options.unattended:
            return StepResult(results={"message": message, "answered": "unattended"})
        raise RunAborted(
            f"prompt needs an operator at a terminal: {message!r}",
            cause="operator",
            step_path=step.path,
        )
    text = ask(message, name is not None)
    if name is None:
        return StepResult(results={"message": message, "answered": "operator"})
    return StepResult(results={"message": message, "readings": {name: text}})


HANDLERS = {"wait": wait, "prompt": prompt}
