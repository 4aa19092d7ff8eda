"""The code table: every LOINC row of contract.md §2 / standards.md §1, read end to end."""

from __future__ import annotations

import pytest

from service.fhir import codes
from service.fhir.extract import read_bundle
from service.intake.model import QUANTITY_UNITS, Fio2Source, Quantity, Specimen
from service.physiology.units import Dimension

from .builders import bundle, observation

Q, S = Quantity, Specimen

# (LOINC, quantity, specimen implied by the code). Source of each row beside it:
# standards.md §1.x table and its verification tags; contract.md §2 lists the same codes.
LOINC_ROWS: list[tuple[str, Quantity, Specimen | None]] = [
    ("2703-7", Q.ARTERIAL_PO2, S.ARTERIAL),  # standards.md §1.2 (GEC, VA, DIC, LNm)
    ("2019-8", Q.ARTERIAL_PCO2, S.ARTERIAL),  # standards.md §1.2 (GEC, VA, DIC)
    ("2744-1", Q.ARTERIAL_PH, S.ARTERIAL),  # standards.md §1.2 (GEC, 2ry)
    ("1960-4", Q.ARTERIAL_HCO3, S.ARTERIAL),  # standards.md §1.2 (2ry)
    ("1925-7", Q.ARTERIAL_BASE_EXCESS, S.ARTERIAL),  # standards.md §1.2 (LNm)
    ("2708-6", Q.ARTERIAL_SO2, S.ARTERIAL),  # standards.md §1.2 + §1.9 (alone: co-oximetry)
    ("59408-5", Q.SPO2, None),  # standards.md §1.3 (USC, FVS)
    ("59417-6", Q.SPO2, None),  # standards.md §1.3 (FVS)
    ("59407-7", Q.SPO2, None),  # standards.md §1.3 (GEC, preductal)
    ("59418-4", Q.SPO2, None),  # standards.md §1.3 (LNC, postductal)
    ("2705-2", Q.VENOUS_PO2, S.VENOUS),  # standards.md §1.4 (EHC, VA, DIC)
    ("2021-4", Q.VENOUS_PCO2, S.VENOUS),  # standards.md §1.4 (EHC, VA, DIC)
    ("2746-6", Q.VENOUS_PH, S.VENOUS),  # standards.md §1.4 (2ry)
    ("2711-0", Q.VENOUS_SO2, S.VENOUS),  # standards.md §1.4 (LNC, VA)
    ("19211-2", Q.MIXED_VENOUS_PO2, S.MIXED_VENOUS),  # standards.md §1.4 (VA)
    ("19224-5", Q.MIXED_VENOUS_SO2, S.MIXED_VENOUS),  # standards.md §1.4 (LNm, VAL)
    ("97549-0", Q.CENTRAL_VENOUS_SO2, S.CENTRAL_VENOUS),  # standards.md §1.4 (2ry, VAL)
    ("2704-5", Q.CAPILLARY_PO2, S.CAPILLARY),  # standards.md §1.5 (GEC, VA)
    ("2020-6", Q.CAPILLARY_PCO2, S.CAPILLARY),  # standards.md §1.5 (GEC, VA)
    ("2745-8", Q.CAPILLARY_PH, S.CAPILLARY),  # standards.md §1.5 (GEC, LNm)
    ("11556-8", Q.ARTERIAL_PO2, S.UNKNOWN),  # standards.md §1.6 (GEC, DIC): Bld, flagged
    ("11557-6", Q.ARTERIAL_PCO2, S.UNKNOWN),  # standards.md §1.6 (GEC, DIC)
    ("11558-4", Q.ARTERIAL_PH, S.UNKNOWN),  # standards.md §1.6 (GEC)
    ("3150-0", Q.FIO2, None),  # standards.md §1.7 (USC, GEC, LNm)
    ("71835-3", Q.FIO2, None),  # standards.md §1.7 (MII)
    ("19994-3", Q.FIO2, None),  # standards.md §1.7 (MII, SAN): ventilator setting
    ("3151-8", Q.OXYGEN_FLOW, None),  # standards.md §1.7 (USC)
    ("19941-4", Q.OXYGEN_FLOW, None),  # standards.md §1.7 (GEC)
    ("107117-4", Q.OXYGEN_DEVICE, None),  # standards.md §1.7 (2ry, confirm)
    ("20077-4", Q.PEEP, None),  # standards.md §1.7 (SAN, 2ry)
    ("76248-4", Q.PEEP, None),  # standards.md §1.7 (MII)
    ("76530-5", Q.MEAN_AIRWAY_PRESSURE, None),  # standards.md §1.7 (SAN, MII)
    ("9279-1", Q.RESPIRATORY_RATE, None),  # standards.md §1.7 (GEC, VAL)
    ("8310-5", Q.BODY_TEMPERATURE, None),  # standards.md §1.8 (GEC, VAL, USC)
    ("718-7", Q.HAEMOGLOBIN, None),  # standards.md §1.8 (GEC, VA)
    ("55782-7", Q.HAEMOGLOBIN, None),  # standards.md §1.8 (GEC)
    ("30313-1", Q.HAEMOGLOBIN, S.ARTERIAL),  # standards.md §1.2 (MII)
    ("14775-1", Q.HAEMOGLOBIN, S.ARTERIAL),  # standards.md §1.2 (GEC)
    ("20563-3", Q.CARBOXYHAEMOGLOBIN, None),  # standards.md §1.8 (MIM, 2ry)
    ("2614-6", Q.METHAEMOGLOBIN, None),  # standards.md §1.8 (MIM, 2ry; 2614-6 not -4)
    ("76268-2", Q.BAROMETRIC_PRESSURE, None),  # standards.md §1.8 (LNm)
    ("19911-7", Q.DLCO, None),  # standards.md §1.8 (LNC)
]

