"""read_bundle: what is read, how it is converted, and what is reported."""

from __future__ import annotations

import subprocess
import sys
import time
from datetime import UTC, date, datetime, timedelta, timezone
from typing import Any

import pytest

from service.fhir import codes as fhir_codes
from service.fhir.concept_map import read_concept_map
from service.fhir.extract import read_bundle
from service.fhir.outcome import BundleError
from service.intake.model import (
    Fio2Source,
    Intake,
    IntakeIssue,
    Measurement,
    Quantity,
    Severity,
    Specimen,
)
from service.physiology.constants import KPA_PER_MMHG
from service.terminology import codes

from .builders import (
    ROOT,
    WHEN,
    Json,
    bundle,
    fixture,
    observation,
    patient,
    quantity,
    tagged,
)

LN = codes.LOINC
TEN_AM = datetime(2026, 1, 5, 10, tzinfo=timezone(timedelta(hours=1)))


def only(intake: Intake) -> Measurement:
    [measurement] = intake.measurements
    return measurement


def issues(intake: Intake, code: str) -> list[IntakeIssue]:
    return [i for i in intake.issues if i.code == code]


# --- Units ------------------------------------------------------------------------------------


def test_kpa_and_mmhg_feeds_give_the_same_canonical_values() -> None:
    # UCUM essence: m[Hg] = 133.3220 kPa, so 1 mm[Hg] = 0.1333220 kPa.
    assert KPA_PER_MMHG == 0.1333220
    in_mmhg = bundle(
        observation("2703-7", 72.0, "mm[Hg]", oid="a"),
        observation("2019-8", 41.0, "mm[Hg]", oid="b"),
        observation("76268-2", 760.0, "mm[Hg]", oid="c"),
    )
    in_kpa = bundle(
        observation("2703-7", 72.0 * 0.1333220, "kPa", oid="a"),
        observation("2019-8", 41.0 * 0.1333220, "kPa", oid="b"),
        observation("76268-2", 760.0 * 0.1333220, "kPa", oid="c"),
    )
    mmhg = [m.value for m in read_bundle(in_mmhg).measurements]
    kpa = [m.value for m in read_bundle(in_kpa).measurements]
    assert kpa == pytest.approx(mmhg, rel=1e-12)
    assert mmhg == [72.0, 41.0, 760.0]


def test_kpa_conversion_keeps_what_was_sent_and_says_so() -> None:
    intake = read_bundle(bundle(observation("2703-7", 13.3322, "kPa")))
    m = only(intake)
    assert m.value == pytest.approx(100.0, rel=1e-12)
    assert (m.sent_value, m.sent_unit) == (13.3322, "kPa")
    [issue] = issues(intake, "unit-converted")
    assert issue.severity is Severity.INFORMATION
    assert issue.expression == "Bundle.entry[0].resource.valueQuantity"
    assert "kPa" in issue.message


def test_canonical_unit_is_not_reported() -> None:
    intake = read_bundle(bundle(observation("2703-7", 80, "mm[Hg]")))
    assert (only(intake).sent_value, only(intake).sent_unit) == (None, None)
    assert intake.issues == []


@pytest.mark.parametrize(
    ("value", "unit", "severity"),
    [
        # LOINC 3150-0 example unit is % (from memory): held as a fraction inside the
        # service, which is a representation, not a conversion worth an issue.
        (21, "%", None),
        (0.21, "1", None),  # 71835-3 is a pure fraction (LOINC, from memory)
        (0.21, "%", Severity.WARNING),  # a fraction sent with % (common practice)
        (21, "1", Severity.WARNING),  # a percentage sent with unit 1
    ],
)
def test_fio2_forms_all_read_as_0_21(value: float, unit: str, severity: Severity | None) -> None:
    intake = read_bundle(bundle(observation("3150-0", value, unit)))
    m = only(intake)
    assert m.quantity is Quantity.FIO2
    assert m.value == pytest.approx(0.21)
    assert m.fio2_source is Fio2Source.MEASURED
    converted = issues(intake, "unit-converted")
    if severity is None:
        assert converted == []
    else:
        assert [i.severity for i in converted] == [severity]
        assert (m.sent_value, m.sent_unit) == (value, unit)


def test_ventilator_fio2_setting_is_marked_as_such() -> None:
    m = only(read_bundle(bundle(observation("19994-3", 0.6, "1"))))
    assert m.fio2_source is Fio2Source.VENTILATOR_SETTING


