"""One Observation value, read and converted once to the canonical unit of its quantity.

``read_quantity`` takes a ``valueQuantity`` (of an Observation or of a component): the UCUM
``code`` is preferred, else the ``unit`` text; every conversion goes through
``service.physiology.units``. A unit the quantity cannot take refuses the Bundle (a located
problem); a value that is impossible after conversion is reported ``value-out-of-range`` and
not used, so the rest of the Bundle is still assessed. ``read_device`` reads the coded oxygen
delivery method (LOINC 107117-4).
"""

from __future__ import annotations

from service.exceptions import ImpossibleValueError, UnitError
from service.fhir import codes as fhir_codes
from service.fhir.shape import (
    Collector,
    JsonObject,
    finite_float,
    member_list,
    member_number,
    objects,
)
from service.fhir.shape import member_str as text
from service.intake.model import Quantity, Severity
from service.intake.plausibility import out_of_range
from service.intake.reading import Reading, settle
from service.physiology.units import (
    FIO2_LIMITS,
    NOT_UCUM,
    Dimension,
    accepted_units,
    unit_named,
)
from service.terminology import codes
from service.terminology.codes import Concept


def _unit(
    q: JsonObject, at: str, dimension: Dimension | None, out: Collector
) -> tuple[str, str] | None:
    """The UCUM unit to convert from and where it was read, or None (a problem was recorded).

    A UCUM ``code`` with the UCUM ``system`` is read as it is. What is unambiguous is read
    with a warning that says how (``unit-not-ucum``): a well-known spelling that is not UCUM
    (``mmHg``) under the UCUM system, a code without a system (FHIR qty-3 wants one), or only
    the ``unit`` text, each when it names a unit this value takes. Anything else is refused:
    a code of another unit system (a local ``mm[Hg]`` is not UCUM's), or a code or text that
    names no unit of this value.
    """
    system = text(q, "system", at, out)
    code = text(q, "code", at, out)
    unit = text(q, "unit", at, out)
    if code is not None and system is not None and system != codes.UCUM:
        out.problem(
            "value",
            f"the unit is coded in another system than UCUM ({codes.UCUM}); send the UCUM code",
            f"{at}.system",
        )
        return None
    if code is not None and system is not None:
        if code in NOT_UCUM:
            meant = NOT_UCUM[code]
            message = f"{unit_named(code)} is not UCUM; read as UCUM '{meant}', the unit it spells"
            out.issue("unit-not-ucum", Severity.WARNING, message, f"{at}.code")
            return meant, f"{at}.code"
        return code, f"{at}.code"
    sent, sent_at, how = (
        (code, f"{at}.code", "a unit code without a system (FHIR qty-3)")
        if code is not None
        else (unit, f"{at}.unit", "only the unit text")
    )
    if sent is not None:
        meant = NOT_UCUM.get(sent, sent)
        if dimension is not None and meant in accepted_units(dimension):
            message = f"{how} was sent; read as UCUM '{meant}'"
            out.issue("unit-not-ucum", Severity.WARNING, message, sent_at)
            return meant, sent_at
        out.problem(
            "value",
            f"{how} was sent, and it is no unit this value takes; send a UCUM code with "
            f"system {codes.UCUM}",
            sent_at,
        )
        return None
    if dimension is Dimension.PH:
        return "[pH]", f"{at}.code"  # pH has no unit; senders often leave it out
    out.problem("required", "a unit is required: a UCUM code in valueQuantity.code", at)
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


_USUAL_QUANTITY = frozenset({"value", "unit", "system", "code"})
_UCUM = codes.UCUM


