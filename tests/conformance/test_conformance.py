"""Every fixture and every error-producing input, answered and checked by validators that are
not ours (``tests/conformance/validators.py``): the official FHIR R4 JSON Schema, the FHIR R4
(4.0.1) and R4B models of ``fhir.resources``, a Bundle reference walker following FHIR R4's
resolution rules, ``fhirpathpy`` on every ``issue.expression`` against the input it reports on,
``hl7apy`` strict for every HL7 v2 reply's declared version, and ``ucumvert`` on every unit
said to be UCUM. Each validator runs once per input; the answers are computed once.

``python -m tests.conformance.checks`` prints the same checks as counts.
"""

from __future__ import annotations

from typing import Any

import pytest

from tests.conformance.checks import problems, r4_problems
from tests.conformance.corpus import Output, error_inputs, fixture_inputs, outputs

NAMES = [i.name for i in [*fixture_inputs(), *error_inputs()]]


@pytest.fixture(scope="module")
def every() -> dict[str, Output]:
    return outputs()


@pytest.fixture(scope="module")
def r4(every: dict[str, Output]) -> dict[str, list[str]]:
    return r4_problems(every)


def test_the_corpus_holds_every_kind_of_input() -> None:
    kinds = {name.split("/")[0] for name in NAMES}
    assert {"demo", "cases", "intake", "hl7v2", "ehr"} <= kinds
    assert len([n for n in NAMES if "/" not in n]) >= 40  # error-producing inputs


@pytest.mark.parametrize("name", NAMES)
def test_answers_pass_every_outside_validator(
    name: str, every: dict[str, Output], r4: dict[str, list[str]]
) -> None:
    found = problems(every[name])
    found["r4"] = r4[name]
    failed = {check: listed for check, listed in found.items() if listed}
    assert not failed, "\n".join(f"{c}: {p}" for c, ps in failed.items() for p in ps[:5])


def test_every_fixture_is_answered_with_a_result(every: dict[str, Output]) -> None:
    for item in fixture_inputs():
        answers: list[Any] = every[item.name].fhir
        assert answers and answers[0]["resourceType"] == "Bundle", item.name


def test_the_validators_bite() -> None:
    """Each validator refuses a known-bad example (so a pass above means something)."""
    from tests.conformance import validators as v

    assert v.schema_errors({"resourceType": "Observation", "status": "final"})  # code missing
    assert v.r4b_errors({"resourceType": "Observation", "status": "final", "code": {}, "x": 1})
    assert v.r4_model_errors({"bad": {"resourceType": "Observation", "status": "final"}})["bad"]
    relative = {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [
            {
                "fullUrl": "urn:uuid:0c3f4b5e-0000-4000-8000-000000000001",
                "resource": {"resourceType": "Observation", "subject": {"reference": "Patient/1"}},
            }
        ],
    }
    assert v.unresolved_references(relative)
    assert v.fhirpath_misses({"issue": [{"expression": ["Bundle.type"]}]}, {"entry": []})
    assert v.fhirpath_misses({"issue": [{"expression": ["http.Accept"]}]}, {"entry": []})
    assert v.hl7_strict_errors("MSH|^~\\&|A|B|C|D|20260101||ACK^R01^ACK|1|P|2.5.1\rMSA|AA\r")
    assert v.non_ucum_units({"valueQuantity": {"system": v.UCUM, "code": "mmHg"}})
    assert not v.non_ucum_units({"valueQuantity": {"system": v.UCUM, "code": "mm[Hg]"}})


def test_the_hl7apy_workarounds_are_needed_and_still_check_the_order() -> None:
    """hl7apy 1.3.5 refuses a minimal, standard v2.8 ORU^R01 with two results in an order (its
    group finder files the second OBX under COMMON_ORDER): so v2.8 ORU_R01 is parsed segment
    by segment, strictly, and its segment order matched against hl7apy's own structure table.
    A wrong order is still refused."""
    from hl7apy.consts import VALIDATION_LEVEL
    from hl7apy.parser import parse_message

    from tests.conformance import validators as v

    head = "MSH|^~\\&|A|B|C|D|20260105101500||ORU^R01^ORU_R01|1|T|2.8\rPID|1||X^^^Y^MR||DOE^J\r"
    body = "OBR|1|A|B|C^D^99X\rOBX|1|NM|a^b^99X|1|1|1^1^UCUM|||||F\r"
    standard = head + body + "OBX|2|NM|c^b^99X|1|1|1^1^UCUM|||||F\r"
    with pytest.raises(Exception, match="ORDER_DOCUMENT"):
        parse_message(standard, validation_level=VALIDATION_LEVEL.STRICT, find_groups=True)
    assert v.hl7_strict_errors(standard) == []
    # A PID after the order, with no order after it, fits no ORU_R01 of v2.8.
    msh, pid = head.split("\r")[:2]
    out_of_order = f"{msh}\r{body}{pid}\r"
    assert v.hl7_strict_errors(out_of_order)


def test_the_ehr_shaped_fixtures_are_valid_r4_inputs_of_invented_data() -> None:
    """The inputs as EHRs send them are themselves valid FHIR R4 (so the service is tested on
    what a conformant sender sends) and every resource is tagged as test data (HTEST)."""
    import json

    from tests.conformance import validators as v
    from tests.conformance.corpus import FIXTURES

    paths = sorted((FIXTURES / "ehr").glob("*.bundle.json"))
    kinds = set()
    for path in paths:
        bundle = json.loads(path.read_bytes())
        kinds.add(bundle["type"])
        assert v.schema_errors(bundle) == [], path.name
        for entry in bundle["entry"]:
            if "resource" in entry:
                tags = entry["resource"]["meta"]["tag"]
                assert any(t["code"] == "HTEST" for t in tags), path.name
    assert {"searchset", "transaction", "batch", "document", "message", "collection"} <= kinds
