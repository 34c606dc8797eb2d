"""The decision rule of a limit set (ILAC-G8:09/2019 §4.2; ISO/IEC 17025:2017 clause 7.8.6, clause
numbers from memory): simple or guarded acceptance, and the "within uncertainty" qualifier.

The expected verdicts follow from the rule's definition by arithmetic: guard band w = U = k·u.
"""

from __future__ import annotations

import math

import pytest

from sequencer.errors import ProcedureError
from sequencer.procedure.decision import Decision, DecisionRule, decide
from sequencer.procedure.limits import parse_limits_text

SIMPLE = DecisionRule("simple", 2.0)
GUARDED = DecisionRule("guarded", 2.0)


@pytest.mark.parametrize(
    ("value", "u", "rule", "expected"),
    [
        # noise limit high 0.6 mV; U = 2u = 0.04 mV
        (0.50, 0.02, SIMPLE, "pass"),
        (0.59, 0.02, SIMPLE, "pass (within uncertainty)"),  # 0.59 + 0.04 crosses 0.6
        (0.61, 0.02, SIMPLE, "fail (within uncertainty)"),  # 0.61 - 0.04 below 0.6
        (0.70, 0.02, SIMPLE, "fail"),
        (0.55, 0.02, GUARDED, "pass"),  # inside the acceptance zone (-inf, 0.56]
        (0.57, 0.02, GUARDED, "fail (within uncertainty)"),  # guard band; 0.53..0.61 crosses 0.6
        (0.562, 0.001, GUARDED, "pass"),  # u small: zone ends at 0.598
        (0.59, 0.02, GUARDED, "fail (within uncertainty)"),
        (0.59, None, GUARDED, "pass"),  # no uncertainty stated: no guard band, no interval
    ],
)
def test_verdicts_under_each_rule(value, u, rule, expected):
    assert decide(value, u, None, 0.6, rule).text() == expected


def test_guard_band_on_both_sides_and_nan():
    # gain 0.95..1.05 with u = 0.01, k = 2: acceptance zone 0.97..1.03
    assert decide(0.98, 0.01, 0.95, 1.05, GUARDED) == Decision("pass", "", 0.02)
    assert decide(0.96, 0.01, 0.95, 1.05, GUARDED).text() == "fail (within uncertainty)"
    assert decide(0.96, 0.01, 0.95, 1.05, SIMPLE).text() == "pass (within uncertainty)"
    assert decide(math.nan, 0.01, 0.95, 1.05, SIMPLE) == Decision("fail")
    wide = DecisionRule("guarded", 3.0)  # k = 3: acceptance zone 0.98..1.02
    assert decide(0.975, 0.01, 0.95, 1.05, wide).verdict == "fail"


def test_limits_file_states_its_rule():
    text = (
        "board_type: T\ndecision_rule: {rule: guarded, coverage_factor: 3}\nlimits:\n"
        "  - {quantity: noise_in_mV, high: 0.6, unit: mV}\n"
    )
    (limit,) = parse_limits_text(text, "t.yaml")
    assert limit.rule == DecisionRule("guarded", 3.0)
    assert limit.decide(0.55, 0.02).text() == "fail (within uncertainty)"  # zone ends at 0.54
    assert "guarded acceptance" in limit.rule.describe() and "k = 3" in limit.rule.describe()
    stated = "decision_rule: {rule: guarded, coverage_factor: 3}\n"
    (plain,) = parse_limits_text(text.replace(stated, ""), "t.yaml")
    assert plain.rule == DecisionRule("simple", 2.0)
    with pytest.raises(ProcedureError, match=r"t.yaml:2:\d+: decision_rule: needs one of"):
        parse_limits_text(text.replace("guarded", "lenient"), "t.yaml")
