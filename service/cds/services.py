"""The CDS Services this service offers, and the discovery document that announces them.

Three services (CDS Hooks 2.0, "Discovery"): ``hypoxaemia-mechanism`` on ``patient-view``,
and ``oxygen-order-select`` / ``oxygen-order-sign`` on ``order-select`` / ``order-sign`` for
draft oxygen and ventilator orders. Each asks for the same prefetch:

* ``patient``: ``Patient/{{context.patientId}}`` (age and sex for the age-adjusted limits);
* four Observation searches by LOINC (and project) code, newest first, each ``_count`` sized
  to a day of data for the assessment: ``bloodGases`` (arterial, venous, capillary and mixed
  venous gases, and blood gases whose specimen is stated elsewhere), ``oximetry`` (SpO2, at
  rest and on exertion), ``oxygenSettings`` (FiO2, flow, device, PEEP, mean airway pressure,
  respiratory rate) and ``otherInputs`` (Hb, COHb, MetHb, temperature, ambient pressure,
  DLCO, altitude);
* ``encounterLocation``: the encounter with its Location (``_include``), whose
  ``position.altitude`` sets the barometric pressure. The 2.0 prefetch tokens can name only
  context fields, so the Location is reached through the encounter.

The code lists come from the one code table (``service.terminology.codes``): every code the reader
understands is asked for by exactly one template (``tests/cds/test_services.py``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any
from urllib.parse import quote

from service.intake.model import Quantity
from service.terminology import codes

Json = dict[str, Any]

PATIENT_VIEW = "patient-view"
ORDER_SELECT = "order-select"
ORDER_SIGN = "order-sign"

_GASES = frozenset(
    q
    for q in Quantity
    if q.value.startswith(("arterial_", "venous_", "capillary_", "mixed_venous_", "central_"))
)
_OXIMETRY = frozenset(
    {Quantity.SPO2, Quantity.SPO2_EXERTIONAL_NADIR, Quantity.SPO2_EXERTIONAL_BASELINE}
)
_OXYGEN = frozenset(
    {
        Quantity.FIO2,
        Quantity.OXYGEN_FLOW,
        Quantity.OXYGEN_DEVICE,
        Quantity.PEEP,
        Quantity.MEAN_AIRWAY_PRESSURE,
        Quantity.RESPIRATORY_RATE,
    }
)
_OTHER = frozenset(Quantity) - _GASES - _OXIMETRY - _OXYGEN


def _codes(quantities: frozenset[Quantity]) -> list[str]:
    """``system|code`` of every code the reader maps to one of ``quantities`` (a blood-gas
    code whose specimen is stated elsewhere maps to its arterial quantity)."""
    tables = ((codes.LOINC, codes.LOINC_CONCEPTS), (codes.INPUT_CODES, codes.INPUT_CONCEPTS))
    return [
        f"{system}|{code}"
        for system, table in tables
        for code, concept in table.items()
        if concept.quantity in quantities
    ]


def _search(quantities: frozenset[Quantity], count: int) -> str:
    return (
        "Observation?patient={{context.patientId}}&code="
        + ",".join(_codes(quantities))
        + f"&_sort=-date&_count={count}"
    )


# key -> (template, required). A required key must be had (prefetched or fetched), or the call
# is answered 412 as the specification says; an optional one only improves the assessment.
PREFETCH: MappingProxyType[str, tuple[str, bool]] = MappingProxyType(
    {
        "patient": ("Patient/{{context.patientId}}", False),
        "bloodGases": (_search(_GASES, 100), True),
        "oximetry": (_search(_OXIMETRY, 50), True),
        "oxygenSettings": (_search(_OXYGEN, 50), True),
        "otherInputs": (_search(_OTHER, 30), False),
        "encounterLocation": (
            "Encounter?_id={{context.encounterId}}&_include=Encounter:location",
            False,
        ),
    }
)
TOKENS = ("context.patientId", "context.encounterId")


@dataclass(frozen=True, slots=True)
class CdsService:
    """One entry of the discovery document."""

    id: str
    hook: str
    title: str
    description: str
    usage: str
    prefetch: MappingProxyType[str, tuple[str, bool]] = field(default_factory=lambda: PREFETCH)

    def discovery(self) -> Json:
        return {
            "hook": self.hook,
            "title": self.title,
            "description": self.description,
            "id": self.id,
            "prefetch": {key: template for key, (template, _) in self.prefetch.items()},
            "usageRequirements": self.usage,
        }


_USAGE = (
    "Decision support for qualified clinicians, not a diagnosis. Needs the prefetch below or "
    "a fhirServer with fhirAuthorization (Observation and Patient read); without either the "
    "call is answered 412. Only observations of the last day are used (site setting)."
)
_ORDER_DESCRIPTION = (
    "For a draft oxygen or ventilator order (ServiceRequest, DeviceRequest or an oxygen "
    "MedicationRequest): a card when the patient's recent gases bear on it - more oxygen "
    "while hypoventilation is likely (SpO2 will not show a rising PaCO2), or a shunt that more "
    "oxygen will barely help. No card otherwise."
)

SERVICES: MappingProxyType[str, CdsService] = MappingProxyType(
    {
        s.id: s
        for s in (
            CdsService(
                "hypoxaemia-mechanism",
                PATIENT_VIEW,
                "Mechanism of hypoxaemia",
                "When a chart is opened: the likely mechanism of hypoxaemia (low inspired "
                "oxygen, hypoventilation, diffusion limitation, V/Q mismatch, shunt) from the "
                "recent blood gases, oximetry and oxygen settings, with the deciding numbers "
                "and what would settle an open question. No card when there is nothing to add.",
                _USAGE,
            ),
            CdsService(
                "oxygen-order-select",
                ORDER_SELECT,
                "Oxygen order and the recent gases",
                _ORDER_DESCRIPTION,
                _USAGE,
            ),
            CdsService(
                "oxygen-order-sign",
                ORDER_SIGN,
                "Oxygen order and the recent gases, at signing",
                _ORDER_DESCRIPTION,
                _USAGE,
            ),
        )
    }
)


def discovery() -> Json:
    """The discovery document: ``{"services": [...]}``."""
    return {"services": [s.discovery() for s in SERVICES.values()]}


def fill(template: str, values: dict[str, str]) -> str | None:
    """The template with each ``{{token}}`` replaced by its URL-escaped value, or None when a
    token it uses has no value (the key cannot be asked for)."""
    text = template
    for token in TOKENS:
        marker = "{{" + token + "}}"
        if marker in text:
            value = values.get(token)
            if value is None:
                return None
            text = text.replace(marker, quote(value, safe=""))
    return text
