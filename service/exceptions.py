"""The service's error family, in one place.

Every error a caller can see descends from ``ServiceError``::

    ServiceError
    ├── PhysiologyError (ValueError)        a computation was asked something it cannot answer
    │   ├── ImpossibleValueError            the input cannot be true of a person or of physics
    │   │                                   (a negative pressure, FiO2 above 1, a body at 60 °C)
    │   └── OutsideModelRangeError          the input is real but outside where the equation holds
    │                                       (SpO2 above 96 % for PaO2 imputation, altitude 12 km)
    └── UnitError (ValueError)              a unit the service does not convert, or the wrong kind

The physiology package raises only these; adapters (FHIR, HL7 v2, HTTP) catch them and turn
them into located OperationOutcome issues. Messages say what was wrong and why, never more.
"""

from __future__ import annotations


class ServiceError(Exception):
    """Base of every error the service raises on purpose."""


class PhysiologyError(ServiceError, ValueError):
    """A physiology function was given input it cannot use.

    ``quantity`` names the argument (with its unit in the name), ``value`` is what was given.
    """

    def __init__(self, quantity: str, value: float, reason: str) -> None:
        self.quantity = quantity
        self.value = value
        self.reason = reason
        super().__init__(f"{quantity} = {value:g}: {reason}")

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.quantity!r}, {self.value!r}, {self.reason!r})"


class ImpossibleValueError(PhysiologyError):
    """The value cannot occur (physically or physiologically)."""


class OutsideModelRangeError(PhysiologyError):
    """The value can occur, but the equation is not valid there."""


class UnitError(ServiceError, ValueError):
    """A unit that cannot be converted to the quantity's canonical unit."""

    def __init__(
        self, unit: str, quantity: str, accepted: tuple[str, ...], *, named: str = "the unit"
    ) -> None:
        """``named``: how the message names the unit (never the sender's text unless it is one
        of the service's own codes; ``physiology.units.unit_named``)."""
        self.unit = unit
        self.quantity = quantity
        self.accepted = accepted
        super().__init__(
            f"{named} is not a unit of {quantity}; accepted UCUM codes: {', '.join(accepted)}"
        )
