"""The code table: every LOINC row the service reads (README, What it reads), end to end."""

from __future__ import annotations

import pytest

from service.fhir import codes as fhir_codes
from service.fhir.extract import read_bundle
from service.intake.model import QUANTITY_UNITS, Fio2Source, Quantity, Specimen
from service.physiology.units import Dimension
from service.terminology import codes

from .builders import bundle, observation

UCUM = "http://unitsofmeasure.org"

Q, S = Quantity, Specimen

# (LOINC, quantity, specimen implied by the code). Beside each row: the LOINC component and
# system (BldA arterial, BldV venous, BldMV mixed venous, BldCV central venous, BldC capillary,
# Bld not stated), and the published HL7 material where its meaning was seen (FHIR core
# observation-vitalsign-oxygensat ValueSet, FHIR vital-signs profiles, US Core Pulse Oximetry,
# HL7 SANER VentilatorObservations ValueSet, HL7 MCC eCare Plan IG examples); "from memory"
# where it was not re-checked. The README's input table lists the same codes.
LOINC_ROWS: list[tuple[str, Quantity, Specimen | None]] = [
    ("2703-7", Q.ARTERIAL_PO2, S.ARTERIAL),  # O2 partial pressure, BldA (MCC IG example)
    ("2019-8", Q.ARTERIAL_PCO2, S.ARTERIAL),  # CO2 partial pressure, BldA (MCC IG)
    ("2744-1", Q.ARTERIAL_PH, S.ARTERIAL),  # pH, BldA (from memory)
    ("1960-4", Q.ARTERIAL_HCO3, S.ARTERIAL),  # bicarbonate, BldA (from memory)
    ("1925-7", Q.ARTERIAL_BASE_EXCESS, S.ARTERIAL),  # base excess, BldA (from memory)
    ("2708-6", Q.ARTERIAL_SO2, S.ARTERIAL),  # O2 sat, BldA (FHIR oxygensat VS); alone: co-oximetry
    ("2714-4", Q.ARTERIAL_O2HB, S.ARTERIAL),  # O2Hb/total Hb, BldA (from memory)
    ("59408-5", Q.SPO2, None),  # O2 sat, BldA, pulse oximetry (FHIR oxygensat ValueSet, US Core)
    ("59417-6", Q.SPO2, None),  # O2 sat, BldA, pulse oximetry, resting (FHIR oxygensat ValueSet)
    ("59407-7", Q.SPO2, None),  # O2 sat, preductal, pulse oximetry (from memory)
    ("59418-4", Q.SPO2, None),  # O2 sat, postductal, pulse oximetry (from memory)
    ("2705-2", Q.VENOUS_PO2, S.VENOUS),  # O2 partial pressure, BldV (from memory)
    ("2021-4", Q.VENOUS_PCO2, S.VENOUS),  # CO2 partial pressure, BldV (from memory)
    ("2746-6", Q.VENOUS_PH, S.VENOUS),  # pH, BldV (from memory)
    ("2711-0", Q.VENOUS_SO2, S.VENOUS),  # O2 saturation, BldV (from memory)
    ("19211-2", Q.MIXED_VENOUS_PO2, S.MIXED_VENOUS),  # O2 partial pressure, BldMV (from memory)
    ("19224-5", Q.MIXED_VENOUS_SO2, S.MIXED_VENOUS),  # O2 saturation, BldMV (from memory)
    ("97549-0", Q.CENTRAL_VENOUS_SO2, S.CENTRAL_VENOUS),  # O2 saturation, BldCV (from memory)
    ("2704-5", Q.CAPILLARY_PO2, S.CAPILLARY),  # O2 partial pressure, BldC (from memory)
    ("2020-6", Q.CAPILLARY_PCO2, S.CAPILLARY),  # CO2 partial pressure, BldC (from memory)
    ("2745-8", Q.CAPILLARY_PH, S.CAPILLARY),  # pH, BldC (from memory)
    ("11556-8", Q.ARTERIAL_PO2, S.UNKNOWN),  # O2 partial pressure, Bld: flagged (from memory)
    ("11557-6", Q.ARTERIAL_PCO2, S.UNKNOWN),  # CO2 partial pressure, Bld (from memory)
    ("11558-4", Q.ARTERIAL_PH, S.UNKNOWN),  # pH, Bld (from memory)
    ("3150-0", Q.FIO2, None),  # inhaled O2 concentration (from memory)
    ("71835-3", Q.FIO2, None),  # O2/gas total, inhaled gas (from memory)
    ("19994-3", Q.FIO2, None),  # ventilator FiO2 setting (HL7 SANER ValueSet)
    ("3151-8", Q.OXYGEN_FLOW, None),  # inhaled O2 flow rate (US Core example)
    ("19941-4", Q.OXYGEN_FLOW, None),  # O2 gas flow, delivery system (from memory)
    ("107117-4", Q.OXYGEN_DEVICE, None),  # method of O2 delivery (from memory)
    ("20077-4", Q.PEEP, None),  # PEEP setting, ventilator (HL7 SANER ValueSet)
    ("76248-4", Q.PEEP, None),  # PEEP, on ventilator (from memory)
    ("76530-5", Q.MEAN_AIRWAY_PRESSURE, None),  # mean airway pressure, on ventilator (from memory)
    ("9279-1", Q.RESPIRATORY_RATE, None),  # respiratory rate (FHIR vital-signs profile)
    ("8310-5", Q.BODY_TEMPERATURE, None),  # body temperature (FHIR vital-signs profile)
    ("718-7", Q.HAEMOGLOBIN, None),  # haemoglobin, Bld (from memory)
    ("55782-7", Q.HAEMOGLOBIN, None),  # haemoglobin, Bld, oximetry (from memory)
    ("30313-1", Q.HAEMOGLOBIN, S.ARTERIAL),  # haemoglobin, BldA (from memory)
    ("14775-1", Q.HAEMOGLOBIN, S.ARTERIAL),  # haemoglobin, BldA, oximetry (from memory)
    ("20563-3", Q.CARBOXYHAEMOGLOBIN, None),  # COHb/total Hb, Bld (from memory)
    ("2614-6", Q.METHAEMOGLOBIN, None),  # MetHb/total Hb, Bld (from memory; 2614-6, not -4)
    ("76268-2", Q.BAROMETRIC_PRESSURE, None),  # ambient pressure (from memory)
    ("19911-7", Q.DLCO, None),  # DLCO (from memory)
]

