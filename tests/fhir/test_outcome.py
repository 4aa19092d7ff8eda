"""BundleError and the OperationOutcome it becomes (FHIR R4 OperationOutcome)."""

from __future__ import annotations

import pytest

from service.exceptions import ServiceError
from service.fhir.models import validate_resource
from service.fhir.outcome import (
    BundleError,
    ConceptMapError,
    LocatedError,
    Problem,
    error,
    operation_outcome,
)

PROBLEMS = [
    error(
        "value",
        "unit 'mg' cannot be used for arterial_po2",
        "Bundle.entry[3].resource.valueQuantity.code",
    ),
    Problem("warning", "not-supported", "R5-only element", "Bundle.entry[0].resource"),
]


def test_operation_outcome_has_one_issue_per_problem() -> None:
    outcome = operation_outcome(PROBLEMS)
    assert outcome == {
        "resourceType": "OperationOutcome",
        "issue": [
            {
                "severity": "error",
                "code": "value",
                "diagnostics": "unit 'mg' cannot be used for arterial_po2",
                "expression": ["Bundle.entry[3].resource.valueQuantity.code"],
            },
            {
                "severity": "warning",
                "code": "not-supported",
                "diagnostics": "R5-only element",
                "expression": ["Bundle.entry[0].resource"],
            },
        ],
    }


def test_operation_outcome_is_valid_r4b() -> None:
    validate_resource(operation_outcome(PROBLEMS))
    validate_resource(BundleError(PROBLEMS).operation_outcome())


def test_operation_outcome_needs_an_issue() -> None:
    with pytest.raises(ValueError, match="at least one issue"):
        operation_outcome([])


def test_bundle_error_is_a_service_error_with_every_problem() -> None:
    exc = BundleError(PROBLEMS)
    assert isinstance(exc, ServiceError)
    assert isinstance(exc, LocatedError)
    assert exc.problems == tuple(PROBLEMS)
    assert str(exc) == (
        "Bundle.entry[3].resource.valueQuantity.code: unit 'mg' cannot be used for "
        "arterial_po2 (and 1 more)"
    )
    assert repr(exc).startswith("BundleError([Problem(severity='error'")


def test_located_error_needs_a_problem() -> None:
    with pytest.raises(ValueError, match="at least one problem"):
        ConceptMapError([])
