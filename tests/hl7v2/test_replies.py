"""The ACK and the ORU^R01 result, read back with python-hl7 as a receiver would.

ACK layout: standards.md §5.2 (MSH sender/receiver swapped, MSA-1 AA/AE/AR from table 0008,
MSA-2 = MSH-10 of the message acknowledged, ERR-2 location, ERR-3 table 0357 code, ERR-4
severity). Result codes: standards.md §1.8 (A-a 19991-9, P/F 50984-4, a/A 78354-8).
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

import hl7  # type: ignore[import-untyped]

from service.hl7v2.ack import ack
from service.hl7v2.errors import ErrorCode, Location, V2Error
from service.hl7v2.intake import read_oru
from service.hl7v2.message import parse_message
from service.hl7v2.result import oru_result
from service.runtime import Runtime

from .builders import fixture, message, msh, obr

NOW = datetime(2026, 1, 5, 9, 20, tzinfo=UTC)


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
    assert (str(reply["MSA.F1"]), str(reply["MSA.F2"])) == ("AR", "")


def test_the_result_carries_derived_values_grades_findings_and_the_caution(
    runtime: Runtime,
) -> None:
    source = parse_message(fixture("post-operative-drowsiness.hl7"))
    assessment = runtime.assess_intake(read_oru(source), now=NOW)
    reply = parsed(oru_result(source, assessment, now=NOW, control_id="RES-1"))
    assert str(reply.segment("MSH")[9]) == "ORU^R01^ORU_R01"
    assert str(reply["PID.F7"]) == "19920602"  # the original PID, to file the result
    assert str(reply.segment("OBR")[2]) == "ORD-0001^INVENTED-WARD"
    assert str(reply["OBR.F25"]) == "F"
    assert "not a diagnosis" in reply.unescape(str(reply.segment("NTE")[3]))
    by_code = {str(o[3][0][0]): o for o in reply.segments("OBX")}
    # standards.md §1.8: LOINC terms for the derived values that have one, coding system LN.
    for loinc in ("19991-9", "50984-4", "78354-8"):
        assert str(by_code[loinc][3][0][2]) == "LN"
        assert str(by_code[loinc][2]) == "NM"
    aa = by_code["19991-9"]
    # Alveolar gas equation with water vapour at 37 Cel, where the analyser reports the gases
    # (IAPWS-IF97: 47.12 mmHg): 0.21 x (762 - 47.12) - 65 x (0.21 + 0.79/0.8) = 72.29; - 62.
    assert (str(aa[5]), str(aa[6][0][0]), str(aa[8])) == ("10.3", "mm[Hg]", "N")
    assert str(by_code["alveolar-po2"][3][0][2]) == "99OXYDRV"
    assert str(by_code["hypoventilation"][5]) == "likely^Likely^99OXYGRD"
    assert str(by_code["hypoxaemia-mechanism-assessment"][5]) == "single^Single mechanism^99OXYPAT"
    assert all(str(o[11]) == "F" for o in reply.segments("OBX"))


def test_the_result_in_kpa(runtime: Runtime) -> None:
    source = parse_message(fixture("post-operative-drowsiness.hl7"))
    assessment = runtime.assess_intake(read_oru(source), now=NOW)
    reply = parsed(oru_result(source, assessment, pressure_unit="kPa", now=NOW))
    aa = next(o for o in reply.segments("OBX") if str(o[3][0][0]) == "19991-9")
    assert str(aa[6][0][0]) == "kPa"
    assert abs(float(str(aa[5])) - 10.29 * 0.133322) < 0.01
