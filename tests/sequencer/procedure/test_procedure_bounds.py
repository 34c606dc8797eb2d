"""Hostile procedures are refused with their location, in bounded memory (issue 19 item 6):
expressions in floats with bounded magnitude and text length, sweeps counted before they are
expanded, texts checked for what the store and the SCPI wire accept.

Memory is measured with tracemalloc (a count of bytes, the same on an idle and a loaded machine);
no test here bounds wall-clock time.
"""

from __future__ import annotations

import tracemalloc
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from sequencer.procedure import validate_paths
from sequencer.procedure.expressions import MAX_INTEGER, MAX_TEXT
from sequencer.store.models import Run

HEAD = 'name: hostile\nversion: "1"\nboard_type: PA8\n'
WAIT = "steps:\n  - wait: 1 s\n"
PEAK = 64 * 2**20  # far below what any of these would take if expanded


def peak_of(call: Callable[[], Any]) -> tuple[Any, int]:
    tracemalloc.start()
    try:
        result = call()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return result, peak


def problems_of(tmp_path: Path, text: str) -> list[str]:
    path = tmp_path / "p.yaml"
    path.write_text(text)
    found, peak = peak_of(lambda: validate_paths([path]))
    assert peak < PEAK, peak
    return [str(p).replace(str(tmp_path) + "/", "") for p in found]


def parameters(lines: list[str]) -> str:
    return "parameters:\n" + "".join(f"  {line}\n" for line in lines)


def test_a_parameter_squaring_itself_stays_a_bounded_float(tmp_path: Path) -> None:
    # 3^(2^30) has half a billion digits as a Python integer; as a float it overflows at p10
    chain = ["p0: 3"] + [f'p{i}: "{{p{i - 1} * p{i - 1}}}"' for i in range(1, 31)]
    found = problems_of(tmp_path, HEAD + parameters(chain) + WAIT)
    # 3^(2^9) = 1.9e244 is finite; 3^(2^10) = 3.7e488 is not (IEEE 754 binary64 max 1.8e308)
    assert found[0].startswith("p.yaml:15:8: result is not a finite number"), found


def test_whole_numbers_stay_exact_up_to_2_53_then_continue_as_floats(tmp_path: Path) -> None:
    from sequencer.procedure.evaluate import evaluate
    from sequencer.procedure.expressions import parse_expression

    assert evaluate(parse_expression("3 * 4"), {}) == 12
    assert isinstance(evaluate(parse_expression("3 * 4"), {}), int)
    big = evaluate(parse_expression(f"{MAX_INTEGER} * 4"), {})
    assert isinstance(big, float) and big == float(MAX_INTEGER * 4)  # 2**55 is exact in binary64
    found = problems_of(tmp_path, HEAD + parameters([f'n: "{{{"9" * 400}}}"']) + WAIT)
    assert found and "number too large to be a finite float" in found[0], found


@pytest.mark.parametrize(
    "double",
    ['s{i}: "{{s{j} + s{j}}}"', 's{i}: "{{s{j}}}{{s{j}}}"'],
    ids=["concatenation", "interpolation"],
)
def test_doubling_a_text_is_refused_at_its_bound(tmp_path: Path, double: str) -> None:
    chain = ['s0: "abcdefgh"'] + [double.format(i=i, j=i - 1) for i in range(1, 40)]
    found = problems_of(tmp_path, HEAD + parameters(chain) + WAIT)
    # 8 * 2^9 = 4096 fits; s10 (8,192 characters) is the first too long
    assert found[0].startswith("p.yaml:15:8: text longer than 4096 characters"), found
    assert MAX_TEXT == 4096


def test_a_sweep_product_is_counted_before_it_is_built(tmp_path: Path) -> None:
    ranges = ", ".join(f"{v}: {{range: [1, 10000, 1]}}" for v in "abc")
    text = HEAD + f"steps:\n  - sweep: {{{ranges}}}\n    do:\n      - wait: 1 s\n"
    found = problems_of(tmp_path, text)
    assert found == [
        "p.yaml:5:5: the sweep has 10000 x 10000 x 10000 = 1,000,000,000,000 combinations, "
        "above 100,000"
    ]


