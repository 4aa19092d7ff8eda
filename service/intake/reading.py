"""A value read from any input, settled in the canonical unit of its quantity.

Shared by the FHIR and HL7 v2 readers, so both keep what was sent and report unit
conversions alike.
"""

from __future__ import annotations

import msgspec

from service.intake.model import QUANTITY_UNITS, Quantity, Severity


class Reading(msgspec.Struct, frozen=True, gc=False):
    """A value in its quantity's canonical unit; ``sent_*`` are set when it was converted.
    (A msgspec Struct like the intake records: ``service.intake.model``.)"""

    value: float | str
    sent_value: float | None = None
    sent_unit: str | None = None


# A usable value: (canonical value, sent value, sent unit, unit-converted issue or None). The
# sent value and unit are None when the value was sent in the canonical unit.
Settled = tuple[float, float | None, str | None, tuple[Severity, str] | None]


def settle(
    value: float, unit: str, canonical: float, reinterpreted: bool, quantity: Quantity
) -> Settled:
    """What a possible value becomes, and whether its conversion is worth reporting.

    Shared by the FHIR and HL7 v2 readers, so both report unit conversions alike.
    """
    canonical_unit = QUANTITY_UNITS[quantity]
    if unit == canonical_unit and not reinterpreted:
        return canonical, None, None, None
    if unit == "%" and canonical_unit == "1" and not reinterpreted:
        # Percentages are held as fractions inside the service: a representation, not a
        # conversion of the sender's unit worth reporting on every saturation.
        return canonical, value, unit, None
    if reinterpreted:
        severity = Severity.WARNING
        how = f"read as {'a percentage' if unit == '1' else 'a fraction'} despite unit '{unit}'"
    else:
        severity = Severity.INFORMATION
        how = f"converted from '{unit}' to '{canonical_unit}'"
    return canonical, value, unit, (severity, f"{quantity.value} {how}")
