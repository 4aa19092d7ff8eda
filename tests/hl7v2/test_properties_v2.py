"""Property tests over the HL7 v2 intake: mutated ORU^R01 messages always get an answer.

Each example starts from an invented message (the v2 fixtures, or one built here) and applies a
few mutations of the kinds senders get wrong: segments dropped, repeated or swapped, fields
replaced by odd text (separators, escape sequences, control characters, non-ASCII), messages
cut short, other separators declared in MSH, other line ends, and very long fields. Whatever
comes out, ``handle_v2`` must answer it with a well-formed reply (ACK with MSA-1 AA/AE/AR, an
ORU^R01 result or FHIR JSON) and never raise nor fall back to its internal-error answer; the
check is the one the coverage-guided fuzzer applies (``tests/fuzz/hl7v2.py``).
"""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.hl7v2 import framing, handle, message
from service.hl7v2.handle import handle_v2
from service.runtime import Runtime
from tests.fuzz.hl7v2 import REPLIES, check, check_reply

from .builders import KPA, PERCENT, fixture, gas, msh, obr, obx
from .builders import message as build

RUNTIME = Runtime.load()
# python-hl7 calls the deprecated ``Logger.warn`` on an empty escape sequence (``\\``); the
# suite turns warnings into errors, which would turn that call into an internal error that a
# running service (warnings not errors) never sees. The answer is what is tested here.
HL7_WARN = pytest.mark.filterwarnings("ignore:The 'warn' method is deprecated:DeprecationWarning")
STARTS = [
    fixture("altitude-visitor.hl7"),
    fixture("post-operative-drowsiness.hl7"),
    gas(),
    build(obr(), obx(1, "2703-7", "8.3", KPA), obx(2, "3150-0", "40", PERCENT)),
    build(obr(1), obx(1, "2703-7", "55"), obr(2), obx(1, "2703-7", "71")),
]
ODD_TEXT = st.one_of(
    st.sampled_from(
        [
            "",
            "|",
            "^^^",
            "~",
            "\\",
            "\\Zq\\",
            "\\X41\\",
            "\\.br\\",
            "&&",
            "NaN",
            "-0",
            "1e309",
            "99999999999999999999",
            "<^90",
            "mm[Hg]^^UCUM",
            "2026",
            "20261301",
            "\x00",
            "\x0b",
            "\x1c",
            "\ufeff",
            "é",
            "\ud7ff",
        ]
    ),
    st.text(max_size=40),
)


def _segments(text: str) -> list[str]:
    return [s for s in text.replace("\r\n", "\r").replace("\n", "\r").split("\r") if s]


@st.composite
def mutated(draw: st.DrawFn) -> str:
    segments = _segments(draw(st.sampled_from(STARTS)))
    for _ in range(draw(st.integers(0, 4))):
        kind = draw(
            st.sampled_from(
                ["drop", "repeat", "swap", "field", "huge", "truncate", "separators", "header"]
            )
        )
        if not segments:
            break
        i = draw(st.integers(0, len(segments) - 1))
        if kind == "drop":
            del segments[i]
        elif kind == "repeat":
            segments.insert(i, segments[i])
        elif kind == "swap":
            j = draw(st.integers(0, len(segments) - 1))
            segments[i], segments[j] = segments[j], segments[i]
        elif kind in ("field", "huge"):
            fields = segments[i].split("|")
            f = draw(st.integers(1, max(1, len(fields) - 1))) if len(fields) > 1 else 0
            size = draw(st.sampled_from([10_000, 300_000]))
            text = "9" * size if kind == "huge" else draw(ODD_TEXT)
            fields[f if f < len(fields) else -1] = text
            segments[i] = "|".join(fields)
        elif kind == "truncate":
            whole = "\r".join(segments)
            segments = _segments(whole[: draw(st.integers(0, len(whole)))])
        elif kind == "separators":
            declared = draw(st.sampled_from(["#^~\\&", "|^~\\", "|^^\\&", "|abcd", "| ~\\&", "|"]))
            segments[0] = "MSH" + declared + segments[0][8:]
        else:
            header = draw(
                st.sampled_from(
                    [
                        msh(kind="ADT^A01^ADT_A01"),
                        msh(version="2.9.9"),
                        msh(processing="P"),
                        msh(control=""),
                        msh(kind="ORU"),
                        "MSH",
                        "FHS|^~\\&",
                    ]
                )
            )
            segments[0] = header
    ending = draw(st.sampled_from(["\r", "\n", "\r\n"]))
    return ending.join(segments) + draw(st.sampled_from(["", ending]))


@HL7_WARN
@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated(), st.sampled_from(REPLIES))
def test_a_mutated_message_always_gets_a_well_formed_answer(text: str, reply: str) -> None:
    response = handle_v2(text, RUNTIME, reply=reply)  # type: ignore[arg-type]
    check_reply(reply, response)


@HL7_WARN
@settings(max_examples=100, deadline=None)
@given(st.binary(max_size=600))
def test_arbitrary_bytes_are_answered_and_framed_as_the_fuzzer_checks(data: bytes) -> None:
    check(RUNTIME, (handle, message, framing), data)
