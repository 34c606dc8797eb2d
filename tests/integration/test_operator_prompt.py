"""Operator prompts on a real terminal (a pseudo-terminal): ``benchwright run`` in a child process
against a simulated bench in this process.

A prompt step waits for the operator while the bias is live here, so the checks are the ones a lab
needs: Ctrl-C or SIGTERM at the prompt stops the run at once (exit 3, DESIGN.md), the run is recorded
aborted, and the supply ends switched off at 0 V; a typed value is kept and the run completes.
"""

from __future__ import annotations

import pytest

from sequencer.store import Store
from tests.integration.safety_cli import (
    answer_on_terminal,
    run_args,
    sim_bench,
    supply_state,
    the_run,
    write_board,
)

EXIT_OK, EXIT_ABORT = 0, 3  # DESIGN.md exit codes

# 2 V at 5 V/s: far below the 70 V dc hazardous-live figure of IEC 61010-1 (from memory).
PROCEDURE = """\
name: prompt-check
version: "1"
board_type: PA8
roles: [bias]
hazards: [bias]
steps:
  - bias.ramp: {volts: 2 V, rate: 5 V/s}
  - prompt: {message: "Check the board's LED", enter: led_colour}
  - bias.ramp: {volts: 0 V, rate: 5 V/s}
  - bias.output: false
cleanup:
  - bias.output: false
"""


def run_on_terminal(tmp_path, answer: str) -> tuple[str, int, dict, str]:
    """Run, wait for the prompt, answer ``answer`` (text, or a signal's name sent meanwhile)."""
    db = f"sqlite:///{tmp_path / 'results.db'}"
    procedure = tmp_path / "prompt.yaml"
    procedure.write_text(PROCEDURE, encoding="utf-8")
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        args = run_args(procedure, bench, db, "--yes")
        text, code = answer_on_terminal(args, tmp_path, b"LED", answer)
        state = supply_state(sim)
    return text, code, state, db


@pytest.mark.parametrize("sig", ["SIGINT", "SIGTERM"])
def test_a_signal_at_a_prompt_aborts_and_leaves_the_supply_safe(tmp_path, sig):
    text, code, state, db = run_on_terminal(tmp_path, sig)
    assert code == EXIT_ABORT, text
    assert f"stopped by {sig} at an operator prompt" in text, text
    assert "Traceback" not in text
    assert state["ever_on"] is True  # it was live while the prompt waited
    assert state["output"] is False and state["setpoint"] == 0.0 and abs(state["volts"]) < 0.1
    run, _ = the_run(db)
    assert run.status == "aborted" and "operator prompt" in run.reason


def test_a_typed_value_is_kept_and_the_run_completes(tmp_path):
    text, code, state, db = run_on_terminal(tmp_path, "green")
    assert code == EXIT_OK, text
    assert state["output"] is False and abs(state["volts"]) < 0.1
    run, _ = the_run(db)
    assert run.status == "completed"
    with Store.open(db) as store:
        done = store.completed_steps(run.id)
    prompt = [s for path, s in done.items() if path.endswith("prompt")]
    assert len(prompt) == 1 and prompt[0].results["readings"] == {"led_colour": "green"}