# Project CodeSystem https://oxyrule.org/fhir/CodeSystem/input — contract.md §2.
INPUT_ROWS = [
    ("altitude", Q.ALTITUDE),
    ("dlco-percent-predicted", Q.DLCO_PERCENT_PREDICTED),
    ("spo2-exertional-nadir", Q.SPO2_EXERTIONAL_NADIR),
    ("spo2-exertional-baseline", Q.SPO2_EXERTIONAL_BASELINE),
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
    concepts = [*codes.LOINC_CONCEPTS.values(), *codes.INPUT_CONCEPTS.values()]
    assert {c.quantity for c in concepts} == set(Quantity)


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
    value, unit = sample(quantity)
    obs = observation(code, value, unit, system=codes.INPUT_CODES)
    [measurement] = read_bundle(bundle(obs)).measurements
    assert measurement.quantity is quantity


def test_fio2_codes_name_their_source() -> None:
    # standards.md §1.7: 19994-3 is the ventilator's set FiO2; 3150-0 and 71835-3 are measured.
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
    # standards.md §1 (LOINC), §2 (UCUM), §1.1 (SNOMED CT, v2 table 0487); contract.md §2.
    assert codes.LOINC == "http://loinc.org"
    assert codes.UCUM == "http://unitsofmeasure.org"
    assert codes.SNOMED_CT == "http://snomed.info/sct"
    assert codes.V2_SPECIMEN_TYPE == "http://terminology.hl7.org/CodeSystem/v2-0487"
    assert codes.INPUT_CODES == "https://oxyrule.org/fhir/CodeSystem/input"
    assert codes.OXYGEN_DEVICE_CODES == "https://oxyrule.org/fhir/CodeSystem/oxygen-device"


def test_specimen_codes() -> None:
    # standards.md §1.1: SNOMED CT specimen concepts (2ry) and HL7 v2 table 0487 (UTG).
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
    assert found - {"Resource", "DomainResource"} == codes.RESOURCE_TYPES