@pytest.mark.parametrize(("value", "unit"), [(1.4, "1"), (140, "%"), (0.05, "1"), (0, "%")])
def test_impossible_fio2_is_reported_and_dropped(value: float, unit: str) -> None:
    intake = read_bundle(bundle(observation("3150-0", value, unit)))
    assert intake.measurements == []
    [issue] = issues(intake, "value-out-of-range")
    assert issue.severity is Severity.ERROR
    assert issue.expression == "Bundle.entry[0].resource.valueQuantity.value"


@pytest.mark.parametrize(
    ("code", "value", "unit"),
    [
        ("2703-7", -5, "mm[Hg]"),
        ("2744-1", 9.1, "[pH]"),
        ("8310-5", 60, "Cel"),
        ("59408-5", 104, "%"),
        ("718-7", 0.2, "g/dL"),
    ],
)
def test_impossible_value_is_reported_dropped_and_the_rest_is_kept(
    code: str, value: float, unit: str
) -> None:
    intake = read_bundle(
        bundle(observation(code, value, unit, oid="bad"), observation("2019-8", 40, "mm[Hg]"))
    )
    assert [m.quantity for m in intake.measurements] == [Quantity.ARTERIAL_PCO2]
    [issue] = issues(intake, "value-out-of-range")
    assert issue.severity is Severity.ERROR
    assert issue.expression == "Bundle.entry[0].resource.valueQuantity.value"
    assert str(value) not in issue.message  # messages never quote a patient's value


def test_saturation_fraction_sent_with_percent_is_refused_with_a_hint() -> None:
    intake = read_bundle(bundle(observation("59408-5", 0.97, "%")))
    assert intake.measurements == []
    [issue] = issues(intake, "value-out-of-range")
    assert "fraction sent with unit '%'" in issue.message


def test_saturation_percent_becomes_a_fraction() -> None:
    m = only(read_bundle(bundle(observation("2708-6", 95, "%"))))
    assert m.value == pytest.approx(0.95)
    assert m.unit == "1"


def test_mixed_units_are_converted_once() -> None:
    intake = read_bundle(fixture("ventilated-mixed-units.bundle.json"))
    by = {m.source.reference: m for m in intake.measurements}
    assert by["Observation/vent-hb"].value == pytest.approx(12.1)  # g/L -> g/dL
    assert by["Observation/vent-temp"].value == pytest.approx(38.0)  # [degF] -> Cel
    assert by["Observation/vent-pb"].value == pytest.approx(101.3 / 0.1333220)
    assert by["Observation/vent-fio2-set"].value == pytest.approx(0.6)
    assert by["Observation/vent-cohb"].value == pytest.approx(0.012)


def test_ph_without_a_unit_is_read() -> None:
    m = only(read_bundle(bundle(observation("2744-1", 7.38, None))))
    assert m.value == 7.38


def test_unit_text_is_used_when_there_is_no_ucum_code() -> None:
    obs = observation("2703-7", valueQuantity={"value": 10, "unit": "kPa"})
    m = only(read_bundle(bundle(obs)))
    assert m.value == pytest.approx(10 / 0.1333220)


def test_dlco_is_read_in_its_canonical_unit_only() -> None:
    m = only(read_bundle(bundle(observation("19911-7", 24.0, "mL/min/mm[Hg]"))))
    assert m.value == 24.0
    with pytest.raises(BundleError) as caught:
        read_bundle(bundle(observation("19911-7", 8.0, "mmol/min/kPa")))
    assert caught.value.problems[0].expression == "Bundle.entry[0].resource.valueQuantity.code"


# --- SpO2 versus SaO2 (US Core Pulse Oximetry profile) -------------------------------------


@pytest.mark.parametrize(
    "codings",
    [
        [(LN, "59408-5"), (LN, "2708-6")],  # US Core pulse-oximetry slices (USC)
        [(LN, "2708-6"), (LN, "59408-5")],  # the order does not matter
        [(LN, "2708-6"), (codes.IEEE_11073, "150456")],  # MDC_PULS_OXIM_SAT_O2 (USC example)
    ],
)
def test_2708_6_beside_a_pulse_oximetry_code_is_spo2(codings: list[tuple[str, str]]) -> None:
    m = only(read_bundle(bundle(observation(codings, 93, "%"))))
    assert m.quantity is Quantity.SPO2
    assert m.specimen is None


