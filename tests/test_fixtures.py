"""Every fixture through the real assess path: its expectation holds and its result is valid.

Cases are ``fixtures/**/NAME.expected.yaml`` beside ``NAME.bundle.json``; run one with
``pytest tests/test_fixtures.py -k NAME``. A failure prints a short table, not a JSON diff.
"""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.assess.presentation import PressureUnit
from service.fhir.extract import read_bundle
from service.fhir.models import validate_resource
from service.runtime import Runtime
from service.workbench.expectations import (
    Case,
    check,
    deciding_rules,
    find_cases,
    mismatch_table,
)
from tests.contract_shape import contract_problems

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures"
CASES = find_cases([FIXTURES])


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _params(case: Case) -> object:
    gap = case.outcome.known_gap
    marks = [pytest.mark.xfail(reason=gap, strict=True)] if gap else []
    return pytest.param(case, id=case.name, marks=marks)


@pytest.mark.parametrize("case", [_params(c) for c in CASES])
def test_fixture_expectation_holds(case: Case, runtime: Runtime) -> None:
    data = orjson.loads(case.bundle_path.read_bytes())
    assessment = runtime.assess_intake(read_bundle(data, concept_map=runtime.concept_map))
    rows = check(case.outcome.expect, assessment)
    if rows:
        rules = ", ".join(deciding_rules(assessment))
        pytest.fail(f"{case.name}\n{mismatch_table(rows)}\ndecided by: {rules}", pytrace=False)


@pytest.mark.parametrize("case", [pytest.param(c, id=c.name) for c in CASES])
def test_fixture_result_is_valid_r4b_and_follows_the_contract(case: Case, runtime: Runtime) -> None:
    data = orjson.loads(case.bundle_path.read_bytes())
    units: tuple[PressureUnit, ...] = ("mm[Hg]", "kPa")
    for unit in units:
        result = runtime.assess_bundle(data, pressure_unit=unit)
        validate_resource(result)
        assert contract_problems(result) == []


def test_there_are_fixtures() -> None:
    assert len(CASES) >= 1