# Project CodeSystem https://oxyrule.org/fhir/CodeSystem/input (README, What it reads).
INPUT_ROWS = [
    ("altitude", Q.ALTITUDE),
    ("dlco-percent-predicted", Q.DLCO_PERCENT_PREDICTED),
    ("spo2-exertional-nadir", Q.SPO2_EXERTIONAL_NADIR),
    ("spo2-exertional-baseline", Q.SPO2_EXERTIONAL_BASELINE),
    ("altitude-residence", Q.ALTITUDE_RESIDENCE),
]

# A possible value in the canonical unit of each quantity, to read every row end to end.
SAMPLE: dict[str, tuple[float, str]] = {
    "mm[Hg]": (60.0, "mm[Hg]"),
    "[pH]": (7.4, "[pH]"),
    "1": (0.5, "1"),
    "mmol/L": (24.0, "mmol/L"),
    "L/min": (2.0, "L/min"),
    "cm[H2O]": (8.0, "cm[H2O]"),
    "/min": (18.0, "/min"),
    "Cel": (37.0, "Cel"),
    "g/dL": (13.0, "g/dL"),
    "m": (400.0, "m"),
    "mL/min/mm[Hg]": (25.0, "mL/min/mm[Hg]"),
}


def sample(quantity: Quantity) -> tuple[float, str]:
    if quantity is Q.BAROMETRIC_PRESSURE:
        return 740.0, "mm[Hg]"
    return SAMPLE[QUANTITY_UNITS[quantity]]


