"""Three-valued truth and the operators a condition leaf may use.

A fact that is not known makes a comparison on it *unknown* rather than false, in the
way empty collections propagate through FHIRPath: `all` is false if any part is false,
else unknown if any part is unknown; `any` is true if any part is true, else unknown if
any part is unknown; `not` swaps true and false and keeps unknown. Only `present` asks
about knowledge itself and is therefore never unknown.

Inside the compiled closures the three values are `True`, `False` and `None`, which are
cheap to test with `is`; `Truth` is the public spelling used in results.
"""

from enum import StrEnum

__all__ = ["Operator", "Truth", "TruthValue", "truth_of", "value_of"]

TruthValue = bool | None
"""The internal three-valued truth: True, False or None for unknown."""


class Truth(StrEnum):
    """Public three-valued truth of a leaf or a rule."""

    TRUE = "true"
    FALSE = "false"
    UNKNOWN = "unknown"


# The one pair of maps between the two spellings of a truth value.
_TRUTH_OF: dict[TruthValue, Truth] = {True: Truth.TRUE, False: Truth.FALSE, None: Truth.UNKNOWN}
_VALUE_OF: dict[Truth, TruthValue] = {truth: value for value, truth in _TRUTH_OF.items()}


def truth_of(value: TruthValue) -> Truth:
    """Convert the internal truth (True, False, None) to `Truth`."""
    return _TRUTH_OF[value]


def value_of(truth: Truth) -> TruthValue:
    """Convert a `Truth` to the internal truth (True, False, None)."""
    return _VALUE_OF[truth]


class Operator(StrEnum):
    """Operators of a condition leaf, spelled as in rule files."""

    LT = "lt"
    LE = "le"
    GT = "gt"
    GE = "ge"
    EQ = "eq"
    BETWEEN = "between"
    PRESENT = "present"
    IS = "is"
    IN = "in"


COMPARISONS = frozenset(
    {Operator.LT, Operator.LE, Operator.GT, Operator.GE, Operator.EQ, Operator.BETWEEN}
)
"""Operators that compare a quantity with a number and therefore need a unit."""