@pytest.mark.parametrize(
    "profile", [fhir_codes.US_CORE_PULSE_OXIMETRY, fhir_codes.US_CORE_PULSE_OXIMETRY + "|6.1.0"]
)
def test_2708_6_in_a_us_core_pulse_oximetry_profile_is_spo2(profile: str) -> None:
    obs = observation("2708-6", 93, "%")
    obs["meta"]["profile"] = [profile]
    assert only(read_bundle(bundle(obs))).quantity is Quantity.SPO2


def test_2708_6_alone_is_arterial_so2() -> None:
    # FHIR core oxygensat profile, US Core Pulse Oximetry: 2708-6 without 59408-5 is SaO2 by
    # co-oximetry.
    m = only(read_bundle(bundle(observation("2708-6", 93, "%"))))
    assert m.quantity is Quantity.ARTERIAL_SO2
    assert m.specimen is Specimen.ARTERIAL


def test_first_known_coding_wins() -> None:
    codings = [("http://example.org/local", "X1"), (LN, "2019-8"), (LN, "2703-7")]
    assert only(read_bundle(bundle(observation(codings, 40, "mm[Hg]")))).quantity is (
        Quantity.ARTERIAL_PCO2
    )


# --- Status -----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("status", "severity"),
    [
        ("entered-in-error", Severity.INFORMATION),  # FHIR R4 observation-status
        ("cancelled", Severity.INFORMATION),  # FHIR R4 observation-status
        ("registered", Severity.INFORMATION),
        ("unknown", Severity.WARNING),
    ],
)
def test_status_that_withdraws_the_value_is_ignored_and_said(
    status: str, severity: Severity
) -> None:
    intake = read_bundle(bundle(observation("2703-7", 80, "mm[Hg]", status=status)))
    assert intake.measurements == []
    [issue] = issues(intake, "observation-ignored")
    assert issue.severity is severity
    assert issue.expression == "Bundle.entry[0].resource.status"


@pytest.mark.parametrize("status", ["final", "amended", "corrected", "preliminary"])
def test_status_of_a_result_is_used(status: str) -> None:
    assert only(read_bundle(bundle(observation("2703-7", 80, "mm[Hg]", status=status))))


# --- Specimen for "Bld" codes (LOINC system Bld: blood, type not stated) -------------------


def test_unspecified_blood_without_specimen_is_flagged_unknown() -> None:
    intake = read_bundle(bundle(observation("11556-8", 50, "mm[Hg]")))
    m = only(intake)
    assert m.specimen is Specimen.UNKNOWN
    [issue] = issues(intake, "specimen-unknown")
    assert issue.severity is Severity.WARNING
    # The element that lacks it: a FHIRPath to the absent `specimen` would select nothing.
    assert issue.expression == "Bundle.entry[0].resource"


def specimen(sid: str, system: str, code: str) -> Json:
    return tagged(
        {
            "resourceType": "Specimen",
            "id": sid,
            "type": {"coding": [{"system": system, "code": code}]},
        }
    )


@pytest.mark.parametrize(
    ("system", "code", "loinc", "quantity", "found"),
    [
        (codes.SNOMED_CT, "122555007", "11556-8", Quantity.VENOUS_PO2, Specimen.VENOUS),
        (codes.SNOMED_CT, "122552005", "11557-6", Quantity.ARTERIAL_PCO2, Specimen.ARTERIAL),
        (codes.SNOMED_CT, "122554006", "11558-4", Quantity.CAPILLARY_PH, Specimen.CAPILLARY),
        (codes.V2_SPECIMEN_TYPE, "BLDV", "11557-6", Quantity.VENOUS_PCO2, Specimen.VENOUS),
        (codes.V2_SPECIMEN_TYPE, "BLDA", "11556-8", Quantity.ARTERIAL_PO2, Specimen.ARTERIAL),
    ],
)
def test_unspecified_blood_takes_the_bundled_specimen_type(
    system: str, code: str, loinc: str, quantity: Quantity, found: Specimen
) -> None:
    value, unit = (7.35, "[pH]") if loinc == "11558-4" else (45, "mm[Hg]")
    obs = observation(loinc, value, unit, specimen={"reference": "Specimen/s1"})
    intake = read_bundle(bundle(obs, specimen("s1", system, code)))
    m = only(intake)
    assert (m.quantity, m.specimen) == (quantity, found)
    assert issues(intake, "specimen-unknown") == []