def test_loinc_table_has_exactly_the_listed_rows() -> None:
    assert set(codes.LOINC_CONCEPTS) == {code for code, _, _ in LOINC_ROWS}
    assert set(codes.INPUT_CONCEPTS) == {code for code, _ in INPUT_ROWS}


def test_every_intake_quantity_can_be_read_from_some_code() -> None:
    # A DLCO's lower limit of normal comes with the DLCO, in its referenceRange (FHIR R4B
    # Observation.referenceRange.low), not under a code of its own.
    from_reference_range = {Q.DLCO_LOWER_LIMIT, Q.DLCO_PERCENT_LOWER_LIMIT}
    concepts = [*codes.LOINC_CONCEPTS.values(), *codes.INPUT_CONCEPTS.values()]
    assert {c.quantity for c in concepts} == set(Quantity) - from_reference_range


@pytest.mark.parametrize(
    ("code", "quantity", "specimen"), LOINC_ROWS, ids=[r[0] for r in LOINC_ROWS]
)
def test_loinc_row_maps_to_quantity_and_specimen(
    code: str, quantity: Quantity, specimen: Specimen | None
) -> None:
    concept = codes.concept_for(codes.LOINC, code)
    assert concept is not None
    assert concept.quantity is quantity
    assert concept.specimen is specimen


@pytest.mark.parametrize(
    ("code", "quantity", "specimen"), LOINC_ROWS, ids=[r[0] for r in LOINC_ROWS]
)
def test_loinc_row_is_read_from_a_bundle(
    code: str, quantity: Quantity, specimen: Specimen | None
) -> None:
    if quantity is Q.OXYGEN_DEVICE:
        obs = observation(code, valueCodeableConcept={"coding": [device("ventilator")]})
    else:
        value, unit = sample(quantity)
        obs = observation(code, value, unit)
    intake = read_bundle(bundle(obs))
    [measurement] = intake.measurements
    assert measurement.quantity is quantity
    assert measurement.specimen is specimen


@pytest.mark.parametrize(("code", "quantity"), INPUT_ROWS)
def test_project_input_code_is_read_from_a_bundle(code: str, quantity: Quantity) -> None:
    if quantity is Q.ALTITUDE_RESIDENCE:
        concept = {"coding": [{"system": codes.ALTITUDE_RESIDENCE_CODES, "code": "resident"}]}
        obs = observation(code, system=codes.INPUT_CODES, valueCodeableConcept=concept)
        [measurement] = read_bundle(bundle(obs)).measurements
        assert (measurement.quantity, measurement.value) == (quantity, "resident")
        return
    value, unit = sample(quantity)
    obs = observation(code, value, unit, system=codes.INPUT_CODES)
    [measurement] = read_bundle(bundle(obs)).measurements
    assert measurement.quantity is quantity


def test_fio2_codes_name_their_source() -> None:
    # LOINC: 19994-3 is the ventilator's set FiO2 ("Oxygen/Total gas setting [Volume Fraction]
    # Ventilator", HL7 SANER ValueSet); 3150-0 and 71835-3 are measured (from memory).
    sources = {c: codes.LOINC_CONCEPTS[c].fio2_source for c in ("3150-0", "71835-3", "19994-3")}
    assert sources == {
        "3150-0": Fio2Source.MEASURED,
        "71835-3": Fio2Source.MEASURED,
        "19994-3": Fio2Source.VENTILATOR_SETTING,
    }


def test_unit_dimension_matches_the_intake_canonical_unit() -> None:
    for concept in [*codes.LOINC_CONCEPTS.values(), *codes.INPUT_CONCEPTS.values()]:
        if concept.dimension is not None:
            assert Dimension(QUANTITY_UNITS[concept.quantity]) is concept.dimension


