"""How much of an HL7 v2 message is read: linear parsing, and budgets refused AR, located.

A field with 100,000 components used to take 69 s (reading each component copied the whole
field first: quadratic), and it ran on the server's event loop, freezing it. Reading is now
linear, and a message over a budget (``V2Limits``: segments, parts per field, parts per
message; settings ``OXYRULE_HL7_MAX_*``) is refused before anything is built.
"""

from __future__ import annotations

import time

import hl7  # type: ignore[import-untyped]
import pytest

from service.hl7v2.errors import MessageRejected
from service.hl7v2.handle import handle_v2
from service.hl7v2.message import V2Limits, parse_message
from service.runtime import Runtime

from .builders import PERCENT, fixture, gas, message, obr, obx


def err_of(body: bytes) -> tuple[str, str, str]:
    """(MSA-1, ERR-2, ERR-3.1) of an ACK with one ERR."""
    reply = hl7.parse(body.decode())
    err = reply.segment("ERR")
    return str(reply["MSA.F1"]), str(err[2]), str(err[3][0][0])


def components(n: int) -> str:
    return "62" + "^" * n


def test_reading_every_component_of_a_field_is_linear_in_their_number(runtime: Runtime) -> None:
    # 40,000 components with the budgets lifted: about 0.25 s now; before, reading each
    # component copied the field (about 8 s here, 69 s for 100,000). Generous bound: the
    # machine is shared.
    lifted = V2Limits(max_field_parts=10**6, max_parts=10**6)
    text = gas(obx(4, "2708-6", components(40_000), PERCENT))
    started = time.perf_counter()
    response = handle_v2(text, runtime, limits=lifted)
    assert time.perf_counter() - started < 2.0
    assert err_of(response.body)[:2] == ("AE", "OBX^4^5")  # NM with components: not a number


def test_a_field_over_its_parts_budget_is_refused_ar_naming_segment_and_field(
    runtime: Runtime,
) -> None:
    text = gas(obx(4, "2708-6", components(300), PERCENT))
    response = handle_v2(text, runtime)
    assert response.status == 400
    assert err_of(response.body) == ("AR", "OBX^4^5", "104")
    assert b"OXYRULE_HL7_MAX_FIELD_PARTS" in response.body
    assert handle_v2(text, runtime, limits=V2Limits(max_field_parts=400)).ack_code == "AE"


def test_a_message_over_its_parts_budget_is_refused_where_it_crosses_it(
    runtime: Runtime,
) -> None:
    text = gas(obx(4, "2708-6", components(200), PERCENT))
    response = handle_v2(text, runtime, limits=V2Limits(max_parts=150))
    assert err_of(response.body) == ("AR", "OBX^4^5", "104")
    assert b"OXYRULE_HL7_MAX_PARTS" in response.body


def test_a_message_over_its_segment_budget_is_refused_naming_the_first_segment_beyond(
    runtime: Runtime,
) -> None:
    many = [obx(n, "3150-0", "21", PERCENT) for n in range(1, 12)]
    text = message(obr(), *many)
    response = handle_v2(text, runtime, limits=V2Limits(max_segments=10))
    assert response.status == 400
    assert err_of(response.body) == ("AR", "OBX^1", "100")
    assert b"OXYRULE_HL7_MAX_SEGMENTS" in response.body
    assert handle_v2(text, runtime, limits=V2Limits(max_segments=14)).ack_code == "AA"


def test_the_encoding_characters_of_msh_are_not_counted_as_parts() -> None:
    # MSH-2 is ^~\\& itself: separators that split nothing. MSH-9 has two parts here.
    text = "MSH|^~\\&|LAB|SITE|OXYRULE|SITE|20260105101500||ORU^R01|MSG-1|T|2.5.1"
    assert parse_message(text, V2Limits(max_field_parts=2)).header.trigger == "R01"
    with pytest.raises(MessageRejected):
        parse_message(text, V2Limits(max_field_parts=1))


@pytest.mark.parametrize("name", ["altitude-visitor.hl7", "post-operative-drowsiness.hl7"])
def test_the_default_budgets_take_every_fixture(runtime: Runtime, name: str) -> None:
    assert handle_v2(fixture(name), runtime).ack_code == "AA"