def test_unspecified_blood_takes_a_contained_specimen_type() -> None:
    intake = read_bundle(fixture("venous-specimen-transaction.bundle.json"))
    kinds = [(m.quantity, m.specimen) for m in intake.measurements]
    assert kinds == [
        (Quantity.VENOUS_PO2, Specimen.VENOUS),
        (Quantity.VENOUS_PCO2, Specimen.VENOUS),
        (Quantity.VENOUS_PH, Specimen.VENOUS),
        (Quantity.ARTERIAL_PO2, Specimen.ARTERIAL),  # contained Specimen, v2 BLDA
    ]
    assert intake.issues == []


@pytest.mark.parametrize(
    ("reference", "extra", "expression"),
    [
        ("Specimen/elsewhere", [], "Bundle.entry[0].resource.specimen.reference"),
        (
            "Specimen/s1",
            [specimen("s1", codes.V2_SPECIMEN_TYPE, "BLD")],  # whole blood: type not stated
            "Bundle.entry[1].resource.type",
        ),
        ("Patient/pt-1", [patient()], "Bundle.entry[0].resource.specimen.reference"),
    ],
)
def test_unspecified_blood_with_unusable_specimen_is_unknown(
    reference: str, extra: list[Json], expression: str
) -> None:
    obs = observation("11556-8", 45, "mm[Hg]", specimen={"reference": reference})
    intake = read_bundle(bundle(obs, *extra))
    assert only(intake).specimen is Specimen.UNKNOWN
    [issue] = issues(intake, "specimen-unknown")
    assert issue.expression == expression


# --- Components, values, codes ----------------------------------------------------------------


def test_us_core_pulse_oximetry_components_become_measurements() -> None:
    intake = read_bundle(fixture("spo2-us-core-oxygen.bundle.json"))
    spo2_obs = [m for m in intake.measurements if m.source.reference == "Observation/spo2-usc"]
    assert [(m.quantity, round(float(m.value), 6)) for m in spo2_obs] == [
        (Quantity.SPO2, 0.91),
        (Quantity.OXYGEN_FLOW, 2.0),
        (Quantity.FIO2, 0.28),
    ]
    assert {m.time for m in spo2_obs} == {datetime(2026, 2, 11, 14, 5, tzinfo=UTC)}
    assert [m.source.expression for m in spo2_obs] == [
        "Bundle.entry[0].resource",
        "Bundle.entry[0].resource.component[0]",
        "Bundle.entry[0].resource.component[1]",
    ]
    assert spo2_obs[2].fio2_source is Fio2Source.MEASURED


def test_components_of_an_unknown_panel_are_read() -> None:
    panel = observation(
        "24336-0",  # Gas panel - Arterial blood (HL7 MCC eCare Plan IG example): not read itself
        component=[
            {
                "code": {"coding": [{"system": LN, "code": "2703-7"}]},
                "valueQuantity": quantity(70, "mm[Hg]"),
            },
            {
                "code": {"coding": [{"system": LN, "code": "8867-4"}]},
                "valueQuantity": quantity(80, "/min"),
            },
        ],
    )
    intake = read_bundle(bundle(panel))
    assert [m.quantity for m in intake.measurements] == [Quantity.ARTERIAL_PO2]
    [ignored] = issues(intake, "observation-ignored")
    assert ignored.expression == "Bundle.entry[0].resource.component[1].code"


def test_unknown_code_is_ignored_and_counted_never_quoted() -> None:
    intake = read_bundle(bundle(observation("8867-4", 80, "/min")))
    assert intake.measurements == []
    [issue] = issues(intake, "observation-ignored")
    assert issue.severity is Severity.INFORMATION
    # Errors name the element and the rule broken, never what was sent (SECURITY.md).
    assert "8867-4" not in issue.message and "1 coding sent" in issue.message
    assert issue.expression == "Bundle.entry[0].resource.code"


def test_data_absent_reason_is_ignored_with_a_reason() -> None:
    dar = {"coding": [{"system": fhir_codes.DATA_ABSENT_REASON, "code": "error"}]}
    intake = read_bundle(bundle(observation("2703-7", dataAbsentReason=dar)))
    assert intake.measurements == []
    [issue] = issues(intake, "observation-ignored")
    assert issue.expression == "Bundle.entry[0].resource.dataAbsentReason"


def test_value_of_the_wrong_type_is_ignored_with_a_warning() -> None:
    intake = read_bundle(bundle(observation("2703-7", valueString="about eighty")))
    assert intake.measurements == []
    [issue] = issues(intake, "observation-ignored")
    assert issue.severity is Severity.WARNING
    assert issue.expression == "Bundle.entry[0].resource.valueString"


