"""What a fact is: a named value of a known kind, unit and plausible range.

The engine reasons over *facts*: plain numbers, booleans and codes under fixed names.
A `FactSpec` is the contract for one name. Units are UCUM codes and are canonical: the
intake converts every observation to them before the engine sees it, and the engine
never converts anything, so a threshold in a rule is always read in the catalogue unit.
"""

import math
from dataclasses import dataclass, field
from enum import StrEnum

__all__ = ["FactKind", "FactOrigin", "FactSpec", "FactValue"]

FactValue = float | bool | str
"""A fact's value: a number for quantities, a bool for booleans, a str for codes."""


class FactKind(StrEnum):
    """The three kinds of value a fact may hold."""

    QUANTITY = "quantity"
    BOOLEAN = "boolean"
    CODE = "code"


class FactOrigin(StrEnum):
    """Where a fact comes from; used for documentation and to turn requests into actions."""

    MEASURED = "measured"
    """Read from an observation (or a recorded setting such as the oxygen device)."""
    DERIVED = "derived"
    """Computed by the physiology layer from other facts of the same gas."""
    SERIAL = "serial"
    """Computed from this gas and an earlier one taken on a different FiO2."""
    FITTED = "fitted"
    """Fitted to the points of an oxygen titration (gases and SpO2 on several FiO2s)."""
    PROVENANCE = "provenance"
    """A flag about how the other facts were obtained (estimated, assumed, specimen)."""


@dataclass(frozen=True, slots=True)
class FactSpec:
    """The contract of one fact.

    `minimum`/`maximum` bound what the engine accepts (physically possible values, not a
    reference interval); they are None for booleans and codes. `allowed` lists the codes
    of a code fact. `decimals` is the precision a value is stated at: rules compare it, and
    rationales show it, rounded to that many decimals. `inputs` names,
    for a derived fact, the facts without which it cannot be computed; the verdict uses
    them to ask for the measurement that is really missing rather than for a derived
    number nobody can supply directly. `optional_inputs` are facts it reads when known and
    may need in some settings (the residence, for the PaCO2 expected at altitude): asked
    for when every needed input is known and the fact is still missing.
    """

    name: str
    kind: FactKind
    unit: str | None
    description: str
    minimum: float | None = None
    maximum: float | None = None
    allowed: frozenset[str] = field(default_factory=frozenset)
    decimals: int = 0
    origin: FactOrigin = FactOrigin.MEASURED
    inputs: tuple[str, ...] = ()
    optional_inputs: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        # Catch a malformed catalogue at import time rather than in the middle of a request.
        if self.kind is FactKind.QUANTITY:
            if self.unit is None or self.minimum is None or self.maximum is None:
                raise ValueError(f"quantity fact {self.name} needs a unit, minimum and maximum")
            if not self.minimum < self.maximum:
                raise ValueError(f"fact {self.name}: minimum must be below maximum")
        elif self.unit is not None or self.minimum is not None or self.maximum is not None:
            raise ValueError(f"{self.kind} fact {self.name} takes no unit or range")
        if (self.kind is FactKind.CODE) != bool(self.allowed):
            raise ValueError(f"fact {self.name}: only code facts list allowed codes")

    def problem(self, value: object) -> str | None:
        """Say why `value` breaks this contract, or return None when it is acceptable.

        The returned text never repeats the value: it may be patient data.
        """
        if self.kind is FactKind.QUANTITY:
            # bool is an int subclass; True must not pass as 1 mm[Hg].
            if type(value) is not float and type(value) is not int:
                return f"expected a number in {self.unit}"
            if not math.isfinite(value):
                return "expected a finite number"
            if not (self.minimum <= value <= self.maximum):  # type: ignore[operator]
                return (
                    f"outside the accepted range {self.minimum:g} to {self.maximum:g} {self.unit}"
                )
            return None
        if self.kind is FactKind.BOOLEAN:
            return None if type(value) is bool else "expected true or false"
        if type(value) is not str or value not in self.allowed:
            return "expected one of " + ", ".join(sorted(self.allowed))
        return None
