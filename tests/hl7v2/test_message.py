"""Parsing ER7 text: header checks, the typed facade over python-hl7, input detection."""

from __future__ import annotations

import pytest

from service.hl7v2.errors import ErrorCode, Location, MessageRejected
from service.hl7v2.message import normalise, parse_message, read_header, v2_text

from .builders import message, obr, obx


def test_fields_components_and_escapes_are_read_unescaped() -> None:
    text = message(obr(), "NTE|1|L|a \\T\\ b \\F\\ c^second&sub~rep")
    parsed = parse_message(text)
    nte = parsed.all("NTE")[0]
    # HL7 v2.5.1 chapter 2 escape sequences: \T\ is '&', \F\ is '|'.
    assert nte.value(3) == "a & b | c"
    assert nte.value(3, 2) == "second"
    assert nte.value(3, 2, 2) == "sub"
    assert nte.value(3, 1, 1, rep=2) == "rep"
    assert nte.repetitions(3) == 2
    assert nte.value(9) == "" and nte.value(3, 9) == ""
    assert parsed.header.control_id == "MSG-0001"
    assert (parsed.header.message_code, parsed.header.trigger) == ("ORU", "R01")


def test_other_encoding_characters_are_honoured() -> None:
    text = "MSH#$%*@#APP#FAC#OXYRULE#FAC#20260105101500+0100##ORU$R01#C1#P#2.5.1\rPID#1##X$$$A"
    parsed = parse_message(text)
    assert (parsed.header.message_code, parsed.header.trigger) == ("ORU", "R01")
    assert parsed.all("PID")[0].reencoded() == "PID|1||X^^^A"


def test_lf_and_crlf_line_ends_and_blank_lines_are_accepted() -> None:
    text = message(obr(), obx(1, "2703-7", "62"))
    for variant in (text.replace("\r", "\n"), text.replace("\r", "\r\n"), "\n\n" + text + "\n\n"):
        assert [s.name for s in parse_message(variant)] == ["MSH", "PID", "OBR", "OBX"]
    assert normalise("MSH|x\n\nPID|1\r\n") == "MSH|x\rPID|1"


def test_segments_are_counted_per_name_for_locations() -> None:
    parsed = parse_message(message(obr(1), obx(1, "a", "1"), obr(2), obx(1, "b", "2")))
    assert [str(s.at()) for s in parsed.all("OBX")] == ["OBX[1]", "OBX[2]"]
    assert str(parsed.all("OBR")[1].at(7)) == "OBR[2]-7"


@pytest.mark.parametrize(
    "text",
    ["", "garbage", "{\"resourceType\": \"Bundle\"}", "PID|1", "MSH", "MSH|", "MSH|^~|x",
     "MSH|^^\\&|x", "MSHA^~\\&|x", "FHS|^~\\&|x", "BHS|^~\\&|x"],
)  # fmt: skip
def test_what_is_not_an_hl7_v2_message_is_rejected_with_a_reason(text: str) -> None:
    with pytest.raises(MessageRejected) as caught:
        parse_message(text)
    (error,) = caught.value.errors
    assert error.code is ErrorCode.SEGMENT_SEQUENCE
    assert error.reason


def test_read_header_is_best_effort() -> None:
    header = read_header(message(obr()))
    assert header is not None and header.control_id == "MSG-0001"
    assert read_header("garbage") is None


def test_v2_text_detects_plain_framed_and_bom_prefixed_messages() -> None:
    text = message(obr())
    assert v2_text(text.encode()) == text
    assert v2_text(b"\x0b" + text.encode() + b"\x1c\r") == text
    assert v2_text(b"\xef\xbb\xbf" + text.encode()) == text
    assert v2_text(b'{"resourceType":"Bundle"}') is None
    assert v2_text(b"") is None


def test_v2_text_reads_latin_1_when_msh_18_says_so() -> None:
    text = message(obr()).replace("|2.5.1", "|2.5.1||||||8859/1", 1)
    raw = text.replace("INVENTED^PATIENT", "INVENT\xc9^PATIENT").encode("latin-1")
    assert "INVENT\xc9" in (v2_text(raw) or "")


@pytest.mark.parametrize("text", ["OBX[3]-5.2", "MSH[1]-9", "PID[1]", "SPM[2]-4"])
def test_locations_round_trip(text: str) -> None:
    location = Location.parse(text)
    assert location is not None and str(location) == text
    assert Location.parse("Bundle.entry[0]") is None
    assert Location("OBX", 3, 5, 2).erl() == ("OBX", "3", "5", "1", "2")
