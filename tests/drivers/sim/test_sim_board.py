"""Board file loading: DESIGN.md keys, documented defaults, located errors with "did you mean"."""

from __future__ import annotations

from pathlib import Path

import pytest

from drivers.errors import ConfigError
from drivers.sim import load_board

EXAMPLE = Path(__file__).parents[3] / "drivers" / "sim" / "boards" / "example-pa8.yaml"


def test_example_board_loads_with_design_keys():
    board = load_board(EXAMPLE)
    assert board.serial == "NR-PA8-0001" and len(board.channels) == 8
    assert board.shaper.order == 4 and board.shaper.kind == "unipolar"
    assert not any(ch.dead for ch in board.channels)
    assert board.adc_bits == 12 and board.time_scale == 0.0 and board.polarity == "positive"
    assert board.pulse.tau_rise_ns < board.pulse.tau_decay_ns


def test_unknown_keys_are_located_with_a_suggestion(tmp_path):
    path = tmp_path / "b.yaml"
    path.write_text(
        "serial: NR-PA8-0002\ncrosstalk_pc: 1.0\nchannels:\n  - {gain_x1: 1.0, noise_in_mv: 0.3}\n"
    )
    with pytest.raises(ConfigError) as exc:
        load_board(path)
    text = str(exc.value)
    assert (
        f"{path}:2:1: unknown key 'crosstalk_pc'" in text and "did you mean 'crosstalk_pct'" in text
    )
    assert f"{path}:4:20: unknown key 'noise_in_mv'" in text and "'noise_in_mV'" in text


def test_bad_values_are_all_reported_with_locations(tmp_path):
    path = tmp_path / "b.yaml"
    path.write_text(
        "serial: NR-PA8-0003\n"
        "shaper: {order: 0, tau_ns: 50, kind: tripolar}\n"
        "pulse: {rise_ns: 50, decay_ns: 10}\n"
        "faults:\n"
        "  - {kind: scpi_error}\n"
        "  - {kind: interlock_open, role: scope}\n"
        "  - {kind: meltdown}\n"
        "channels:\n"
        "  - {gain_x1: -1, dead: maybe}\n"
    )
    with pytest.raises(ConfigError) as exc:
        load_board(path)
    lines = str(exc.value).splitlines()
    expected = [
        (":2:17:", "shaper.order"),
        (":2:38:", "shaper.kind"),
        (":3:8:", "pulse:"),
        (":5:5:", "needs a 'code'"),
        (":6:34:", "interlock_open acts on the bias supply"),
        (":7:12:", "faults[3].kind"),
        (":9:15:", "gain_x1"),
        (":9:25:", "dead"),
    ]
    assert len(lines) == len(expected)
    for line, (where, what) in zip(lines, expected, strict=True):  # in file order
        assert f"{path}{where}" in line and what in line, (where, what, line)


def test_missing_required_keys_and_yaml_errors(tmp_path):
    path = tmp_path / "b.yaml"
    path.write_text("outputs: {x1: 1.0}\n")
    with pytest.raises(ConfigError, match="missing required key 'serial'"):
        load_board(path)
    path.write_text("serial: [unclosed\n")
    with pytest.raises(ConfigError, match="YAML syntax"):
        load_board(path)
    with pytest.raises(ConfigError, match="cannot read board file"):
        load_board(tmp_path / "absent.yaml")


def test_fault_defaults():
    from drivers.sim import board_from_mapping

    board = board_from_mapping(
        {
            "serial": "X",
            "channels": [{}],
            "faults": [{"kind": "no_reply"}, {"kind": "interlock_open"}],
        }
    )
    no_reply, interlock = board.faults
    assert (no_reply.role, no_reply.after_commands, no_reply.after_s) == ("scope", 0, None)
    assert (interlock.role, interlock.after_s) == ("bias", 0.0)


def test_output_polarity_per_output_and_its_errors(tmp_path):
    # issue 15: any output may swing negative; the shaped one only when named
    path = tmp_path / "b.yaml"
    path.write_text(
        "serial: NR-PA8N-0009\npolarity: negative\noutput_polarity: {shaped: negative}\n"
        "channels:\n  - {gain_x1: 1.0}\n"
    )
    board = load_board(path)
    assert (board.sign("x1"), board.sign("x5"), board.sign("shaped")) == (-1, -1, -1)
    path.write_text("serial: NR-PA8-0009\noutput_polarity: {x5: negative}\nchannels:\n  - {}\n")
    board = load_board(path)
    assert (board.sign("x1"), board.sign("x5"), board.sign("shaped")) == (1, -1, 1)
    path.write_text("serial: NR-PA8-0009\noutput_polarity: {x5: inverted}\nchannels:\n  - {}\n")
    with pytest.raises(ConfigError, match=r"b.yaml:2:\d+: output_polarity.x5: expected one of"):
        load_board(path)


def test_output_baselines_per_output_and_their_errors(tmp_path):
    # issue 15: x1 and x5 sit behind different stages, so their DC levels differ; an output not
    # named sits at the channel's baseline_mV
    import numpy as np

    from drivers.sim.response import output_signal_mV

    path = tmp_path / "b.yaml"
    path.write_text(
        "serial: NR-PA8-0010\nchannels:\n"
        "  - {baseline_mV: 0.5, output_baseline_mV: {x1: 12.0, x5: -12}}\n  - {baseline_mV: -3}\n"
    )
    board = load_board(path)
    first, second = board.channels
    assert [first.baseline(o) for o in ("x1", "x5", "shaped")] == [12.0, -12.0, 0.5]
    assert [second.baseline(o) for o in ("x1", "x5", "shaped")] == [-3.0] * 3
    quiet = output_signal_mV(board, 1, "x5", injected=None, amplitude_mV=0.0, t_ns=np.zeros(4))
    assert np.all(quiet == -12.0)  # no pulse: the output's own DC level
    path.write_text(
        "serial: NR-PA8-0010\nchannels:\n  - {output_baseline_mV: {x9: 1.0}}\n"
        "  - {output_baseline_mV: {x1: 9000}}\n  - {output_baseline_mV: 3}\n"
    )
    with pytest.raises(ConfigError) as exc:
        load_board(path)
    lines = str(exc.value).splitlines()
    assert len(lines) == 3
    assert ":3:" in lines[0] and "unknown output 'x9'" in lines[0]
    assert ":4:" in lines[1] and "x1:" in lines[1] and "5000" in lines[1]
    assert ":5:" in lines[2] and "expected a mapping" in lines[2]


def test_channels_as_a_count_take_the_defaults(tmp_path):
    from drivers.sim import board_from_mapping
    from drivers.sim.board import ChannelSpec

    board = board_from_mapping({"serial": "X", "channels": 4})
    assert board.channels == (ChannelSpec(),) * 4
    for bad in (0, 100, True, "4"):
        with pytest.raises(ConfigError, match=r"or a count 1\.\.99"):
            board_from_mapping({"serial": "X", "channels": bad})
