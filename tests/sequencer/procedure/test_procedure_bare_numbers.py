"""A physical value carries its unit (issue 22): `wait: 20` was 20 s, `pulser.amplitude: 20` 20 mV.

A bare number is refused with what to write instead, at its line and column, whether written as a
literal, reached through a parameter or computed by an expression; counts stay bare; 0 is the same
in every unit and is accepted.
"""

from __future__ import annotations

import pytest

from sequencer.errors import ProcedureError
from sequencer.procedure import board_info, build_plan, load_procedure_text
from sequencer.procedure.kinds import KINDS

PA8 = board_info("PA8", "NR-PA8-0001")
HEAD = "name: t\nversion: '1'\nboard_type: PA8\nhazards: [bias]\n"


def problems(text: str) -> list[str]:
    try:
        build_plan(load_procedure_text(HEAD + text, "t.yaml"), PA8)
    except ProcedureError as exc:
        return [str(p) for p in exc.problems]
    return []


@pytest.mark.parametrize(
    ("step", "bare", "hint"),
    [
        ("wait: 20", "20", "write 20 ms or 20 s"),
        ("pulser.amplitude: 20", "20", "write 20 mV or 20 V"),
        ("pulser.shape: {width: 50}", "50", "write 50 ns or 50 us"),
        ("pulser.rate: 1000", "1000", "write 1000 Hz or 1000 kHz"),
        ("bias.ramp: {volts: 30, rate: 2 V/s}", "30", "write 30 V or 30 mV"),
        ("bias.limit: 10", "10", "write 10 uA or 10 nA"),
        ("counter.gate: 0.25", "0.25", "write 0.25 ms or 0.25 s"),
    ],
)
def test_a_bare_number_is_refused_at_its_place_with_what_to_write(step: str, bare: str, hint: str):
    # line 6: the four header lines, `steps:`, then the step; the column is the bare number's
    line = f"  - {step}"
    found = problems(f"steps:\n{line}\n")
    assert len(found) == 1, found
    assert found[0].startswith(f"t.yaml:6:{line.index(bare) + 1}: ")
    assert "has no unit" in found[0] and found[0].endswith(hint)


def test_a_bare_number_through_a_parameter_or_an_expression_is_refused_where_it_is_used():
    text = (
        "parameters:\n  settle: 20\n  amp: 40 mV\n"
        "steps:\n"
        '  - wait: "{settle}"\n'  # line 9
        '  - pulser.amplitude: "{amp / 1 mV}"\n'  # a number: mV over mV
    )
    found = problems(text)
    assert [p.split(": ", 1)[0] for p in found] == ["t.yaml:9:11", "t.yaml:10:23"]
    assert found[0].endswith("write 20 ms or 20 s") and found[1].endswith("write 40 mV or 40 V")


def test_a_bare_default_ramp_rate_is_refused():
    found = problems("defaults: {ramp_rate: 2}\nsteps:\n  - bias.ramp: {volts: 5 V}\n")
    assert found and "write 2 V/s" in found[0]


def test_counts_stay_bare_and_zero_needs_no_unit():
    text = (
        "steps:\n"
        "  - scope.average: 16\n"
        "  - pulser.burst: 3\n"
        "  - scope.timebase: {sample_rate: 1 GS/s, points: 500, pretrigger: 0}\n"
        "  - scope.trigger: {source: EXTernal, level: 0}\n"
        "  - wait: 0 s\n"
    )
    assert problems(text) == []


def test_every_argument_with_a_unit_refuses_a_bare_number():
    # the table of kinds is the contract: no argument with a physical dimension takes a bare 7
    from sequencer.procedure.convert import ConversionError, convert_arg
    from sequencer.procedure.units import DIMENSIONS

    with_units = [(k, a) for k in KINDS.values() for a in k.args if a.dimension in DIMENSIONS]
    assert len(with_units) > 30
    for kind, arg in with_units:
        with pytest.raises(ConversionError, match="has no unit: write 7 "):
            convert_arg(7, arg)
        assert convert_arg(0, arg) == 0.0, kind.name
