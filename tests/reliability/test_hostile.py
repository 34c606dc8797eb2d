"""Whole runs against a hostile instrument (issue 19, item 4): ``benchwright run`` in a child
process, the bench's supply or scope reached through the lying TCP proxy of ``hostile.py``, the
simulator behind it keeping the truth.

Each run must end by itself (the subprocess timeout is a failure guard, not a bound under test),
with exit 3 (DESIGN.md: run aborted), no traceback, and the simulated supply -- read from the
simulator's own objects after the CLI has exited -- off, at 0 V, with its set point at 0 V.
The lies start once the bias is live, when they can do harm.
"""

from __future__ import annotations

import signal
import subprocess
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import yaml

from drivers.sim import load_board, start_sim_bench
from tests.reliability import kit
from tests.reliability.hostile import (
    SCPI_NAN,
    HostileProxy,
    Lie,
    alternating,
    endless,
    header_then_silence,
    text,
)

TOL = 0.1  # V: the engine's ramp tolerance; the simulated meter's noise is 1 mV rms
TIMEOUT_MS = 1000  # a silent instrument costs a few short timeouts


def supply_truth(sim: Any) -> dict[str, Any]:
    bias = sim.instruments["bias"]
    return {
        "output": bias.settings.output_on,
        "volts": bias.voltage_at(bias.clock()),
        "setpoint": bias.settings.setpoint_V,
        "ever_on": bias.first_on is not None,
    }


def live(sim: Any) -> Callable[[], bool]:
    bias = sim.instruments["bias"]
    return lambda: bias.settings.output_on


def was_live_now_off(sim: Any) -> Callable[[], bool]:
    bias = sim.instruments["bias"]
    return lambda: bias.first_on is not None and not bias.settings.output_on


def port_of(address: str) -> int:
    return int(address.split("::")[2])


def hostile_run(
    tmp_path: Path,
    role: str,
    lies: Callable[[Any], list[Lie]],
    *,
    during: Callable[[subprocess.Popen, list[Lie]], None] | None = None,
) -> tuple[int, str, dict[str, Any], list[Lie]]:
    """Run kit.PROCEDURE with ``role`` behind the proxy telling ``lies(sim)``; (exit code, stderr,
    the supply's truth afterwards, the lies)."""
    board = kit.write_board(tmp_path)
    url = f"sqlite:///{tmp_path / 'results.db'}"
    with start_sim_bench(load_board(board)) as sim:
        bench = kit.write_bench(sim, tmp_path, timeout_ms=TIMEOUT_MS)
        data = yaml.safe_load(bench.read_text())
        told = lies(sim)
        upstream = ("127.0.0.1", port_of(data["instruments"][role]["address"]))
        with HostileProxy(upstream, told) as proxy:
            data["instruments"][role]["address"] = proxy.address
            bench.write_text(yaml.safe_dump(data, sort_keys=False))
            child = subprocess.Popen(
                kit.cli_command(*kit.run_args(url, bench=bench)),
                cwd=tmp_path,
                env=kit.cli_env(),
                stdin=subprocess.DEVNULL,
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                text=True,
            )
            try:
                if during is not None:
                    during(child, told)
                out, err = child.communicate(timeout=kit.CLI_TIMEOUT_S)  # a failure guard
            finally:
                if child.poll() is None:
                    child.kill()
                    child.communicate()
        truth = supply_truth(sim)
    assert kit.no_traceback(out, err), err
    return child.returncode, err, truth, told


def assert_safe(truth: dict[str, Any]) -> None:
    assert truth["ever_on"], truth  # the run did go live: the lie met a live bias
    assert truth["output"] is False and abs(truth["volts"]) < TOL, truth
    assert truth["setpoint"] == 0.0, truth


def test_a_supply_reading_not_a_number_while_live(tmp_path):
    code, err, truth, lies = hostile_run(
        tmp_path, "bias", lambda sim: [Lie("MEASure:VOLT", text(SCPI_NAN), live(sim))]
    )
    assert code == kit.EXIT_ABORT, err
    assert "implausible" in err and lies[0].told >= 1
    assert_safe(truth)


@pytest.mark.parametrize("reply", [SCPI_NAN, b"NAN"], ids=["9.91E+37", "NAN"])
def test_a_current_that_cannot_be_read_aborts_instead_of_passing(tmp_path, reply):
    code, err, truth, lies = hostile_run(
        tmp_path, "bias", lambda sim: [Lie("MEASure:CURR", text(reply), live(sim))]
    )
    assert code == kit.EXIT_ABORT, err
    assert "current" in err and "UNSAFE" not in err and lies[0].told >= 1
    assert_safe(truth)


def test_an_output_that_claims_to_be_on_after_it_was_switched_off(tmp_path):
    # The safe state cannot be confirmed: UNSAFE, naming the command that makes the bench safe;
    # the real supply is off.
    code, err, truth, lies = hostile_run(
        tmp_path, "bias", lambda sim: [Lie("OUTPut:STATe?", text(b"1"), was_live_now_off(sim))]
    )
    assert code == kit.EXIT_ABORT, err
    assert "UNSAFE" in err and "benchwright safe --bench" in err and lies[0].told >= 1
    assert_safe(truth)


def test_a_flapping_interlock_while_live(tmp_path):
    code, err, truth, lies = hostile_run(
        tmp_path,
        "bias",
        lambda sim: [Lie("SYSTem:INT", alternating(b"1", b"0"), live(sim))],
    )
    assert code == kit.EXIT_ABORT, err
    assert "interlock" in err and lies[0].told >= 2
    assert_safe(truth)


@pytest.mark.parametrize(
    "answer",
    [
        endless(b"#0", bytes(range(256)) * 16),
        endless(b"#0", b"\n" * 256),
        header_then_silence(b"#9536870912"),
    ],
    ids=["endless-#0", "newline-flood", "512MiB-header"],
)
def test_a_scope_block_that_never_ends_while_the_bias_is_live(tmp_path, answer):
    code, err, truth, lies = hostile_run(
        tmp_path, "scope", lambda sim: [Lie("TRACe:DATA?", answer, live(sim))]
    )
    assert code == kit.EXIT_ABORT, err
    assert "scope at" in err and lies[0].told >= 1
    assert_safe(truth)


def test_sigterm_while_a_scope_block_hangs_and_the_bias_is_live(tmp_path):
    def terminate_once_told(child: subprocess.Popen, told: list[Lie]) -> None:
        for _ in range(1200):  # a guard of 60 s: the lie is told within a second or two
            if told[0].told or child.poll() is not None:
                break
            time.sleep(0.05)
        child.send_signal(signal.SIGTERM)

    code, err, truth, lies = hostile_run(
        tmp_path,
        "scope",
        lambda sim: [Lie("TRACe:DATA?", header_then_silence(b"#6001000"), live(sim))],
        during=terminate_once_told,
    )
    assert lies[0].told >= 1
    assert code == kit.EXIT_ABORT, err
    assert_safe(truth)
