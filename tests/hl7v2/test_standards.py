"""HL7 v2 replies as the standard (and an independent strict parser, hl7apy) want them.

Sources: HL7 v2.5.1 chapter 2 (2.9 acknowledgment modes: original and enhanced, MSH-15 and
MSH-16 with table 0155 AL/NE/ER/SU, commit codes CA/CE/CR in table 0008; MSA-2 required;
ERR from v2.5, ERR-1 before it; MSH-18 character set, table 0211 "8859/1"), HL7 v2.3 MSH-9
(two components), HL7 v2.7 (MSA-3 withdrawn: the text goes to ERR), OBX-7 reference range
forms ("lower-upper", ">lower", "<upper").
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from service.hl7v2.handle import handle_v2
from service.runtime import Runtime
from tests.conformance.validators import hl7_strict_errors

from .builders import PERCENT, fixture, gas, message, msh, obr, obx

NOW = datetime(2026, 1, 5, 10, 30, tzinfo=UTC)


def _segments(text: str) -> dict[str, list[list[str]]]:
    found: dict[str, list[list[str]]] = {}
    for line in text.split("\r"):
        if line:
            fields = line.split("|")
            found.setdefault(fields[0], []).append(fields)
    return found


@pytest.mark.parametrize(
    "version", ["2.3", "2.3.1", "2.4", "2.5", "2.5.1", "2.6", "2.7", "2.7.1", "2.8"]
)
@pytest.mark.parametrize("reply", ["ack", "result"])
def test_every_reply_is_strictly_valid_for_its_declared_version(
    runtime: Runtime, version: str, reply: str
) -> None:
    text = fixture("post-operative-drowsiness.hl7").replace("|2.5.1", f"|{version}", 1)
    answer = handle_v2(text, runtime, reply=reply, now=NOW)  # type: ignore[arg-type]
    body = answer.body.decode()
    assert _segments(body)["MSH"][0][11] == version
    assert hl7_strict_errors(body) == []


@pytest.mark.parametrize("version", ["2.3", "2.4", "2.5.1", "2.8"])
def test_a_refusal_is_strictly_valid_for_its_version(runtime: Runtime, version: str) -> None:
    text = gas().replace("|2.5.1", f"|{version}", 1).replace("||62|", "||low|", 1)
    answer = handle_v2(text, runtime, now=NOW)
    assert answer.ack_code == "AE"
    body = answer.body.decode()
    assert hl7_strict_errors(body) == []
    # A refusal never says "Message accepted" (ERR code 0), whatever the version.
    assert "Message accepted" not in body


def test_a_v23_ack_has_a_two_component_message_type(runtime: Runtime) -> None:
    answer = handle_v2(gas().replace("|2.5.1", "|2.3", 1), runtime, now=NOW)
    assert _segments(answer.body.decode())["MSH"][0][8] == "ACK^R01"


def test_msa2_is_an_explicit_null_when_msh10_is_missing(runtime: Runtime) -> None:
    answer = handle_v2(message(obr(), header=msh(control="")), runtime, now=NOW)
    assert answer.ack_code == "AR"
    assert _segments(answer.body.decode())["MSA"][0][2] == '""'


def test_the_sender_is_answered_with_every_part_of_its_names(runtime: Runtime) -> None:
    text = gas().replace("INVENTED-LAB|", "LAB&1.2.3.4&ISO^LAB-B|", 1)
    answer = handle_v2(text, runtime, now=NOW)
    assert _segments(answer.body.decode())["MSH"][0][4] == "LAB&1.2.3.4&ISO^LAB-B"


def test_a_latin1_message_is_read_in_latin1(runtime: Runtime) -> None:
    from service.api.answers import answer_v2
    from service.hl7v2.message import DEFAULT_LIMITS

    name = "MÜLLER^RENÉ"  # invented
    text = gas().replace("INVENTED^PATIENT", name, 1)
    header = text.split("\r", 1)[0] + "||||||8859/1"
    raw = (header + "\r" + text.split("\r", 1)[1]).encode("latin-1")
    answer = answer_v2(runtime, raw, "result", None, DEFAULT_LIMITS)
    assert answer.ack_code == "AA"
    body = answer.body.decode("utf-8")
    assert "UNICODE UTF-8" in _segments(body)["MSH"][0][17]
    assert _segments(body)["PID"][0][5] == name  # not mojibake


@pytest.mark.parametrize(
    ("accept", "application", "bad", "expected"),
    [
        ("", "", False, "AA"),  # original mode
        ("AL", "AL", False, "AA"),
        ("AL", "NE", False, "CA"),  # only the commit acknowledgment
        ("AL", "NE", True, "CA"),  # committed; the content error is not acknowledged
        ("NE", "NE", False, None),  # nothing at all
        ("NE", "ER", False, None),
        ("NE", "ER", True, "AE"),
        ("NE", "SU", False, "AA"),
        ("NE", "SU", True, None),
        ("ER", "NE", False, None),
    ],
)
def test_enhanced_mode_acknowledges_as_msh15_and_msh16_ask(
    runtime: Runtime, accept: str, application: str, bad: bool, expected: str | None
) -> None:
    header = msh() + f"|||{accept}|{application}"
    text = gas(pao2="low" if bad else "62").replace(gas().split("\r", 1)[0], header, 1)
    answer = handle_v2(text, runtime, now=NOW)
    if expected is None:
        assert (answer.status, answer.body) == (204, b"")
        return
    body = answer.body.decode()
    assert _segments(body)["MSA"][0][1] == expected
    assert hl7_strict_errors(body) == []


def test_the_aa_gradient_limit_is_a_standard_range_form(runtime: Runtime) -> None:
    answer = handle_v2(fixture("post-operative-drowsiness.hl7"), runtime, reply="result", now=NOW)
    obxs = _segments(answer.body.decode())["OBX"]
    [aa] = [o for o in obxs if o[3].startswith("19991-9")]
    assert aa[7].startswith("<") and not aa[7].startswith("<=")


def test_a_local_unit_code_is_refused_and_an_uncoded_ucum_unit_read_with_a_warning(
    runtime: Runtime,
) -> None:
    local = gas().replace("mm[Hg]^mmHg^UCUM", "mm[Hg]^mmHg^99LOCAL", 1)
    refused = handle_v2(local, runtime, now=NOW)
    assert refused.ack_code == "AE"
    assert any(e[2].startswith("OBX^1^6") for e in _segments(refused.body.decode())["ERR"])
    uncoded = gas().replace("mm[Hg]^mmHg^UCUM", "mm[Hg]", 1)
    read = handle_v2(uncoded, runtime, now=NOW)
    assert read.ack_code == "AA"
    assert "unit-not-ucum" in read.body.decode()


def test_the_fixtures_end_their_segments_with_cr() -> None:
    from .builders import FIXTURES

    for path in FIXTURES.glob("*.hl7"):
        data = path.read_bytes()
        assert b"\n" not in data and data.count(b"\r") >= 3, path.name


def test_obx_builder_units_are_ucum() -> None:
    assert obx(1, "3150-0", "21", PERCENT).split("|")[6].endswith("^UCUM")
