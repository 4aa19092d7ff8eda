"""Strict mode: the R4B models, imported lazily, plus the required bindings they skip."""

from __future__ import annotations

import subprocess
import sys

import pytest

from service.fhir import codes
from service.fhir.models import InvalidResourceError, validate_resource, validate_strict

from .builders import ROOT, bundle, fixture, fixture_names, observation, patient


@pytest.mark.parametrize("name", fixture_names())
def test_fixture_bundles_are_valid_r4b(name: str) -> None:
    assert validate_strict(fixture(name)) == []


@pytest.mark.parametrize("name", fixture_names())
def test_fixture_resources_are_all_tagged_as_test_data(name: str) -> None:
    data = fixture(name)
    resources = [data] + [e["resource"] for e in data["entry"]]
    for resource in resources:
        assert {"system": codes.TEST_DATA_TAG_SYSTEM, "code": "HTEST"}.items() <= (
            resource["meta"]["tag"][0].items()
        )


def test_strict_mode_catches_an_invalid_status_code() -> None:
    # The R4B models of fhir.resources accept any string for a required-binding code (seen
    # with fhir.resources 8; this test fails if that changes).
    data = bundle(patient(), observation("2703-7", 80, "mm[Hg]", status="bogus"))
    problems = validate_strict(data)
    assert [(p.expression, p.code) for p in problems] == [
        ("Bundle.entry[1].resource.status", "code-invalid")
    ]


def test_strict_mode_catches_a_status_of_the_wrong_type() -> None:
    data = bundle(patient(), observation("2703-7", 80, "mm[Hg]", status=5))
    assert [p.expression for p in validate_strict(data)] == ["Bundle.entry[1].resource.status"]


def test_strict_mode_catches_unknown_elements_and_bad_decimals() -> None:
    data = bundle(observation("2703-7", "eighty", "mm[Hg]", valueColour="blue"))
    found = {(p.expression, p.code) for p in validate_strict(data)}
    assert ("Bundle.entry[0].resource.valueColour", "structure") in found
    assert ("Bundle.entry[0].resource.valueQuantity.value", "value") in found


@pytest.mark.parametrize("data", [None, [], {"resourceType": "Patient"}])
def test_strict_mode_refuses_non_bundles(data: object) -> None:
    assert [p.expression for p in validate_strict(data)] == ["Bundle"]


def test_validate_resource_raises_located_problems() -> None:
    with pytest.raises(InvalidResourceError) as caught:
        validate_resource({"resourceType": "OperationOutcome", "issue": [{"severity": "error"}]})
    assert [p.expression for p in caught.value.problems] == ["OperationOutcome.issue[0].code"]
    with pytest.raises(InvalidResourceError):
        validate_resource({"resourceType": "NotAResource"})
    with pytest.raises(InvalidResourceError):
        validate_resource({})


def test_importing_models_does_not_import_fhir_resources() -> None:
    script = (
        "import sys\n"
        "import service.fhir.models\n"
        "assert not [m for m in sys.modules if m.startswith('fhir.resources')]\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, check=False, cwd=ROOT
    )
    assert done.returncode == 0, done.stderr
