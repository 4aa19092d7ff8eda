"""One Observation value, read and converted once to the canonical unit of its quantity.

``read_quantity`` takes a ``valueQuantity`` (of an Observation or of a component): the UCUM
``code`` is preferred, else the ``unit`` text; every conversion goes through
``service.physiology.units``. A unit the quantity cannot take refuses the Bundle (a located
problem); a value that is impossible after conversion is reported ``value-out-of-range`` and
not used, so the rest of the Bundle is still assessed. ``read_device`` reads the coded oxygen
delivery method (LOINC 107117-4).
"""

from __future__ import annotations

from dataclasses import dataclass

from service.exceptions import ImpossibleValueError, UnitError
from service.fhir import codes
from service.fhir.codes import Concept
from service.fhir.plausibility import out_of_range
from service.fhir.shape import Collector, JsonObject, member_list, member_number, objects
from service.fhir.shape import member_str as text
from service.intake.model import QUANTITY_UNITS, Quantity, Severity
from service.physiology.units import FIO2_LIMITS, Dimension, unit_named


@dataclass(frozen=True, slots=True)
class Reading:
    """A value in its quantity's canonical unit; ``sent_*`` are set when it was converted."""

    value: float | str
    sent_value: float | None = None
    sent_unit: str | None = None


def _unit(
    q: JsonObject, at: str, dimension: Dimension | None, out: Collector
) -> tuple[str, str] | None:
    """The unit to convert from and where it was read, or None (a problem was recorded)."""
    system = text(q, "system", at, out)
    code = text(q, "code", at, out)
    unit = text(q, "unit", at, out)
    if code is not None and (system is None or system == codes.UCUM):
        return code, f"{at}.code"
    if unit is not None:
        return unit, f"{at}.unit"
    if code is not None:
        out.problem("value", f"the unit code is not from UCUM ({codes.UCUM})", f"{at}.system")
        return None
    if dimension is Dimension.PH:
        return "[pH]", f"{at}.code"  # pH has no unit; senders often leave it out
    out.problem("required", "a unit is required: a UCUM code in valueQuantity.code", f"{at}.code")
    return None


def _convert(
    value: float, unit: str, at: str, unit_at: str, concept: Concept, out: Collector
) -> tuple[float, bool] | None:
    """(canonical value, whether the unit was reinterpreted), or None if unusable."""
    try:
        return concept.to_canonical(value, unit)
    except UnitError as exc:
        accepted = ", ".join(exc.accepted)
        out.problem(
            "value",
            f"{unit_named(unit)} cannot be used for {concept.quantity.value}; accepted: {accepted}",
            unit_at,
        )
    except ImpossibleValueError:
        low, high = FIO2_LIMITS
        out.issue(
            "value-out-of-range",
            Severity.ERROR,
            f"fio2 is not between {low:g} and {high:g} once read as a fraction (sent in "
            f"{unit_named(unit)}); the value is not used",
            f"{at}.value",
        )
    return None


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


def plain_value(value: float, unit: str, concept: Concept) -> Settled | None:
    """The reading of a finite ``value`` in ``unit``, or None when it cannot be used as it is.

    For the reader's plain path: None (a unit the quantity cannot take, an impossible value)
    sends the Observation to ``read_quantity``, which reports why.
    """
    try:
        canonical, reinterpreted = concept.to_canonical(value, unit)
    except (UnitError, ImpossibleValueError):
        return None
    if out_of_range(concept.quantity, canonical) is not None:
        return None
    return settle(value, unit, canonical, reinterpreted, concept.quantity)


def read_quantity(q: JsonObject, at: str, concept: Concept, out: Collector) -> Reading | None:
    """Read the ``valueQuantity`` at ``at`` for ``concept``; None when it cannot be used."""
    quantity = concept.quantity
    value = member_number(q, "value", at, out, required=True)
    comparator = text(q, "comparator", at, out)
    unit_found = _unit(q, at, concept.dimension, out)
    if value is None or unit_found is None:
        return None
    if comparator is not None:
        if comparator not in codes.QUANTITY_COMPARATORS:
            out.problem("code-invalid", "not a FHIR quantity comparator", f"{at}.comparator")
        else:
            out.issue(
                "observation-ignored",
                Severity.WARNING,
                f"{quantity.value} is a bound (comparator '{comparator}'), not a measured value",
                f"{at}.comparator",
            )
        return None
    unit, unit_at = unit_found
    converted = _convert(value, unit, at, unit_at, concept, out)
    if converted is None:
        return None
    canonical, reinterpreted = converted
    reason = out_of_range(quantity, canonical)
    if reason is not None:
        hint = ""
        if unit == "%" and 0.0 < value <= 1.0:
            hint = " (was a fraction sent with unit '%'?)"
        out.issue(
            "value-out-of-range",
            Severity.ERROR,
            f"{quantity.value} is impossible: {reason}{hint}; the value is not used",
            f"{at}.value",
        )
        return None
    canonical, sent_value, sent_unit, issue = settle(
        value, unit, canonical, reinterpreted, quantity
    )
    if issue is not None:
        out.issue("unit-converted", issue[0], issue[1], at)
    return Reading(canonical, sent_value=sent_value, sent_unit=sent_unit)


def read_device(cc: JsonObject, at: str, out: Collector) -> Reading | None:
    """The oxygen-device code of a ``valueCodeableConcept`` (our CodeSystem or SNOMED CT)."""
    codings = member_list(cc, "coding", at, out) or []
    sent = 0
    for coding, coding_at in objects(codings, f"{at}.coding", out):
        system = text(coding, "system", coding_at, out)
        code = text(coding, "code", coding_at, out)
        if system is None or code is None:
            continue
        if system == codes.OXYGEN_DEVICE_CODES and code in codes.OXYGEN_DEVICES:
            return Reading(code)
        if system == codes.SNOMED_CT and code in codes.SNOMED_OXYGEN_DEVICES:
            return Reading(codes.SNOMED_OXYGEN_DEVICES[code])
        sent += 1
    # The codes sent are not quoted: an error names the element, never what it holds.
    out.issue(
        "observation-ignored",
        Severity.INFORMATION,
        f"oxygen device not recognised ({_codings(sent)}); use {codes.OXYGEN_DEVICE_CODES}",
        at,
    )
    return None


def _codings(count: int) -> str:
    return "no coding" if count == 0 else f"{count} coding{'s' if count > 1 else ''} sent"