def test_a_bound_is_not_a_measurement() -> None:
    obs = observation("2703-7", valueQuantity={**quantity(600, "mm[Hg]"), "comparator": ">"})
    intake = read_bundle(bundle(obs))
    assert intake.measurements == []
    assert issues(intake, "observation-ignored")[0].severity is Severity.WARNING


@pytest.mark.parametrize(
    ("coding", "expected"),
    [
        ({"system": codes.OXYGEN_DEVICE_CODES, "code": "venturi-mask"}, "venturi-mask"),
        ({"system": codes.SNOMED_CT, "code": "336623009"}, "nasal-cannula"),
        ({"system": codes.SNOMED_CT, "code": "426854004"}, "high-flow-nasal"),
    ],
)
def test_oxygen_device_is_read(coding: dict[str, str], expected: str) -> None:
    obs = observation("107117-4", valueCodeableConcept={"coding": [coding]})
    m = only(read_bundle(bundle(obs)))
    assert (m.quantity, m.value) == (Quantity.OXYGEN_DEVICE, expected)


def test_unmapped_oxygen_device_is_ignored_and_counted_never_quoted() -> None:
    cc = {"coding": [{"system": codes.SNOMED_CT, "code": "1234567"}], "text": "invented"}
    intake = read_bundle(bundle(observation("107117-4", valueCodeableConcept=cc)))
    assert intake.measurements == []
    [issue] = issues(intake, "observation-ignored")
    assert "1234567" not in issue.message and "1 coding sent" in issue.message


def test_local_code_is_read_through_the_concept_map() -> None:
    local = read_concept_map(fixture("local-codes.conceptmap.json"))
    obs = observation("PO2-A", 9.0, "kPa", system="https://example.org/lab/analyser-codes")
    assert read_bundle(bundle(obs)).measurements == []  # unknown without the map
    m = only(read_bundle(bundle(obs), concept_map=local))
    assert m.quantity is Quantity.ARTERIAL_PO2


# --- Time -------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("element", "value", "expected"),
    [
        ("effectiveDateTime", WHEN, TEN_AM),
        ("effectiveDateTime", "2026-01-05T09:00:00Z", TEN_AM),
        (
            "effectiveDateTime",
            "2026-01-05T09:00:00.123456789Z",
            TEN_AM + timedelta(microseconds=123456),
        ),
        ("effectiveInstant", "2026-01-05T10:00:00+01:00", TEN_AM),
        ("effectivePeriod", {"start": "2026-01-05T10:00:00+01:00"}, TEN_AM),
    ],
)
def test_effective_time_is_timezone_aware(element: str, value: Any, expected: datetime) -> None:
    obs = observation("2703-7", 80, "mm[Hg]")
    del obs["effectiveDateTime"]
    obs[element] = value
    intake = read_bundle(bundle(obs))
    assert only(intake).time == expected
    assert intake.issues == []


def test_date_without_time_is_the_day_with_a_warning() -> None:
    intake = read_bundle(
        bundle(observation("2703-7", 80, "mm[Hg]", effectiveDateTime="2026-01-05"))
    )
    assert only(intake).time == datetime(2026, 1, 5, tzinfo=UTC)
    [issue] = issues(intake, "time-imprecise")
    assert issue.severity is Severity.WARNING
    assert issue.expression == "Bundle.entry[0].resource.effectiveDateTime"


def test_issued_is_the_fallback_time_and_said() -> None:
    obs = observation("2703-7", 80, "mm[Hg]", issued="2026-01-05T10:20:00+01:00")
    del obs["effectiveDateTime"]
    intake = read_bundle(bundle(obs))
    assert only(intake).time == TEN_AM + timedelta(minutes=20)
    assert issues(intake, "time-from-issued")[0].expression == "Bundle.entry[0].resource.issued"


def test_no_time_at_all_is_none() -> None:
    obs = observation("2703-7", 80, "mm[Hg]")
    del obs["effectiveDateTime"]
    assert only(read_bundle(bundle(obs))).time is None


# --- Patient, subject, Location, other resources ---------------------------------------------


def test_patient_birth_date_and_gender_only() -> None:
    pt = patient(gender="female", name=[{"family": "Invented", "given": ["Oxy"]}])
    pt["identifier"] = [{"system": "https://example.org/mrn", "value": "TEST-0001"}]
    intake = read_bundle(bundle(pt, observation("2703-7", 80, "mm[Hg]")))
    assert intake.patient is not None
    assert (intake.patient.reference, intake.patient.birth_date, intake.patient.gender) == (
        "Patient/pt-1",
        date(1961, 4, 12),
        "female",
    )
    text = repr(intake)
    assert "Invented" not in text and "TEST-0001" not in text


