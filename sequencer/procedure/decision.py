"""The decision rule of a limit set: how a measured value and its uncertainty become a verdict.

ILAC-G8:09/2019 ("Guidelines on Decision Rules and Statements of Conformity") and ISO/IEC
17025:2017 clause 7.8.6 (clause number from memory) ask a laboratory to state the rule it applies.
Two binary rules are offered, chosen per limit set (``decision_rule:`` in the limits file):

* ``simple`` — simple acceptance (ILAC-G8 §4.2.1, the shared-risk rule): pass when the value lies
  within the limits, whatever its uncertainty.
* ``guarded`` — guarded acceptance (ILAC-G8 §4.2.2): the acceptance zone is the tolerance
  interval shrunk by a guard band w = U = k·u on each side (U the expanded uncertainty, coverage
  factor k, 2 by default: about 95 % for a normal distribution); pass only inside it.

Under either rule, a value whose interval value ± U straddles a limit carries the qualifier
``within uncertainty`` (the verdict column stays pass/fail/info; the qualifier is its own field):
its verdict, printed ``fail (within uncertainty)`` or ``pass (within uncertainty)``, is the one
the rule gives, but the measurement could not tell.  Without a stated uncertainty there is no
interval and no qualifier.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

RULES = ("simple", "guarded")
DEFAULT_RULE = "simple"
DEFAULT_COVERAGE_K = 2.0
WITHIN_UNCERTAINTY = "within uncertainty"


@dataclass(frozen=True)
class DecisionRule:
    """``rule`` (simple or guarded) and the coverage factor k of the expanded uncertainty."""

    rule: str = DEFAULT_RULE
    coverage_k: float = DEFAULT_COVERAGE_K

    def describe(self) -> str:
        """The rule in one line, as a certificate prints it."""
        if self.rule == "guarded":
            return (
                f"guarded acceptance (ILAC-G8:09/2019): guard band w = U = k·u, k = "
                f"{self.coverage_k:g}; pass only within the limits narrowed by w"
            )
        return (
            "simple acceptance (ILAC-G8:09/2019): pass within the limits; a value whose interval "
            f"± U (k = {self.coverage_k:g}) crosses a limit is marked within uncertainty"
        )


@dataclass(frozen=True)
class Decision:
    """A verdict, its qualifier ("" or ``within uncertainty``) and the guard band used (0: none)."""

    verdict: Literal["pass", "fail"]
    qualifier: str = ""
    guard_band: float = 0.0

    def text(self) -> str:
        return f"{self.verdict} ({self.qualifier})" if self.qualifier else self.verdict


def decide(
    value: float,
    uncertainty: float | None,
    low: float | None,
    high: float | None,
    rule: DecisionRule,
) -> Decision:
    """The verdict of ``value`` (standard uncertainty ``uncertainty``) against [low, high]."""
    if not math.isfinite(value):
        return Decision("fail")
    u = uncertainty if uncertainty is not None and math.isfinite(uncertainty) else 0.0
    big_u = rule.coverage_k * abs(u)
    w = big_u if rule.rule == "guarded" else 0.0
    inside = (low is None or value >= low + w) and (high is None or value <= high - w)
    straddles = big_u > 0.0 and any(
        limit is not None and value - big_u < limit < value + big_u for limit in (low, high)
    )
    return Decision(
        "pass" if inside else "fail", WITHIN_UNCERTAINTY if straddles else "", guard_band=w
    )
