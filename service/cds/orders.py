"""Draft oxygen and ventilator orders of ``context.draftOrders``, and the FiO2 they ask for.

The order hooks send a Bundle of unsigned orders (``order-select`` also names the newly
selected ones in ``selections``; decision support looks at those). An order is read as an
oxygen order when it names an oxygen device, an FiO2 or an oxygen flow, or is coded as oxygen
therapy or oxygen, in the places FHIR R4 (and R5, whose ``orderDetail`` carries parameters)
puts them:

* ``DeviceRequest``: ``codeCodeableConcept`` (the device) and ``parameter[]`` (``code`` by
  LOINC: FiO2 3150-0 / 19994-3 / 71835-3, flow 3151-8 / 19941-4, PEEP 20077-4 / 76248-4,
  device 107117-4; ``valueQuantity`` or ``valueCodeableConcept``) - the usual place for
  ventilator and oxygen settings;
* ``ServiceRequest``: ``code`` (oxygen therapy), ``orderDetail`` (a device coding, or in R5
  ``orderDetail.parameter``), ``quantityQuantity`` (a flow in L/min, or an FiO2 in %);
* ``MedicationRequest`` for oxygen: ``dosageInstruction.doseAndRate`` (``rateQuantity`` a
  flow, ``doseQuantity`` an FiO2 in %).

Codes and units go through the same code table and converters as the FHIR reader. A value
whose unit cannot be read is not guessed: it is left out and named in ``unread``. Free text is
never parsed. The FiO2 of a low-flow device without a stated FiO2 is estimated from device
and flow (``service.physiology.oxygen_delivery``), and marked as an estimate.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from service.exceptions import PhysiologyError, UnitError
from service.fhir.references import type_and_id
from service.intake.model import Quantity
from service.physiology.oxygen_delivery import OxygenDevice, estimate_fio2
from service.terminology import codes

Json = dict[str, Any]

# Codes that say "this order is oxygen" without a device or setting. From memory (confirm in a
# SNOMED CT browser and RxNav): SNOMED CT 57485005 Oxygen therapy (procedure), 24099007 Oxygen
# (substance); RxNorm 7806 Oxygen.
OXYGEN_ORDER_CODES = frozenset(
    {
        (codes.SNOMED_CT, "57485005"),
        (codes.SNOMED_CT, "24099007"),
        ("http://www.nlm.nih.gov/research/umls/rxnorm", "7806"),
    }
)
_FIO2 = codes.LOINC_CONCEPTS["3150-0"]
_FLOW = codes.LOINC_CONCEPTS["3151-8"]
ORDER_TYPES = frozenset({"DeviceRequest", "ServiceRequest", "MedicationRequest"})


@dataclass(frozen=True, slots=True)
class OxygenOrder:
    """One draft oxygen or ventilator order, as far as its structured elements say."""

    reference: str  # "DeviceRequest/o2-1", or its place in the Bundle when it has no id
    expression: str  # context.draftOrders.entry[i].resource
    fio2: float | None  # fraction: as ordered, or estimated from device and flow
    fio2_estimated: bool
    flow_l_min: float | None
    device: str | None  # a code of the oxygen-device CodeSystem
    ventilator: bool
    unread: tuple[str, ...] = ()  # what was there but could not be read (unit, code)


def _codings(concept: object) -> Iterator[tuple[str, str]]:
    if isinstance(concept, dict):
        for coding in concept.get("coding") or ():
            if isinstance(coding, dict):
                system, code = coding.get("system"), coding.get("code")
                if isinstance(system, str) and isinstance(code, str):
                    yield system, code


def _device(concept: object) -> str | None:
    for system, code in _codings(concept):
        if system == codes.OXYGEN_DEVICE_CODES and code in codes.OXYGEN_DEVICES:
            return code
        if system == codes.SNOMED_CT and code in codes.SNOMED_OXYGEN_DEVICES:
            return codes.SNOMED_OXYGEN_DEVICES[code]
    return None


def _number(quantity: object) -> tuple[float, str] | None:
    if not isinstance(quantity, dict):
        return None
    value, unit = quantity.get("value"), quantity.get("code") or quantity.get("unit")
    if isinstance(value, bool) or not isinstance(value, int | float) or not isinstance(unit, str):
        return None
    return float(value), unit


class _Settings:
    """What one order states, collected from whichever elements carry it."""

    def __init__(self) -> None:
        self.fio2: float | None = None
        self.flow: float | None = None
        self.device: str | None = None
        self.peep = False
        self.oxygen = False
        self.unread: list[str] = []

    def quantity(self, concept: codes.Concept, sent: tuple[float, str], what: str) -> None:
        value, unit = sent
        try:
            canonical, _ = concept.to_canonical(value, unit)
        except (UnitError, PhysiologyError):
            self.unread.append(f"{what} (unit {unit!r})")
            return
        self.oxygen = True
        if concept.quantity is Quantity.FIO2:
            self.fio2 = canonical
        else:
            self.flow = canonical

    def parameter(self, code: object, item: Json, what: str) -> None:
        for system, value in _codings(code):
            concept = codes.concept_for(system, value)
            if concept is None:
                continue
            if concept.quantity is Quantity.OXYGEN_DEVICE:
                self.device = _device(item.get("valueCodeableConcept")) or self.device
                self.oxygen = True
            elif concept.quantity is Quantity.PEEP:
                self.peep = True
            elif concept.quantity in (Quantity.FIO2, Quantity.OXYGEN_FLOW):
                sent = _number(item.get("valueQuantity"))
                if sent is not None:
                    self.quantity(concept, sent, what)
            return

    def loose_quantity(self, quantity: object, what: str) -> None:
        """A quantity whose kind only its unit tells: a flow (L/min) or an FiO2 (%)."""
        sent = _number(quantity)
        if sent is None:
            return
        self.quantity(_FIO2 if sent[1] == "%" else _FLOW, sent, what)


def _device_request(resource: Json, found: _Settings) -> None:
    found.device = _device(resource.get("codeCodeableConcept"))
    found.oxygen = found.device is not None
    for item in resource.get("parameter") or ():
        if isinstance(item, dict):
            found.parameter(item.get("code"), item, "a parameter")


def _service_request(resource: Json, found: _Settings) -> None:
    found.oxygen = any(c in OXYGEN_ORDER_CODES for c in _codings(resource.get("code")))
    found.device = _device(resource.get("code"))
    for detail in resource.get("orderDetail") or ():
        if not isinstance(detail, dict):
            continue
        found.device = found.device or _device(detail) or _device(detail.get("code"))
        for item in detail.get("parameter") or ():  # R5 ServiceRequest.orderDetail.parameter
            if isinstance(item, dict):
                found.parameter(item.get("code"), item, "an order detail")
    if found.oxygen or found.device is not None:
        found.loose_quantity(resource.get("quantityQuantity"), "the quantity")
    found.oxygen = found.oxygen or found.device is not None


def _medication_request(resource: Json, found: _Settings) -> None:
    found.oxygen = any(
        c in OXYGEN_ORDER_CODES for c in _codings(resource.get("medicationCodeableConcept"))
    )
    if not found.oxygen:
        return
    for dosage in resource.get("dosageInstruction") or ():
        for rate in (dosage.get("doseAndRate") or ()) if isinstance(dosage, dict) else ():
            if isinstance(rate, dict):
                found.loose_quantity(rate.get("rateQuantity"), "the rate")
                found.loose_quantity(rate.get("doseQuantity"), "the dose")


_READERS = {
    "DeviceRequest": _device_request,
    "ServiceRequest": _service_request,
    "MedicationRequest": _medication_request,
}


def _estimate(device: str | None, flow: float | None) -> float | None:
    if device is None:
        return None
    try:
        return estimate_fio2(device=OxygenDevice(device), flow_l_min=flow).fio2
    except (PhysiologyError, ValueError):
        return None  # a set-FiO2 device without its FiO2, or a flow outside the model


def _selected(reference: str, selections: tuple[str, ...] | None) -> bool:
    if selections is None:
        return True
    return any(type_and_id(s) == reference or s == reference for s in selections)


def read_orders(draft_orders: Json, selections: tuple[str, ...] | None = None) -> list[OxygenOrder]:
    """The oxygen and ventilator orders among the (selected) draft orders."""
    found: list[OxygenOrder] = []
    for i, entry in enumerate(draft_orders.get("entry") or ()):
        resource = entry.get("resource") if isinstance(entry, dict) else None
        if not isinstance(resource, dict) or resource.get("resourceType") not in ORDER_TYPES:
            continue
        kind, rid = resource["resourceType"], resource.get("id")
        at = f"context.draftOrders.entry[{i}].resource"
        reference = f"{kind}/{rid}" if isinstance(rid, str) else at
        if not _selected(reference, selections):
            continue
        settings = _Settings()
        _READERS[kind](resource, settings)
        if not settings.oxygen:
            continue
        fio2, estimated = settings.fio2, False
        if fio2 is None:
            fio2 = _estimate(settings.device, settings.flow)
            estimated = fio2 is not None and settings.device != OxygenDevice.NONE_ROOM_AIR
        found.append(
            OxygenOrder(
                reference=reference,
                expression=at,
                fio2=fio2,
                fio2_estimated=estimated,
                flow_l_min=settings.flow,
                device=settings.device,
                ventilator=settings.device == OxygenDevice.VENTILATOR or settings.peep,
                unread=tuple(settings.unread),
            )
        )
    return found
