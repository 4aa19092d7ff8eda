"""handle_v2: one message in, the answer the HTTP layer and the MLLP listener send back.

MSA-1 codes are HL7 table 0008 (HL7 v2.5.1 chapter 2): AA accepted (assessed), AE content
error, AR rejected (type, version, processing id, not a message, our own failure).
"""

from __future__ import annotations

from typing import Any

import hl7  # type: ignore[import-untyped]
import orjson
import pytest

from service.hl7v2.handle import ER7_MEDIA_TYPE, FHIR_MEDIA_TYPE, handle_v2
from service.runtime import Runtime

from .builders import fixture, gas, message, msh, obr, obx


def reply_of(body: bytes) -> Any:
    return hl7.parse(body.decode())


def test_an_assessed_message_is_answered_aa_with_its_control_id(runtime: Runtime) -> None:
    response = handle_v2(fixture("post-operative-drowsiness.hl7"), runtime)
    assert (response.status, response.media_type, response.ack_code) == (200, ER7_MEDIA_TYPE, "AA")
    reply = reply_of(response.body)
    assert (str(reply["MSA.F1"]), str(reply["MSA.F2"])) == ("AA", "DEMO-POSTOP-0001")
    assert "likely hypoventilation" in str(reply["MSA.F3"])


def test_warnings_ride_on_the_aa_as_err_notices(runtime: Runtime) -> None:
    response = handle_v2(gas(obx(4, "2708-6", "<^90", "%^^UCUM", value_type="SN")), runtime)
    reply = reply_of(response.body)
    assert str(reply["MSA.F1"]) == "AA"
    err = reply.segment("ERR")
    assert (str(err[2]), str(err[4]), str(err[5])) == (
        "OBX^4^5^1^1",
        "W",
        "observation-ignored^^99OXYFND",
    )


def test_content_errors_are_answered_ae_with_located_err(runtime: Runtime) -> None:
    response = handle_v2(message(obr(), obx(1, "2703-7", "sixty-two")), runtime)
    assert (response.status, response.ack_code) == (422, "AE")
    reply = reply_of(response.body)
    assert (str(reply["MSA.F1"]), str(reply["MSA.F2"])) == ("AE", "MSG-0001")
    assert str(reply.segment("ERR")[2]) == "OBX^1^5"
    assert str(reply.segment("ERR")[3]) == "102^Data type error^HL70357"


@pytest.mark.parametrize(
    ("header", "code", "where"),
    [
        (msh(kind="ADT^A01^ADT_A01"), "200", "MSH^1^9^1^1"),
        (msh(kind="ORU^R30^ORU_R30"), "201", "MSH^1^9^1^2"),
        (msh(version="2.2"), "203", "MSH^1^12"),
        (msh(processing="X"), "202", "MSH^1^11"),
        (msh(control=""), "101", "MSH^1^10"),
    ],
)
def test_unsupported_type_event_version_or_processing_id_are_rejected_ar(
    runtime: Runtime, header: str, code: str, where: str
) -> None:
    response = handle_v2(message(obr(), obx(1, "2703-7", "62"), header=header), runtime)
    assert (response.status, response.ack_code) == (400, "AR")
    err = reply_of(response.body).segment("ERR")
    assert (str(err[2]), str(err[3][0][0])) == (where, code)


def test_echoing_the_trigger_of_a_rejected_type(runtime: Runtime) -> None:
    response = handle_v2(message(obr(), header=msh(kind="ADT^A01^ADT_A01")), runtime)
    assert str(reply_of(response.body).segment("MSH")[9]) == "ACK^A01^ACK"


@pytest.mark.parametrize("text", ["", "garbage\r", "\x00\xff", '{"resourceType":"Bundle"}'])
def test_garbage_is_rejected_ar_never_raised(runtime: Runtime, text: str) -> None:
    response = handle_v2(text, runtime)
    assert (response.status, response.ack_code) == (400, "AR")
    assert str(reply_of(response.body)["MSA.F1"]) == "AR"


def test_fhir_reply_is_the_result_bundle(runtime: Runtime) -> None:
    response = handle_v2(fixture("post-operative-drowsiness.hl7"), runtime, reply="fhir")
    assert (response.status, response.media_type) == (200, FHIR_MEDIA_TYPE)
    bundle = orjson.loads(response.body)
    assert bundle["resourceType"] == "Bundle"
    assert bundle["entry"][0]["resource"]["resourceType"] == "GuidanceResponse"


def test_fhir_reply_to_a_refused_message_is_an_operation_outcome(runtime: Runtime) -> None:
    response = handle_v2(message(obr(), obx(1, "2703-7", "62", "bar^^UCUM")), runtime, reply="fhir")
    assert (response.status, response.media_type) == (422, FHIR_MEDIA_TYPE)
    outcome = orjson.loads(response.body)
    assert outcome["resourceType"] == "OperationOutcome"
    (issue,) = outcome["issue"]
    # The v2 location is not FHIRPath: issue.location, never issue.expression.
    assert "expression" not in issue
    assert (issue["severity"], issue["code"], issue["location"]) == (
        "error",
        "code-invalid",
        ["OBX[1]-6"],
    )
    assert issue["diagnostics"].startswith("HL7 v2 error 103")


def test_result_reply_is_an_oru_r01(runtime: Runtime) -> None:
    response = handle_v2(fixture("altitude-visitor.hl7"), runtime, reply="result")
    reply = reply_of(response.body)
    assert (response.status, response.ack_code) == (200, "AA")
    assert str(reply.segment("MSH")[9]) == "ORU^R01^ORU_R01"
    assert any(str(o[3][0][0]) == "50984-4" for o in reply.segments("OBX"))


def test_our_own_failure_is_answered_ar_207_and_logged_without_content(
    runtime: Runtime, monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture
) -> None:
    secret = "PaO2 62 of " + "TEST-" + "0001"  # built so no source line shows it whole

    def broken(*args: object, **kwargs: object) -> None:
        raise RuntimeError(secret)  # an exception text that must not reach the log

    monkeypatch.setattr(Runtime, "assess_intake", broken)
    response = handle_v2(gas(), runtime)
    assert (response.status, response.ack_code) == (500, "AR")
    reply = reply_of(response.body)
    assert (str(reply["MSA.F1"]), str(reply["MSA.F2"])) == ("AR", "MSG-0001")
    assert str(reply.segment("ERR")[3][0][0]) == "207"
    assert "RuntimeError" in caplog.text
    assert secret not in caplog.text and "TEST-0001" not in caplog.text
