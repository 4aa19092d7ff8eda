"""Leaves: single tests on one fact, compiled to closures over the facts mapping.

A leaf returns True or False, or None (unknown) when its fact is missing; `present` is
the exception and is never unknown. The closures assume facts of the right kind: the
catalogue checks the facts before any leaf sees them.
"""

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from service.engine.logic import Operator, TruthValue, truth_of

__all__ = ["FactTest", "Leaf", "Threshold", "leaf_test", "near", "shown_value"]

FactTest = Callable[[Mapping[str, Any]], TruthValue]
Threshold = float | tuple[float, float] | bool | tuple[str, ...]


@dataclass(frozen=True, slots=True)
class Leaf:
    """One distinct test of the rule set, as shown in traces."""

    fact: str
    operator: Operator
    threshold: Threshold
    """Number, `(low, high)` for between, the expected bool for is/present, codes for in."""
    parameters: tuple[str, ...]
    """Parameter names the threshold came from (two for a between with two parameters)."""
    unit: str | None
    test: FactTest = field(compare=False, repr=False)
    shown_unit: str = field(init=False, compare=False, repr=False)
    """The unit as a trace line shows it after a value (empty for none and for "1")."""
    shown_test: str = field(init=False, compare=False, repr=False)
    """The test as a trace line shows it: ``≤ 0 mm[Hg] (paco2_margin)``."""
    traced: Mapping[TruthValue, tuple[str, str]] = field(init=False, compare=False, repr=False)
    """By the leaf's state: its trace line after the value shown (`` mm[Hg] > 45 mm[Hg] →
    true``, the unit included) and its whole line when the fact is missing."""

    def __post_init__(self) -> None:
        # Traces are part of every result: the fixed text of a leaf is built once, here.
        unit = f" {self.unit}" if self.unit not in (None, "1") else ""
        object.__setattr__(self, "shown_unit", unit)
        if self.operator is Operator.PRESENT:
            test = f"present is {shown_value(self.threshold)}"
        else:
            threshold = self.threshold
            shown = (
                "–".join(shown_value(t) for t in threshold)
                if isinstance(threshold, tuple)
                else shown_value(threshold)
            )
            named = f" ({', '.join(self.parameters)})" if self.parameters else ""
            test = f"{_SYMBOL.get(self.operator, self.operator.value)} {shown}{unit}{named}"
        object.__setattr__(self, "shown_test", test)
        traced = {
            state: (
                f"{unit} {test} → {truth_of(state).value}",
                f"{self.fact} missing {test} → {truth_of(state).value}",
            )
            for state in (True, False, None)
        }
        object.__setattr__(self, "traced", traced)


_SYMBOL = {
    Operator.LT: "<",
    Operator.LE: "≤",
    Operator.GT: ">",
    Operator.GE: "≥",
    Operator.EQ: "=",
}


def shown_value(value: object) -> str:
    """A value as traces show it: four significant digits for numbers, lower-case otherwise."""
    return f"{value:.4g}" if isinstance(value, float) else str(value).lower()


def near(value: float, target: float) -> bool:
    """Tolerant equality (``eq``): a computed 0.21000000000000002 equals a written 0.21."""
    return math.isclose(value, target, rel_tol=1e-9, abs_tol=1e-12)


def _comparison_test(name: str, operator: Operator, threshold: Threshold) -> FactTest:
    # One closure per operator keeps the hot path to a dict lookup and one comparison.
    if operator is Operator.LT:
        limit = threshold
        return lambda facts: None if (v := facts.get(name)) is None else v < limit
    if operator is Operator.LE:
        limit = threshold
        return lambda facts: None if (v := facts.get(name)) is None else v <= limit
    if operator is Operator.GT:
        limit = threshold
        return lambda facts: None if (v := facts.get(name)) is None else v > limit
    if operator is Operator.GE:
        limit = threshold
        return lambda facts: None if (v := facts.get(name)) is None else v >= limit
    if operator is Operator.EQ:
        target = float(threshold)  # type: ignore[arg-type]
        return lambda facts: None if (v := facts.get(name)) is None else near(v, target)
    low, high = threshold  # type: ignore[misc]
    return lambda facts: None if (v := facts.get(name)) is None else low <= v <= high


def leaf_test(name: str, operator: Operator, threshold: Threshold) -> FactTest:
    """Build the test closure of one leaf."""
    if operator is Operator.PRESENT:
        expected = threshold
        return lambda facts: (name in facts) == expected
    if operator is Operator.IS:
        flag = threshold
        return lambda facts: None if (v := facts.get(name)) is None else v is flag
    if operator is Operator.IN:
        codes = frozenset(threshold)  # type: ignore[arg-type]
        return lambda facts: None if (v := facts.get(name)) is None else v in codes
    return _comparison_test(name, operator, threshold)