def test_nested_sweeps_making_no_step_are_still_bounded(tmp_path: Path) -> None:
    text = HEAD + (
        "steps:\n  - sweep: {a: {range: [1, 10000, 1]}}\n    do:\n"
        "      - sweep: {b: {range: [1, 10000, 1]}}\n        do:\n"
        '          - wait: 1 s\n            when: "{false}"\n'
    )
    found = problems_of(tmp_path, text)
    assert len(found) == 1 and found[0].startswith("p.yaml:7:9: the plan's loops and sweeps would")
    assert "(10,000 here, inside loops of 10,000)" in found[0]


def test_an_endless_range_is_refused_before_it_is_counted_out(tmp_path: Path) -> None:
    text = HEAD + "parameters:\n  r: {range: [0 V, 1e300 V, 1e-300 V]}\n" + WAIT
    found = problems_of(tmp_path, text)
    assert len(found) == 1 and found[0].startswith("p.yaml:5:6: range has endless values"), found


def test_a_range_of_exactly_the_limit_still_plans(tmp_path: Path) -> None:
    text = HEAD + "parameters:\n  r: {range: [1, 10000, 1]}\n" + WAIT  # 10,000 = MAX_SERIES
    assert problems_of(tmp_path, text) == []


# -- texts the store and the wire accept ---------------------------------------------------------


def test_procedure_name_longer_than_its_column_is_refused(tmp_path: Path) -> None:
    column = Run.__table__.c.procedure.type.length  # the store's runs.procedure column
    assert column == 200
    fits = f'name: {"n" * column}\nversion: "1"\nboard_type: PA8\n' + WAIT
    assert problems_of(tmp_path, fits) == []
    too_long = f'name: {"n" * (column + 1)}\nversion: "1"\nboard_type: PA8\n' + WAIT
    assert problems_of(tmp_path, too_long) == [
        "p.yaml:1:7: name is 201 characters long, above the 200 the results database keeps"
    ]


@pytest.mark.parametrize(
    ("field", "value", "expected"),
    [
        (
            "name",
            '"a\\x07b"',
            "p.yaml:1:7: name holds the control character '\\x07' at character 2",
        ),
        ("name", '"a\\ud800b"', "p.yaml:1:7: bad value 'a\\ud800b': a lone surrogate is not text"),
        ("version", '"1\\n2"', "p.yaml:2:10: version holds the control character '\\n'"),
    ],
)
def test_control_characters_and_lone_surrogates_are_refused(
    tmp_path: Path, field: str, value: str, expected: str
) -> None:
    lines = {"name": "hostile", "version": '"1"'}
    lines[field] = value
    text = f"name: {lines['name']}\nversion: {lines['version']}\nboard_type: PA8\n" + WAIT
    found = problems_of(tmp_path, text)
    assert len(found) == 1 and found[0].startswith(expected), found


def test_a_newline_in_an_scpi_argument_is_refused_but_allowed_in_a_message(tmp_path: Path) -> None:
    # IEEE 488.2: a newline ends a program message; "EXT\n*RST" would send a second command
    scpi = HEAD + 'roles: [scope]\nsteps:\n  - scope.trigger: {source: "EXT\\n*RST", level: 0 mV}\n'
    found = problems_of(tmp_path, scpi)
    assert found == [
        "p.yaml:6:29: scope.trigger: source holds the control character '\\n' at character 4 "
        "(one line of printable text is expected)"
    ]
    message = HEAD + 'steps:\n  - prompt: "Mount the board.\\nThen close the lid."\n'
    assert problems_of(tmp_path, message) == []


def test_an_interpolated_scpi_argument_is_checked_after_resolution(tmp_path: Path) -> None:
    text = HEAD + (
        'roles: [scope]\nparameters:\n  src: "EXT\\r"\n'
        'steps:\n  - scope.trigger: {source: "{src}", level: 0 mV}\n'
    )
    found = problems_of(tmp_path, text)
    assert len(found) == 1 and found[0].startswith(
        "p.yaml:8:29: scope.trigger: source holds the control character '\\r'"
    ), found


def test_a_serial_given_on_the_command_line_is_checked() -> None:
    from sequencer.compose import check_option_text
    from sequencer.errors import OptionError

    check_option_text("--board", "NR-PA8-0001")
    with pytest.raises(OptionError, match="--board holds the control character"):
        check_option_text("--board", "NR-PA8\n0001")
    with pytest.raises(OptionError, match="201 characters long"):
        check_option_text("--board", "N" * 201)