def test_system_urls() -> None:
    # FHIR R4 terminology URIs of LOINC, UCUM, SNOMED CT and HL7 v2 table 0487 (THO).
    assert codes.LOINC == "http://loinc.org"
    assert codes.UCUM == "http://unitsofmeasure.org"
    assert codes.SNOMED_CT == "http://snomed.info/sct"
    assert codes.V2_SPECIMEN_TYPE == "http://terminology.hl7.org/CodeSystem/v2-0487"
    assert codes.INPUT_CODES == "https://oxyrule.org/fhir/CodeSystem/input"
    assert codes.OXYGEN_DEVICE_CODES == "https://oxyrule.org/fhir/CodeSystem/oxygen-device"


def test_specimen_codes() -> None:
    # SNOMED CT specimen concepts (from memory) and HL7 v2 table 0487 (HL7 terminology, THO).
    assert codes.SPECIMEN_TYPES[(codes.SNOMED_CT, "122552005")] is S.ARTERIAL
    assert codes.SPECIMEN_TYPES[(codes.SNOMED_CT, "122555007")] is S.VENOUS
    assert codes.SPECIMEN_TYPES[(codes.SNOMED_CT, "122554006")] is S.CAPILLARY
    assert codes.SPECIMEN_TYPES[(codes.V2_SPECIMEN_TYPE, "BLDA")] is S.ARTERIAL
    assert codes.SPECIMEN_TYPES[(codes.V2_SPECIMEN_TYPE, "BLDV")] is S.VENOUS
    assert (codes.V2_SPECIMEN_TYPE, "BLD") not in codes.SPECIMEN_TYPES  # type not stated


def test_snomed_devices_map_onto_project_device_codes() -> None:
    assert set(codes.SNOMED_OXYGEN_DEVICES.values()) <= codes.OXYGEN_DEVICES


def device(code: str) -> dict[str, str]:
    """A coding of the project oxygen-device CodeSystem."""
    return {"system": codes.OXYGEN_DEVICE_CODES, "code": code}


def test_a_dlco_lower_limit_is_read_from_its_reference_range() -> None:
    # FHIR R4B Observation.referenceRange: the first range is the normal range; its ``low`` is
    # the lower limit of normal (GLI 2017 DLCO reference equations report one per patient).
    obs = observation(
        "19911-7",
        14.0,
        "mL/min/mm[Hg]",
        referenceRange=[
            {
                "low": {
                    "value": 18.5,
                    "unit": "mL/min/mm[Hg]",
                    "system": UCUM,
                    "code": "mL/min/mm[Hg]",
                }
            },
            {
                "low": {
                    "value": 99.0,
                    "unit": "mL/min/mm[Hg]",
                    "system": UCUM,
                    "code": "mL/min/mm[Hg]",
                }
            },
        ],
    )
    found = {m.quantity: m.value for m in read_bundle(bundle(obs)).measurements}
    assert found == {Q.DLCO: 14.0, Q.DLCO_LOWER_LIMIT: 18.5}
    percent = observation(
        "dlco-percent-predicted",
        45.0,
        "%",
        system=codes.INPUT_CODES,
        referenceRange=[{"low": {"value": 72.0, "unit": "%", "system": UCUM, "code": "%"}}],
    )
    found = {m.quantity: m.value for m in read_bundle(bundle(percent)).measurements}
    assert found == {Q.DLCO_PERCENT_PREDICTED: 0.45, Q.DLCO_PERCENT_LOWER_LIMIT: 0.72}


def test_the_resource_types_named_in_messages_are_exactly_fhir_r4b_s() -> None:
    # Outside reference: the resource classes of fhir.resources (R4B, 4.3.0). A message names
    # a resource type only when it is in this list; anything else sent is not repeated.
    import importlib
    import inspect
    import pkgutil

    import fhir.resources.R4B as r4b
    from fhir.resources.R4B.resource import Resource

    found = set()
    for module_info in pkgutil.iter_modules(r4b.__path__):
        module = importlib.import_module(f"fhir.resources.R4B.{module_info.name}")
        for item in vars(module).values():
            if inspect.isclass(item) and issubclass(item, Resource):
                found.add(item.get_resource_type())
    assert found - {"Resource", "DomainResource"} == fhir_codes.RESOURCE_TYPES