def read_quantity(
    q: JsonObject, at: str, concept: Concept, out: Collector, *, key: str | None = None
) -> Reading | None:
    """Read the ``valueQuantity`` at ``at`` for ``concept``; None when it cannot be used.

    ``key``: when given, ``at`` is the FHIRPath of the element that holds the quantity as
    ``key``; the quantity's own path is then formed only if something is recorded.
    """
    # The usual shape, tested with type() and no FHIRPath: a finite value and a UCUM code
    # the quantity takes, with the UCUM system, no comparator, a unit text (if any) not
    # blank, possible once converted. Anything else, and a value the conversion or the
    # possible range refuses, is read below, which records what is wrong and where.
    if _USUAL_QUANTITY.issuperset(q):
        sent, unit = q.get("value"), q.get("code")
        if (
            (type(sent) is float or type(sent) is int)
            and type(unit) is str
            and q.get("system") == _UCUM
            and unit not in NOT_UCUM
            and unit.strip()
            and (
                (type(text_unit := q.get("unit")) is str and text_unit.strip())
                or (text_unit is None and "unit" not in q)
            )
            and (value := finite_float(sent)) is not None
        ):
            quantity = concept.quantity
            try:
                canonical, reinterpreted = concept.to_canonical(value, unit)
            except (UnitError, ImpossibleValueError):
                pass
            else:
                if out_of_range(quantity, canonical) is None:  # ``_settled``, inline
                    canonical, sent_value, sent_unit, issue = settle(
                        value, unit, canonical, reinterpreted, quantity
                    )
                    if issue is not None:
                        where = at if key is None else f"{at}.{key}"
                        out.issue("unit-converted", issue[0], issue[1], where)
                    return Reading(canonical, sent_value, sent_unit)
    return _located_quantity(q, at if key is None else f"{at}.{key}", concept, out)


def _settled(
    value: float,
    unit: str,
    canonical: float,
    reinterpreted: bool,
    quantity: Quantity,
    out: Collector,
    at: str,
    key: str | None = None,
) -> Reading:
    """The reading of a possible value; a conversion worth saying is reported at ``at``
    (or at ``at.key``)."""
    canonical, sent_value, sent_unit, issue = settle(
        value, unit, canonical, reinterpreted, quantity
    )
    if issue is not None:
        out.issue("unit-converted", issue[0], issue[1], at if key is None else f"{at}.{key}")
    return Reading(canonical, sent_value, sent_unit)


def _located_quantity(q: JsonObject, at: str, concept: Concept, out: Collector) -> Reading | None:
    """``read_quantity`` for any shape: every problem and issue recorded where it is."""
    quantity = concept.quantity
    value = member_number(q, "value", at, out, required=True)
    comparator = text(q, "comparator", at, out)
    unit_found = _unit(q, at, concept.dimension, out)
    if value is None or unit_found is None:
        return None
    if comparator is not None:
        if comparator not in fhir_codes.QUANTITY_COMPARATORS:
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
    return _settled(value, unit, canonical, reinterpreted, quantity, out, at)


def read_coded(cc: JsonObject, at: str, quantity: Quantity, out: Collector) -> Reading | None:
    """The value of a coded quantity (oxygen device, residence) from a ``valueCodeableConcept``:
    the first coding that means something to the service (``codes.coded_value``)."""
    codings = member_list(cc, "coding", at, out) or []
    sent = 0  # the codes sent are counted, never quoted: an error names the element
    for coding, coding_at in objects(codings, f"{at}.coding", out):
        system = text(coding, "system", coding_at, out)
        code = text(coding, "code", coding_at, out)
        if system is None or code is None:
            continue
        value = codes.coded_value(quantity, system, code)
        if value is not None:
            return Reading(value)
        sent += 1
    named = "no coding" if sent == 0 else f"{sent} coding{'s' if sent > 1 else ''} sent"
    out.issue(
        "observation-ignored",
        Severity.INFORMATION,
        f"{quantity.value.replace('_', ' ')} not recognised ({named}); "
        f"use {codes.CODE_SYSTEM_OF[quantity]}",
        at,
    )
    return None


def _codings(count: int) -> str:
    return "no coding" if count == 0 else f"{count} coding{'s' if count > 1 else ''} sent"