def test_patient_reference_comes_from_subject_when_no_patient_resource() -> None:
    intake = read_bundle(bundle(observation("2703-7", 80, "mm[Hg]")))
    assert intake.patient is not None
    assert (intake.patient.reference, intake.patient.birth_date) == ("Patient/pt-1", None)


def test_year_only_birth_date_is_read_with_a_warning() -> None:
    intake = read_bundle(fixture("spo2-us-core-oxygen.bundle.json"))
    assert intake.patient is not None and intake.patient.birth_date == date(1949, 1, 1)
    assert issues(intake, "time-imprecise")[0].expression == "Bundle.entry[4].resource.birthDate"


def test_location_altitude_is_a_measurement() -> None:
    intake = read_bundle(fixture("abg-room-air-kpa.bundle.json"))
    [alt] = [m for m in intake.measurements if m.quantity is Quantity.ALTITUDE]
    assert alt.value == 520
    assert alt.source.reference == "Location/abg-kpa-ward"
    assert alt.source.expression == "Bundle.entry[1].resource.position.altitude"


def test_other_resources_are_ignored_by_type() -> None:
    encounter = tagged({"resourceType": "Encounter", "id": "e1", "status": "secret-detail"})
    intake = read_bundle(bundle(encounter))
    [issue] = intake.issues
    assert (issue.code, issue.severity) == ("resource-ignored", Severity.INFORMATION)
    assert issue.message == "Encounter resources are not read"
    assert issue.expression == "Bundle.entry[0].resource"


def test_source_reference_falls_back_to_full_url() -> None:
    obs = observation("2703-7", 80, "mm[Hg]")
    del obs["id"]
    data = bundle(obs)
    data["entry"][0]["fullUrl"] = "urn:uuid:0b7c1d4e-0000-4000-8000-000000000001"
    m = only(read_bundle(data))
    assert m.source.reference == "urn:uuid:0b7c1d4e-0000-4000-8000-000000000001"
    assert m.source.expression == "Bundle.entry[0].resource"


@pytest.mark.parametrize(
    "kind", ["collection", "searchset", "transaction", "batch", "document", "message"]
)
def test_every_bundle_type_is_accepted(kind: str) -> None:
    assert only(read_bundle(bundle(observation("2703-7", 80, "mm[Hg]"), kind=kind)))


def test_empty_bundle_reads_as_nothing() -> None:
    assert read_bundle({"resourceType": "Bundle", "type": "collection"}) == Intake(patient=None)
    assert read_bundle({"resourceType": "Bundle", "type": "collection", "entry": []}) == Intake(
        patient=None
    )


def test_request_only_entry_is_not_an_error() -> None:
    data = {
        "resourceType": "Bundle",
        "type": "transaction",
        "entry": [{"request": {"method": "DELETE", "url": "Observation/old-1"}}],
    }
    [issue] = read_bundle(data).issues
    assert (issue.code, issue.expression) == ("resource-ignored", "Bundle.entry[0]")


def test_a_thousand_observations() -> None:
    many = [observation("2703-7", 60 + i % 40, "mm[Hg]", oid=f"o{i}") for i in range(1000)]
    started = time.perf_counter()
    intake = read_bundle(bundle(*many))
    elapsed = time.perf_counter() - started
    assert len(intake.measurements) == 1000
    assert intake.measurements[999].source.expression == "Bundle.entry[999].resource"
    assert elapsed < 2.0  # a generous ceiling: ~40 µs per Observation is expected


def test_reading_a_bundle_does_not_import_fhir_resources() -> None:
    # fhir.resources stays out of the per-request path (README, Performance: 51–95× a parse).
    script = (
        "import sys, json, pathlib\n"
        "from service.fhir.extract import read_bundle\n"
        "p = pathlib.Path('fixtures/intake/abg-room-air-kpa.bundle.json')\n"
        "read_bundle(json.loads(p.read_text()))\n"
        "assert not [m for m in sys.modules if m.startswith('fhir.resources')], 'imported'\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, check=False, cwd=ROOT
    )
    assert done.returncode == 0, done.stderr


def test_an_observation_not_read_is_not_checked_either() -> None:
    # Narrow reading: a bad time on an Observation the service ignores does not refuse the Bundle.
    other = observation("8867-4", 80, "/min", effectiveDateTime="last tuesday")
    intake = read_bundle(bundle(other))
    assert [i.code for i in intake.issues] == ["observation-ignored"]
