"""The ACK and the ORU^R01 result, read back with python-hl7 as a receiver would.

ACK layout: HL7 v2.5.1 chapter 2 (MSH sender/receiver swapped, MSA-1 AA/AE/AR from table 0008,
MSA-2 = MSH-10 of the message acknowledged, ERR-2 location, ERR-3 table 0357 code, ERR-4
severity). Result codes: LOINC (A-a 19991-9 from memory; P/F 50984-4 "Horowitz index
in Arterial blood").
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

import hl7  # type: ignore[import-untyped]
import pytest

from service.assess.presentation import PressureUnit
from service.hl7v2.ack import ack
from service.hl7v2.errors import ErrorCode, Location, V2Error
from service.hl7v2.intake import read_oru
from service.hl7v2.message import parse_message
from service.hl7v2.result import oru_result
from service.runtime import Runtime
from tests.deficit_reference import KPA_PER_MMHG, alveolar, reference

from .builders import fixture, gas, message, msh, obr, obx

NOW = datetime(2026, 1, 5, 9, 20, tzinfo=UTC)
# post-operative-drowsiness.hl7: FiO2 0.21, PB 762, PaCO2 65, PaO2 62 mm[Hg]. Its A-a gradient
# by the alveolar gas equation (full form, R 0.8; PH2O at 37 °C, the temperature the analyser
# reports at, IAPWS-IF97): about 10.3 mm[Hg].
POST_OP_AA_MMHG = alveolar(0.21, 762.0, 65.0) - 62.0


def parsed(text: str) -> Any:
    assert text.endswith("\r") and "\n" not in text
    return hl7.parse(text)


def test_ack_swaps_sender_and_receiver_and_echoes_the_control_id() -> None:
    reply = parsed(ack(parse_message(message(obr())), "AA", now=NOW, control_id="ACK-1"))
    assert str(reply["MSH.F3"]) == "OXYRULE" and str(reply["MSH.F5"]) == "INVENTED-LAB"
    assert str(reply["MSH.F4"]) == "INVENTED-SITE" and str(reply["MSH.F6"]) == "INVENTED-SITE"
    assert str(reply.segment("MSH")[9]) == "ACK^R01^ACK"
    assert str(reply["MSH.F10"]) == "ACK-1"
    assert str(reply["MSH.F7"]) == "20260105092000+0000"
    assert (str(reply["MSH.F11"]), str(reply["MSH.F12"])) == ("T", "2.5.1")
    assert (str(reply["MSA.F1"]), str(reply["MSA.F2"])) == ("AA", "MSG-0001")


def test_ae_names_segment_field_and_reason_in_err() -> None:
    error = V2Error(Location("OBX", 3, 5, 2), ErrorCode.DATA_TYPE, "not a number (NM) | x")
    reply = parsed(ack(parse_message(message(obr())), "AE", [error], text="not assessed"))
    err = reply.segment("ERR")
    assert str(reply["MSA.F1"]) == "AE"
    assert str(err[2]) == "OBX^3^5^1^2"  # ERL: segment, sequence, field, repetition, component
    assert str(err[3]) == "102^Data type error^HL70357"
    assert str(err[4]) == "E"
    assert reply.unescape(str(err[8])) == "not a number (NM) | x"  # escaped on the way out
    assert str(reply["MSA.F3"]) == "not assessed"


def test_old_versions_get_err_1_and_new_ones_the_outcome_in_err() -> None:
    error = V2Error(Location("OBX", 1, 6), ErrorCode.TABLE_VALUE_NOT_FOUND, "unit")
    old = parsed(ack(parse_message(message(obr(), header=msh(version="2.3"))), "AE", [error]))
    assert str(old.segment("ERR")[1]) == "OBX^1^6^103&Table value not found&HL70357"
    new = parsed(
        ack(parse_message(message(obr(), header=msh(version="2.8"))), "AA", text="assessed")
    )
    assert str(new["MSA.F3"]) == ""
    info = new.segment("ERR")
    assert (str(info[3]), str(info[4]), str(info[8])) == (
        "0^Message accepted^HL70357",
        "I",
        "assessed",
    )


def test_an_ack_to_an_unreadable_message_still_has_a_header() -> None:
    error = V2Error(None, ErrorCode.SEGMENT_SEQUENCE, "not an HL7 v2 message")
    reply = parsed(ack(None, "AR", [error]))
    assert str(reply["MSH.F3"]) == "OXYRULE" and str(reply["MSH.F12"]) == "2.5.1"
    assert (str(reply["MSA.F1"]), str(reply["MSA.F2"])) == ("AR", '""')  # explicit null


def test_the_result_carries_derived_values_grades_findings_and_the_caution(
    runtime: Runtime,
) -> None:
    source = parse_message(fixture("post-operative-drowsiness.hl7"))
    assessment = runtime.assess_intake(read_oru(source), now=NOW)
    reply = parsed(
        oru_result(source, assessment, settings=runtime.settings, now=NOW, control_id="RES-1")
    )
    assert str(reply.segment("MSH")[9]) == "ORU^R01^ORU_R01"
    assert str(reply["PID.F7"]) == "19920602"  # the original PID, to file the result
    assert str(reply.segment("OBR")[2]) == "ORD-0001^INVENTED-WARD"
    assert str(reply["OBR.F25"]) == "F"
    assert "not a diagnosis" in reply.unescape(str(reply.segment("NTE")[3]))
    by_code = {str(o[3][0][0]): o for o in reply.segments("OBX")}
    # LOINC terms for the derived values that have one, coding system LN (HL7 table 0396).
    for loinc in ("19991-9", "50984-4"):
        assert str(by_code[loinc][3][0][2]) == "LN"
        assert str(by_code[loinc][2]) == "NM"
    # No LOINC term for the a/A ratio could be confirmed: the project's code, never a guess.
    assert str(by_code["a-a-ratio"][3][0][2]) == "99OXYDRV"
    aa = by_code["19991-9"]
    assert (str(aa[5]), str(aa[6][0][0]), str(aa[8])) == (f"{POST_OP_AA_MMHG:.1f}", "mm[Hg]", "N")
    assert str(by_code["alveolar-po2"][3][0][2]) == "99OXYDRV"
    assert str(by_code["hypoventilation"][5]) == "likely^Likely^99OXYGRD"
    assert str(by_code["hypoxaemia-mechanism-assessment"][5]) == "single^Single mechanism^99OXYPAT"
    assert all(str(o[11]) == "F" for o in reply.segments("OBX"))


def test_the_result_in_kpa(runtime: Runtime) -> None:
    source = parse_message(fixture("post-operative-drowsiness.hl7"))
    assessment = runtime.assess_intake(read_oru(source), now=NOW)
    reply = parsed(
        oru_result(source, assessment, settings=runtime.settings, pressure_unit="kPa", now=NOW)
    )
    aa = next(o for o in reply.segments("OBX") if str(o[3][0][0]) == "19991-9")
    assert str(aa[6][0][0]) == "kPa"
    assert abs(float(str(aa[5])) - POST_OP_AA_MMHG * KPA_PER_MMHG) < 0.006


def _method(reply: Any, row: Any) -> str:
    """An OBX's method: OBX-17's text, or the NTEs after it when it is longer than OBX-17's
    text may be (CWE.2 is ST(199))."""
    segments = list(reply)
    at = next(i for i, s in enumerate(segments) if s is row)
    notes = []
    for segment in segments[at + 1 :]:
        if str(segment[0]) != "NTE":
            break
        notes.append(reply.unescape(str(segment[3])))
    own = reply.unescape(str(row[17])) if len(row) > 17 else ""
    return own + " ".join(notes)


def _partition_rows(reply: Any) -> dict[str, Any]:
    return {str(o[3][0][0]): o for o in reply.segments("OBX") if str(o[4]).startswith("3")}


def test_the_result_carries_the_deficit_partition_in_both_units(runtime: Runtime) -> None:
    # tests.deficit_reference: 64 years (born 1961-04-12, gas on 2026-01-05), air, PB 760,
    # PaCO2 55, PaO2 50; every part computed there from Cerveri 1995 and the alveolar gas
    # equation.
    ref = reference()
    source = parse_message(gas(obx(4, "76268-2", "760"), pao2="50", paco2="55"))
    assessment = runtime.assess_intake(read_oru(source), now=NOW)
    expected = {
        "pao2-expected": ref.expected,
        "pao2-fall": ref.fall,
        "deficit-inspired": ref.inspired,
        "deficit-ventilation": ref.ventilation,
        "deficit-gas-exchange": ref.gas_exchange,
    }
    units: tuple[tuple[PressureUnit, float, int], ...] = (
        ("mm[Hg]", 1.0, 1),
        ("kPa", KPA_PER_MMHG, 2),
    )
    for unit, factor, places in units:
        reply = parsed(
            oru_result(source, assessment, settings=runtime.settings, pressure_unit=unit, now=NOW)
        )
        rows = _partition_rows(reply)
        assert set(rows) == set(expected)
        for code, mmhg in expected.items():
            row = rows[code]
            assert str(row[2]) == "NM" and str(row[3][0][2]) == "99OXYDRV"
            assert str(row[4]) == "3" and str(row[6][0][0]) == unit
            assert float(str(row[5])) == pytest.approx(mmhg * factor, abs=0.5 * 10**-places)
            assert "Cerveri 1995" in _method(reply, row)
    status = next(o for o in reply.segments("OBX") if str(o[3][0][0]) == "gas-exchange-status")
    assert str(status[5]) == "defect^Defect^99OXYGXS"
