"""A board type may declare the test-pulse amplitudes its input accepts (issue 22: `validate`
accepted `pulser.amplitude: 5 V` and `-20 mV` on a PA8 without a word)."""

from __future__ import annotations

import pytest

from sequencer.errors import ProcedureError
from sequencer.procedure import board_info, build_plan, load_procedure_text
from sequencer.procedure.boards import parse_board_type

PA8 = board_info("PA8", "NR-PA8-0001")
HEAD = "name: t\nversion: '1'\nboard_type: PA8\nsteps:\n"


def problems(steps: str, board=PA8) -> list[str]:
    try:
        build_plan(load_procedure_text(HEAD + steps, "t.yaml"), board)
    except ProcedureError as exc:
        return [str(p) for p in exc.problems]
    return []


def test_the_shipped_pa8_declares_0_to_1_v():
    assert PA8.input_range_mV == (0.0, 1000.0)
    assert PA8.input_range_at.startswith(PA8.source)


@pytest.mark.parametrize(("amplitude", "shown"), [("5 V", "5000 mV"), ("-20 mV", "-20 mV")])
def test_an_amplitude_outside_the_range_is_refused_at_its_value(amplitude: str, shown: str):
    (found,) = problems(f"  - pulser.amplitude: {amplitude}\n")
    assert found.startswith("t.yaml:5:23: pulser.amplitude: ")
    assert f"{shown} is outside the input range 0 to 1000 mV of board type PA8" in found
    assert "input_range at " in found and "PA8.yaml" in found


def test_a_sweep_beyond_the_range_is_said_once_and_the_edges_are_allowed():
    swept = "  - sweep: {amp: [0 mV, 500 mV, 1 V, 1.2 V, 2 V]}\n    do:\n      - pulser.amplitude: \"{amp}\"\n"
    found = problems(swept)
    assert len(found) == 1 and "1200 mV" in found[0]  # the first value beyond, once for the step
    assert problems("  - pulser.amplitude: 1 V\n  - pulser.amplitude: 0 mV\n") == []


def test_a_sine_counts_its_peaks_around_the_offset():
    assert problems("  - pulser.sine: {frequency: 1 MHz, amplitude: 400 mV, offset: 500 mV}\n") == []
    (found,) = problems("  - pulser.sine: {frequency: 1 MHz, amplitude: 400 mV, offset: 700 mV}\n")
    assert "300 to 1100 mV is outside" in found


def test_a_board_type_without_a_range_checks_nothing_and_a_bad_range_is_located():
    free = parse_board_type("board_type: T\nchannels: 1\noutputs: {x1: {nominal_gain: 1}}\n", "t.yaml")
    assert free.input_range_mV is None
    assert problems("  - pulser.amplitude: 5 V\n", board_info(free, "S")) == []
    with pytest.raises(ProcedureError) as exc:
        parse_board_type(
            "board_type: T\nchannels: 1\noutputs: {x1: {}}\ninput_range: [1 V, 10]\n", "t.yaml"
        )
    (problem,) = exc.value.problems
    assert (problem.location.line, problem.location.column) == (4, 14)
    assert "e.g. [0 mV, 1 V]" in problem.message


def test_a_threshold_outside_the_declared_range_is_refused():
    assert PA8.threshold_range_mV == (-1000.0, 1000.0)
    assert problems("  - threshold.level: {channel: 1, mV: -500 mV}\n") == []
    (found,) = problems("  - threshold.level: {channel: 1, mV: 1.5 V}\n")
    assert found.startswith("t.yaml:5:39: threshold.level: 1500 mV is outside the threshold range")
    assert "threshold_range at " in found
