"""ORU^R01 -> Intake, checked against the HL7 V2-to-FHIR mapping rules.

Each mapping assertion names the rule of IG ``hl7.fhir.uv.v2mappings`` 1.0.0 it follows, marked
"V2F: OBX-14 -> effectiveDateTime" and so on; LOINC and UCUM facts name their source.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta, timezone

import pytest

from service.hl7v2.errors import ErrorCode, MessageInError
from service.hl7v2.intake import read_oru
from service.hl7v2.message import parse_message
from service.intake.model import Intake, Measurement, Quantity, Severity, Specimen
from service.terminology.local_codes import LocalCodeMap

from .builders import KPA, PERCENT, WHEN, gas, message, msh, obr, obx, pid, spm

CET = timezone(timedelta(hours=1))
AT = datetime(2026, 1, 5, 10, 0, tzinfo=CET)


def read(text: str, concept_map: LocalCodeMap | None = None) -> Intake:
    return read_oru(parse_message(text), concept_map=concept_map)


def refused(text: str) -> list[tuple[str, ErrorCode]]:
    with pytest.raises(MessageInError) as caught:
        read(text)
    return [(str(e.location), e.code) for e in caught.value.errors]


def only(intake: Intake, quantity: Quantity) -> Measurement:
    found = [m for m in intake.measurements if m.quantity is quantity]
    assert len(found) == 1, found
    return found[0]


def issues(intake: Intake, code: str) -> list[tuple[str, Severity]]:
    return [(i.expression, i.severity) for i in intake.issues if i.code == code]


# --- Values, units, codes ---------------------------------------------------------------------


def test_mmhg_feed_reads_loinc_codes_into_canonical_measurements() -> None:
    intake = read(gas())
    pao2 = only(intake, Quantity.ARTERIAL_PO2)
    # V2F: OBX-3 -> Observation.code, CWE.3 "LN" -> http://loinc.org (table 0396);
    # LOINC 2703-7: Oxygen [Partial pressure] in Arterial blood (HL7 MCC eCare Plan IG example).
    assert pao2.value == 62.0
    assert pao2.specimen is Specimen.ARTERIAL
    # V2F: OBX-5 (OBX-2 NM) -> valueQuantity.value; OBX-6 -> valueQuantity.code (UCUM).
    assert pao2.sent_unit is None  # already canonical, nothing converted
    # V2F: OBX-14 -> effectiveDateTime.
    assert pao2.time == AT
    assert pao2.source.expression == "OBX[1]"
    assert only(intake, Quantity.ARTERIAL_PCO2).value == 65.0
    assert only(intake, Quantity.FIO2).value == pytest.approx(0.21)  # 21 % as a fraction
    assert intake.issues == []


def test_kpa_feed_is_converted_with_the_ucum_factor_and_reported() -> None:
    intake = read(message(obr(), obx(1, "2703-7", "8.0", KPA), obx(2, "2019-8", "5.3", KPA)))
    pao2 = only(intake, Quantity.ARTERIAL_PO2)
    # UCUM: m[Hg] = 133.3220 kPa, so 1 kPa = 7.500638 mm[Hg].
    assert pao2.value == pytest.approx(8.0 * 7.500638, abs=1e-4)
    assert (pao2.sent_value, pao2.sent_unit) == (8.0, "kPa")
    assert issues(intake, "unit-converted") == [
        ("OBX[1]-6", Severity.INFORMATION),
        ("OBX[2]-6", Severity.INFORMATION),
    ]


def test_unit_from_the_alternate_ucum_triplet_of_obx_6() -> None:
    # V2F: OBX-6 is a CWE; the UCUM coding may be the alternate (components 4-6).
    intake = read(message(obr(), obx(1, "2703-7", "8", "KPA^kilopascal^L^kPa^^UCUM")))
    assert only(intake, Quantity.ARTERIAL_PO2).sent_unit == "kPa"


def test_obr_7_is_the_time_when_obx_14_is_empty() -> None:
    # V2F: OBX-14 -> effectiveDateTime, else OBR-7 (the observation date/time of the order group).
    intake = read(message(obr(when="20260105093000+0100"), obx(1, "2703-7", "62", when="")))
    assert only(intake, Quantity.ARTERIAL_PO2).time == datetime(2026, 1, 5, 9, 30, tzinfo=CET)


def test_times_without_an_offset_take_msh_7s_offset() -> None:
    text = message(obr(when="202601050930"), obx(1, "2703-7", "62", when=""))
    assert only(read(text), Quantity.ARTERIAL_PO2).time == datetime(2026, 1, 5, 9, 30, tzinfo=CET)


def test_times_without_any_offset_are_read_as_utc_and_said_so() -> None:
    text = message(
        obr(when="202601050930"), obx(1, "2703-7", "62", when=""), header=msh(time="202601051015")
    )
    intake = read(text)
    assert only(intake, Quantity.ARTERIAL_PO2).time == datetime(2026, 1, 5, 9, 30, tzinfo=UTC)
    assert issues(intake, "time-zone-assumed") == [("MSH[1]-7", Severity.WARNING)]


def test_a_time_without_minutes_is_flagged_imprecise() -> None:
    intake = read(message(obr(), obx(1, "2703-7", "62", when="2026010510+0100")))
    assert issues(intake, "time-imprecise") == [("OBX[1]-14", Severity.WARNING)]


def test_patient_birth_date_and_sex_from_pid_7_and_pid_8() -> None:
    intake = read(gas())
    assert intake.patient is not None
    # V2F: PID-7 -> Patient.birthDate; PID-8 -> Patient.gender (F -> female).
    assert intake.patient.birth_date == date(1961, 4, 12)
    assert intake.patient.gender == "female"
    # The patient is named in the FHIR result by PID-3 (V2F: PID-3 -> Patient.identifier),
    # through a key of our own: the identifier is in the result's reference only.
    assert intake.patient.reference == "Patient/pid-1"
    assert intake.addresses["Patient/pid-1"]["identifier"] == {
        "value": "TEST-0001",
        "assigner": {"display": "INVENTED"},
    }
    assert "TEST-0001" not in repr(intake.patient)


@pytest.mark.parametrize(
    ("sex", "gender"),
    # V2F: table 0001 -> AdministrativeGender: F female, M male, O/A/N other, U unknown.
    [("F", "female"), ("M", "male"), ("O", "other"), ("A", "other"), ("N", "other"),
     ("U", "unknown")],
)  # fmt: skip
def test_administrative_sex_maps_as_the_v2_to_fhir_concept_map(sex: str, gender: str) -> None:
    intake = read(message(obr(), obx(1, "2703-7", "62"), patient=pid(sex=sex)))
    assert intake.patient is not None and intake.patient.gender == gender


def test_an_unknown_sex_code_is_not_used_and_said_so() -> None:
    intake = read(message(obr(), obx(1, "2703-7", "62"), patient=pid(sex="Q")))
    assert intake.patient is not None and intake.patient.gender is None
    assert issues(intake, "field-ignored") == [("PID[1]-8", Severity.INFORMATION)]


def test_a_birth_year_only_is_read_and_flagged() -> None:
    intake = read(message(obr(), obx(1, "2703-7", "62"), patient=pid(born="1961")))
    assert intake.patient is not None and intake.patient.birth_date == date(1961, 1, 1)
    assert issues(intake, "time-imprecise") == [("PID[1]-7", Severity.WARNING)]


def test_a_message_without_pid_has_no_patient() -> None:
    assert read(message(obr(), obx(1, "2703-7", "62"), patient="")).patient is None


# --- SpO2 and SaO2 ----------------------------------------------------------------------------


def test_spo2_and_sao2_both_arrive_as_two_quantities() -> None:
    text = message(obr(), obx(1, "2708-6", "91", PERCENT), obx(2, "59408-5", "93", PERCENT))
    intake = read(text)
    # US Core Pulse Oximetry: 2708-6 alone is SaO2 (co-oximetry), 59408-5 is SpO2.
    assert only(intake, Quantity.ARTERIAL_SO2).value == pytest.approx(0.91)
    assert only(intake, Quantity.SPO2).value == pytest.approx(0.93)


def test_2708_6_with_a_pulse_oximetry_alternate_code_is_spo2() -> None:
    # V2F: CWE components 4-6 are a second coding of the same Observation.code;
    # US Core Pulse Oximetry profile: 2708-6 beside 59408-5 does not mean SaO2.
    text = message(obr(), obx(1, "2708-6^O2 sat^LN^59408-5^SpO2^LN", "93", PERCENT, system=""))
    assert only(read(text), Quantity.SPO2).value == pytest.approx(0.93)


# --- Specimens --------------------------------------------------------------------------------


def test_capillary_and_venous_samples_are_read_as_such() -> None:
    text = message(
        obr(1),
        obx(1, "2704-5", "55"),  # capillary PO2 (LOINC system BldC, from memory)
        obr(2),
        obx(2, "11556-8", "40"),  # PO2 in Blood: specimen from SPM-4
        spm("BLDV"),
    )
    intake = read(text)
    capillary = only(intake, Quantity.CAPILLARY_PO2)
    assert capillary.specimen is Specimen.CAPILLARY
    # V2F: SPM-4 -> Specimen.type referenced by Observation.specimen; table 0487 BLDV.
    venous = only(intake, Quantity.VENOUS_PO2)
    assert venous.specimen is Specimen.VENOUS
    assert intake.issues == []


def test_obr_15_gives_the_specimen_of_older_messages() -> None:
    # V2-to-FHIR: SPM-4, in older messages OBR-15; table 0070 BLDC is capillary blood (from memory).
    text = message(obr(specimen="BLDC&Capillary blood&HL70070"), obx(1, "11556-8", "50"))
    assert only(read(text), Quantity.CAPILLARY_PO2).specimen is Specimen.CAPILLARY


def test_a_bld_code_without_a_specimen_is_never_taken_as_arterial() -> None:
    intake = read(message(obr(), obx(1, "11556-8", "62")))
    pao2 = only(intake, Quantity.ARTERIAL_PO2)
    assert pao2.specimen is Specimen.UNKNOWN
    assert issues(intake, "specimen-unknown") == [("OBR[1]-15.1", Severity.WARNING)]


def test_an_arterial_code_on_a_venous_specimen_is_not_taken_as_arterial() -> None:
    intake = read(message(obr(), obx(1, "2703-7", "40"), spm("BLDV")))
    assert only(intake, Quantity.ARTERIAL_PO2).specimen is Specimen.VENOUS
    assert issues(intake, "specimen-conflict") == [("OBX[1]-3", Severity.WARNING)]


# --- Result status and corrections ------------------------------------------------------------


@pytest.mark.parametrize("status", ["X", "D", "W", "I", "R", "S", "N", "O", "U", "B", "V"])
def test_statuses_other_than_f_c_a_p_are_ignored_and_reported(status: str) -> None:
    # V2F: OBX-11 -> status (D/W entered-in-error, X cancelled; others have no FHIR row).
    intake = read(message(obr(), obx(1, "2703-7", "62", status=status)))
    assert intake.measurements == []
    assert issues(intake, "observation-ignored") == [("OBX[1]-11", Severity.INFORMATION)]


@pytest.mark.parametrize("status", ["F", "C", "A", "P"])
def test_final_corrected_amended_and_preliminary_results_are_used(status: str) -> None:
    # V2F: F->final, C->corrected, A->amended, P->preliminary.
    assert only(read(message(obr(), obx(1, "2703-7", "62", status=status))), Quantity.ARTERIAL_PO2)


def test_a_corrected_result_replaces_the_preliminary_one() -> None:
    text = message(obr(), obx(1, "2703-7", "52", status="P"), obx(2, "2703-7", "62", status="C"))
    intake = read(text)
    assert only(intake, Quantity.ARTERIAL_PO2).value == 62.0
    assert issues(intake, "observation-ignored") == [("OBX[1]-11", Severity.INFORMATION)]


def test_a_final_result_replaces_the_preliminary_one_even_in_another_order_group() -> None:
    text = message(
        obr(1), obx(1, "2703-7", "52", status="P"), obr(2), obx(2, "2703-7", "62", status="F")
    )
    assert only(read(text), Quantity.ARTERIAL_PO2).value == 62.0


def test_a_preliminary_result_after_the_final_one_is_not_used() -> None:
    text = message(obr(), obx(1, "2703-7", "62", status="F"), obx(2, "2703-7", "52", status="P"))
    intake = read(text)
    assert only(intake, Quantity.ARTERIAL_PO2).value == 62.0
    assert issues(intake, "observation-ignored") == [("OBX[2]-11", Severity.INFORMATION)]


def test_two_differing_final_results_for_the_same_time_are_refused() -> None:
    text = message(obr(), obx(1, "2703-7", "62"), obx(2, "2703-7", "52"))
    assert refused(text) == [("OBX[2]-11", ErrorCode.DUPLICATE_KEY)]


def test_a_repeated_identical_final_result_is_used_once() -> None:
    intake = read(message(obr(), obx(1, "2703-7", "62"), obx(2, "2703-7", "62")))
    assert only(intake, Quantity.ARTERIAL_PO2).value == 62.0


def test_results_at_different_times_are_serial_gases_not_corrections() -> None:
    text = message(
        obr(1, "20260105090000+0100"),
        obx(1, "2703-7", "55", when=""),
        obx(2, "2019-8", "50", when=""),
        obr(2, WHEN),
        obx(3, "2703-7", "62", when=""),
        obx(4, "2019-8", "48", when=""),
    )
    intake = read(text)
    assert [m.value for m in intake.measurements if m.quantity is Quantity.ARTERIAL_PO2] == [
        55.0,
        62.0,
    ]


def test_an_unknown_status_refuses_the_message() -> None:
    assert refused(message(obr(), obx(1, "2703-7", "62", status="Z"))) == [
        ("OBX[1]-11", ErrorCode.TABLE_VALUE_NOT_FOUND)
    ]


def test_a_missing_status_refuses_the_message() -> None:
    assert refused(message(obr(), obx(1, "2703-7", "62", status=""))) == [
        ("OBX[1]-11", ErrorCode.REQUIRED_FIELD_MISSING)
    ]


# --- Structured numeric (SN) ------------------------------------------------------------------


@pytest.mark.parametrize("value", ["^62", "=^62", "^62.0"])
def test_an_sn_with_one_number_is_that_number(value: str) -> None:
    # V2F: OBX-2 SN with no comparator and no separator -> valueQuantity.value.
    intake = read(message(obr(), obx(1, "2703-7", value, value_type="SN")))
    assert only(intake, Quantity.ARTERIAL_PO2).value == 62.0


@pytest.mark.parametrize("value", ["<^5", ">^600", "<=^5", ">=^600", "<>^5"])
def test_an_sn_with_a_comparator_is_refused_never_misread(value: str) -> None:
    # V2F: SN with a comparator -> valueQuantity.comparator: a bound, not a measured value.
    intake = read(message(obr(), obx(1, "2703-7", value, value_type="SN")))
    assert intake.measurements == []
    found = [i for i in intake.issues if i.code == "observation-ignored"]
    assert [(i.expression, i.severity) for i in found] == [("OBX[1]-5.1", Severity.WARNING)]
    assert "bound" in found[0].message


@pytest.mark.parametrize("value", ["^5^-^10", "^1^:^2", "^1^/^2"])
def test_an_sn_range_or_ratio_is_refused(value: str) -> None:
    # V2F: SN with a separator -> valueRange / valueRatio, not one value.
    intake = read(message(obr(), obx(1, "2703-7", value, value_type="SN")))
    assert intake.measurements == []
    assert issues(intake, "observation-ignored") == [("OBX[1]-5.3", Severity.WARNING)]


def test_an_sn_without_a_number_refuses_the_message() -> None:
    assert refused(message(obr(), obx(1, "2703-7", "<^high", value_type="SN"))) == [
        ("OBX[1]-5.2", ErrorCode.DATA_TYPE)
    ]


# --- Refusals and ignored observations --------------------------------------------------------


@pytest.mark.parametrize("value", ["62,5", "abc", "6.2e1", "1^2"])
def test_an_nm_that_is_not_a_number_refuses_the_message(value: str) -> None:
    assert refused(message(obr(), obx(1, "2703-7", value))) == [("OBX[1]-5", ErrorCode.DATA_TYPE)]


def test_a_text_value_for_a_numeric_quantity_is_ignored_with_a_reason() -> None:
    # V2F: ST -> valueString, which the service does not read as a number.
    intake = read(message(obr(), obx(1, "2703-7", "62", value_type="ST")))
    assert intake.measurements == []
    assert issues(intake, "observation-ignored") == [("OBX[1]-5", Severity.WARNING)]


def test_a_unit_the_quantity_cannot_take_refuses_the_message() -> None:
    assert refused(message(obr(), obx(1, "2703-7", "62", "g/dL^^UCUM"))) == [
        ("OBX[1]-6", ErrorCode.TABLE_VALUE_NOT_FOUND)
    ]


def test_a_missing_unit_refuses_the_message_except_for_ph() -> None:
    assert refused(message(obr(), obx(1, "2703-7", "62", ""))) == [
        ("OBX[1]-6", ErrorCode.REQUIRED_FIELD_MISSING)
    ]
    assert only(read(message(obr(), obx(1, "2744-1", "7.40", ""))), Quantity.ARTERIAL_PH)


def test_an_impossible_value_is_not_used_and_reported() -> None:
    intake = read(message(obr(), obx(1, "2703-7", "-5")))
    assert intake.measurements == []
    assert issues(intake, "value-out-of-range") == [("OBX[1]-5", Severity.ERROR)]


def test_an_fio2_fraction_sent_as_percent_is_reinterpreted_with_a_warning() -> None:
    # Common practice: an FiO2 of 1.0 or less sent with % is a fraction.
    intake = read(message(obr(), obx(1, "3150-0", "0.4", PERCENT)))
    assert only(intake, Quantity.FIO2).value == pytest.approx(0.4)
    assert issues(intake, "unit-converted") == [("OBX[1]-6", Severity.WARNING)]


def test_unknown_codes_and_codes_without_a_coding_system_are_ignored_never_quoted() -> None:
    intake = read(
        message(obr(), obx(1, "2345-7", "5.5", "mmol/L^^UCUM"), obx(2, "2703-7", "62", system=""))
    )
    assert intake.measurements == []
    found = [i for i in intake.issues if i.code == "observation-ignored"]
    assert [i.expression for i in found] == ["OBX[1]-3", "OBX[2]-3"]
    # Errors name the field and the rule broken, never what was sent (SECURITY.md).
    assert "2345-7" not in found[0].message and "1 code sent" in found[0].message
    assert "2703-7" not in found[1].message


def test_local_codes_go_through_the_same_concept_map_as_fhir() -> None:
    # README, What it reads: local codes are mapped to LOINC by the site's ConceptMap; for v2 the
    # ConceptMap's group.source is the coding system as sent in OBX-3.3.
    concept_map = LocalCodeMap({("99LAB", "PO2-A"): "2703-7"})
    intake = read(message(obr(), obx(1, "PO2-A", "62", system="99LAB")), concept_map)
    assert only(intake, Quantity.ARTERIAL_PO2).value == 62.0


def test_project_input_codes_and_device_codes_are_read() -> None:
    text = message(
        obr(service="CTX^Context^99INVENTED"),
        obx(1, "altitude", "2500", "m^^UCUM", system="99OXYIN"),
        obx(2, "107117-4", "nasal-cannula^^99OXYDEV", "", value_type="CWE"),
        obx(3, "107117-4", "336623009^Nasal cannula^SCT", "", value_type="CWE", sub_id="2",
            when="20260105090000+0100"),
    )  # fmt: skip
    intake = read(text)
    assert only(intake, Quantity.ALTITUDE).value == 2500.0
    devices = [m.value for m in intake.measurements if m.quantity is Quantity.OXYGEN_DEVICE]
    assert devices == ["nasal-cannula", "nasal-cannula"]


def test_an_empty_value_is_reported_not_read() -> None:
    for empty in ("", '""'):
        intake = read(message(obr(), obx(1, "2703-7", empty)))
        assert intake.measurements == []
        assert issues(intake, "observation-ignored") == [("OBX[1]-5", Severity.INFORMATION)]


# --- Structure --------------------------------------------------------------------------------


def test_an_obx_before_any_obr_refuses_the_message() -> None:
    assert refused(message(obx(1, "2703-7", "62"), obr())) == [
        ("OBX[1]", ErrorCode.SEGMENT_SEQUENCE),
    ]


def test_a_message_without_obr_is_refused() -> None:
    assert refused(message()) == [("OBR[1]", ErrorCode.SEGMENT_SEQUENCE)]


def test_two_patients_in_one_message_are_refused() -> None:
    text = message(obr(), obx(1, "2703-7", "62"), pid("TEST-0002"))
    assert refused(text) == [("PID[2]-3", ErrorCode.SEGMENT_SEQUENCE)]


def test_every_problem_is_reported_at_once() -> None:
    text = message(obr(), obx(1, "2703-7", "x"), obx(2, "2019-8", "65", "bar^^UCUM"))
    assert refused(text) == [
        ("OBX[1]-5", ErrorCode.DATA_TYPE),
        ("OBX[2]-6", ErrorCode.TABLE_VALUE_NOT_FOUND),
    ]


def test_other_segments_are_passed_over() -> None:
    text = message(
        "PV1|1|I|INVENTED-WARD", "ORC|RE|ORD-0001", obr(), "NTE|1|L|an invented note",
        obx(1, "2703-7", "62"), "NTE|1|L|another", "ZXX|anything",
    )  # fmt: skip
    assert only(read(text), Quantity.ARTERIAL_PO2).value == 62.0
