"""The FHIR-agnostic intake model: named measurements in canonical units.

Both the FHIR and the HL7 v2 adapters produce an ``Intake``; everything after them (pairing,
physiology, rules) reads only this. Values are already converted to the canonical unit of
their ``Quantity`` (see ``QUANTITY_UNITS``), once, by the adapter.

The records built for every value read (``Source``, ``Measurement``, ``IntakeIssue``,
``Patient``) are frozen msgspec Structs rather than frozen dataclasses: the same immutable,
hashable, comparable records, built in C (an eight-field ``Measurement`` in about 0.08 µs
against 0.9 µs for a frozen slotted dataclass, whose ``__init__`` sets each field through
``object.__setattr__``; they were 1.3 µs of the reader's ~8 µs per Observation). Change one with
``msgspec.structs.replace``. ``gc=False``: none of them can take part in a reference cycle
(they hold strings, numbers, enums, dates and other such records only), so the garbage
collector need not track them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime
from enum import StrEnum

import msgspec


class Quantity(StrEnum):
    """What a measurement measures. The value names the fact the rules see."""

    ARTERIAL_PO2 = "arterial_po2"
    ARTERIAL_PCO2 = "arterial_pco2"
    ARTERIAL_PH = "arterial_ph"
    ARTERIAL_HCO3 = "arterial_hco3"
    ARTERIAL_BASE_EXCESS = "arterial_base_excess"
    ARTERIAL_SO2 = "arterial_so2"  # by co-oximetry / analyser (2708-6 without 59408-5)
    ARTERIAL_O2HB = "arterial_o2hb"  # fractional oxyhaemoglobin, O2Hb / total Hb (2714-4)
    SPO2 = "spo2"  # by pulse oximetry
    VENOUS_PO2 = "venous_po2"
    VENOUS_PCO2 = "venous_pco2"
    VENOUS_PH = "venous_ph"
    VENOUS_SO2 = "venous_so2"
    MIXED_VENOUS_PO2 = "mixed_venous_po2"
    MIXED_VENOUS_SO2 = "mixed_venous_so2"
    CENTRAL_VENOUS_SO2 = "central_venous_so2"
    CAPILLARY_PO2 = "capillary_po2"
    CAPILLARY_PCO2 = "capillary_pco2"
    CAPILLARY_PH = "capillary_ph"
    FIO2 = "fio2"
    OXYGEN_FLOW = "oxygen_flow"
    OXYGEN_DEVICE = "oxygen_device"  # a code of the oxygen-device CodeSystem
    PEEP = "peep"
    MEAN_AIRWAY_PRESSURE = "mean_airway_pressure"
    RESPIRATORY_RATE = "respiratory_rate"
    BODY_TEMPERATURE = "body_temperature"
    HAEMOGLOBIN = "haemoglobin"
    CARBOXYHAEMOGLOBIN = "carboxyhaemoglobin"
    METHAEMOGLOBIN = "methaemoglobin"
    BAROMETRIC_PRESSURE = "barometric_pressure"
    ALTITUDE = "altitude"
    ALTITUDE_RESIDENCE = "altitude_residence"  # a code: lives at this altitude or visiting
    DLCO = "dlco"
    DLCO_PERCENT_PREDICTED = "dlco_percent_predicted"
    DLCO_LOWER_LIMIT = "dlco_lower_limit"  # Observation.referenceRange.low of a DLCO
    DLCO_PERCENT_LOWER_LIMIT = "dlco_percent_lower_limit"  # the same, of a % predicted DLCO
    SPO2_EXERTIONAL_NADIR = "spo2_exertional_nadir"
    SPO2_EXERTIONAL_BASELINE = "spo2_exertional_baseline"


# Canonical unit (UCUM) of each quantity. Saturations, FiO2 and Hb fractions are fractions
# (unit "1") inside the service; the rule catalogue presents saturations in %.
QUANTITY_UNITS: dict[Quantity, str] = {
    **{q: "mm[Hg]" for q in Quantity if q.value.endswith(("_po2", "_pco2"))},
    **{q: "[pH]" for q in Quantity if q.value.endswith("_ph")},
    **{q: "1" for q in Quantity if q.value.endswith("so2")},
    Quantity.SPO2: "1",
    Quantity.ARTERIAL_O2HB: "1",
    Quantity.SPO2_EXERTIONAL_NADIR: "1",
    Quantity.SPO2_EXERTIONAL_BASELINE: "1",
    Quantity.ARTERIAL_HCO3: "mmol/L",
    Quantity.ARTERIAL_BASE_EXCESS: "mmol/L",
    Quantity.FIO2: "1",
    Quantity.OXYGEN_FLOW: "L/min",
    Quantity.OXYGEN_DEVICE: "",
    Quantity.ALTITUDE_RESIDENCE: "",
    Quantity.PEEP: "cm[H2O]",
    Quantity.MEAN_AIRWAY_PRESSURE: "cm[H2O]",
    Quantity.RESPIRATORY_RATE: "/min",
    Quantity.BODY_TEMPERATURE: "Cel",
    Quantity.HAEMOGLOBIN: "g/dL",
    Quantity.CARBOXYHAEMOGLOBIN: "1",
    Quantity.METHAEMOGLOBIN: "1",
    Quantity.BAROMETRIC_PRESSURE: "mm[Hg]",
    Quantity.ALTITUDE: "m",
    Quantity.DLCO: "mL/min/mm[Hg]",
    Quantity.DLCO_PERCENT_PREDICTED: "1",
    Quantity.DLCO_LOWER_LIMIT: "mL/min/mm[Hg]",
    Quantity.DLCO_PERCENT_LOWER_LIMIT: "1",
}


CODED: frozenset[Quantity] = frozenset({Quantity.OXYGEN_DEVICE, Quantity.ALTITUDE_RESIDENCE})
"""Quantities whose value is a code (read from valueCodeableConcept or a coded OBX-5)."""


class Specimen(StrEnum):
    """Where a blood sample came from, as far as the data say."""

    ARTERIAL = "arterial"
    VENOUS = "venous"
    CAPILLARY = "capillary"
    MIXED_VENOUS = "mixed-venous"
    CENTRAL_VENOUS = "central-venous"
    UNKNOWN = "unknown"


class Fio2Source(StrEnum):
    """How an FiO2 came to be known (result parameter ``fio2-source``)."""

    MEASURED = "measured"
    VENTILATOR_SETTING = "ventilator-setting"
    DEVICE_ESTIMATE = "device-estimate"
    SITE_SETTING = "site-setting"


class Source(msgspec.Struct, frozen=True, gc=False):
    """Where a value was read: a reference for ``derivedFrom`` and a FHIRPath (or v2 path)
    for error messages, e.g. ``Observation/pao2-1`` and ``Bundle.entry[3].resource``."""

    reference: str
    expression: str


class Measurement(msgspec.Struct, frozen=True, gc=False):
    """One value, converted to the canonical unit of its quantity.

    ``sent_value``/``sent_unit`` keep what the sender wrote when a conversion happened.
    ``value`` is a str only for coded quantities (``CODED``).
    """

    quantity: Quantity
    value: float | str
    time: datetime | None
    source: Source
    specimen: Specimen | None = None
    sent_value: float | None = None
    sent_unit: str | None = None
    fio2_source: Fio2Source | None = None  # FIO2 only

    @property
    def unit(self) -> str:
        """The canonical UCUM unit of ``value``."""
        return QUANTITY_UNITS[self.quantity]


class Severity(StrEnum):
    """OperationOutcome issue severities used by intake issues."""

    ERROR = "error"
    WARNING = "warning"
    INFORMATION = "information"


class IntakeIssue(msgspec.Struct, frozen=True, gc=False):
    """Something met while reading the input that the result must report.

    ``code`` is a finding code of the result (``unit-converted``, ``observation-ignored``,
    ``specimen-unknown``, ``value-out-of-range``, …); ``expression`` locates the element.
    """

    code: str
    severity: Severity
    message: str
    expression: str


class Patient(msgspec.Struct, frozen=True, gc=False):
    """The little the service needs of the patient. No name, no identifier."""

    reference: str | None
    birth_date: date | None
    gender: str | None


@dataclass(slots=True)
class Intake:
    """Everything read from one input (one patient's recent data)."""

    patient: Patient | None
    measurements: list[Measurement] = field(default_factory=list)
    issues: list[IntakeIssue] = field(default_factory=list)
    addresses: dict[str, dict[str, object]] = field(default_factory=dict)
    """How the result points at each input resource, by its ``Source.reference`` (or
    ``Patient.reference``): a FHIR Reference as JSON (``service.fhir.addresses``). A reference
    with no entry here is written as the adapter's fallback says."""
