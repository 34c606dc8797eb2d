"""Units and the expression language."""

from __future__ import annotations

import math
import operator

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sequencer.procedure import UnitError, parse_quantity
from sequencer.procedure.evaluate import evaluate
from sequencer.procedure.expressions import ExpressionError, parse_expression
from sequencer.procedure.units import make_quantity


# SI prefixes p n µ m k M G = 1e-12 ... 1e9: SI Brochure, BIPM, 9th ed. 2019, table 7.
@pytest.mark.parametrize(
    ("text", "dimension", "expected"),
    [
        ("40 mV", "voltage", 40.0),
        ("0.2 V", "voltage", 200.0),
        ("0.2V", "bias_voltage", 0.2),
        ("1.5 kV", "bias_voltage", 1500.0),
        ("250 uV", "voltage", 0.25),
        ("250 µV", "voltage", 0.25),
        ("50 ns", "time", 50.0),
        ("1.2 us", "time", 1200.0),
        ("20 ms", "duration", 0.02),
        ("1 kHz", "frequency", 1000.0),
        ("1 GS/s", "frequency", 1e9),
        ("5 V/s", "slew", 5.0),
        ("10 uA", "current", 10.0),
        ("3 nA", "current", 0.003),
        ("2 %", "percent", 2.0),
        ("40", "voltage", 40.0),  # a bare number is taken in the canonical unit (kinds.py)
    ],
)
def test_parse_quantity(text, dimension, expected):
    assert parse_quantity(text, dimension) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    ("text", "dimension"),
    [("40 ns", "voltage"), ("1 sec", "duration"), ("V", "voltage"), ("5 V/s", "bias_voltage")],
)
def test_parse_quantity_refuses(text, dimension):
    with pytest.raises(UnitError):
        parse_quantity(text, dimension)


def _eval(text, **env):
    return evaluate(parse_expression(text), env)


def test_arithmetic_and_functions():
    assert _eval("channel - 1", channel=3) == 2
    assert _eval("(1 + 2) * 3 - 4 / 2") == 7.0
    assert _eval("2 × 3 ÷ 4 − 1") == 0.5
    assert _eval("min(3, 1, 2) + max([4, 5]) + abs(-2)") == 8
    assert (
        _eval("round(2.5) + floor(2.7) + ceil(2.1)") == round(2.5) + 2 + 3
    )  # Python rounds half to even
    assert _eval("sqrt(16)") == 4.0
    assert (
        _eval("board.nominal_gain[output]", board={"nominal_gain": {"x5": 5.0}}, output="x5") == 5.0
    )


def test_quantities():
    q = _eval("2 * amp + 5 mV", amp=make_quantity(40, "mV"))
    assert q.dimension == "V" and q.si == pytest.approx(0.085)
    assert _eval("amp / 10 mV", amp=make_quantity(40, "mV")) == pytest.approx(4.0)
    assert _eval("1 V > 999 mV") is True


def test_conditions():
    assert _eval("channel < 8 and not (output == 'x5')", channel=3, output="x1") is True
    assert _eval("output in ['x1', 'x5'] or false", output="shaped") is False
    assert _eval("1 ≤ 2 and 2 ≠ 3") is True


@pytest.mark.parametrize(
    ("text", "offset", "message"),
    [
        ("channel +", 9, "expected a value"),
        ("(1 + 2", 6, "expected ')'"),
        ("1 $ 2", 2, "unexpected character"),
        ("print(1)", 0, "only the functions"),
        ("1 + 'a'", 0, "cannot apply '+'"),
        ("40 mV + 1", 0, "write the number with a unit"),
        ("1 / (2 - 2)", 0, "division by zero"),
        ("x + 1", 0, "unknown name 'x'"),
        ("1 and true", 0, "needs a boolean"),
        ("__import__", 0, "unknown name"),
    ],
)
def test_errors_have_offsets(text, offset, message):
    with pytest.raises(ExpressionError) as exc:
        _eval(text)
    assert exc.value.offset == offset
    assert message in exc.value.message


def test_deep_nesting_is_refused_not_a_crash():
    with pytest.raises(ExpressionError, match="nested deeper"):
        parse_expression("(" * 100 + "1" + ")" * 100)


# Reference: Python's own integer arithmetic (operator module) on the same tree; the parser must give
# the standard precedence and left associativity whatever parentheses the text uses.
_OPS = {"+": operator.add, "-": operator.sub, "*": operator.mul}
trees = st.recursive(
    st.integers(0, 50),
    lambda inner: st.tuples(st.sampled_from(sorted(_OPS)), inner, inner),
    max_leaves=12,
)


def _value(tree):
    if isinstance(tree, int):
        return tree
    op, a, b = tree
    return _OPS[op](_value(a), _value(b))


_POWER = {"+": 1, "-": 1, "*": 2}


def _text(tree, parent=0, right=False):
    """Minimal parentheses under the usual precedence and left associativity."""
    if isinstance(tree, int):
        return str(tree)
    op, a, b = tree
    text = f"{_text(a, _POWER[op])} {op} {_text(b, _POWER[op], True)}"
    needs = _POWER[op] < parent or (right and _POWER[op] == parent)
    return f"({text})" if needs else text


@settings(max_examples=200, deadline=None)
@given(trees)
def test_precedence_matches_python_arithmetic(tree):
    assert _eval(_text(tree)) == _value(tree)


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet="0123456789 .+-*/()[]<>=!,'abcdefxyz_ mVnsk%", max_size=40))
def test_random_text_never_crashes(text):
    try:
        result = _eval(text, x=1, y=make_quantity(2, "mV"))
    except ExpressionError as exc:
        assert 0 <= exc.offset <= len(text)
    else:
        if isinstance(result, float):
            assert math.isfinite(result)
