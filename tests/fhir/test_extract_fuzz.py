"""Whatever JSON arrives, read_bundle answers with an Intake or a BundleError, nothing else."""

from __future__ import annotations

import copy
from typing import Any

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.fhir.concept_map import read_concept_map
from service.fhir.extract import read_bundle
from service.fhir.outcome import BundleError, NotABundleError
from service.intake.model import Intake

from .builders import fixture, fixture_names

FUZZ = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# Member names the reader looks at, so random objects hit the interesting paths.
KEYS = st.sampled_from(
    [
        "resourceType", "type", "entry", "resource", "fullUrl", "request", "method", "id",
        "status", "code", "coding", "system", "valueQuantity", "value", "unit", "comparator",
        "valueCodeableConcept", "valueString", "component", "effectiveDateTime",
        "effectivePeriod", "start", "end", "effectiveInstant", "issued", "meta", "profile",
        "specimen", "reference", "contained", "subject", "dataAbsentReason", "birthDate",
        "gender", "position", "altitude",
    ]
)  # fmt: skip
SCALARS = (
    st.none()
    | st.booleans()
    | st.integers()
    | st.integers(min_value=-(10**400), max_value=10**400)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=12)
    | st.sampled_from(
        [
            "Bundle", "Observation", "Patient", "Specimen", "Location", "http://loinc.org",
            "2703-7", "11556-8", "3150-0", "107117-4", "59408-5", "2708-6", "final", "%", "1",
            "kPa", "mm[Hg]", "#s", "Specimen/s", "2026-01-05", "2026-01-05T10:00:00Z", "GET",
            "http://unitsofmeasure.org", "http://snomed.info/sct", "122555007", "<",
        ]
    )
)  # fmt: skip
JSON = st.recursive(
    SCALARS,
    lambda children: (
        st.lists(children, max_size=4)
        | st.dictionaries(KEYS | st.text(max_size=6), children, max_size=6)
    ),
    max_leaves=30,
)


def outcome_of(data: object) -> Intake | BundleError:
    try:
        return read_bundle(data, concept_map=LOCAL)
    except BundleError as exc:
        assert exc.problems, "a BundleError always carries its problems"
        # Located in the Bundle; or, for a body that is not one, at the resource sent or nowhere.
        sent_type = data.get("resourceType") if isinstance(data, dict) else None
        assert all(
            p.expression.startswith("Bundle")
            or (isinstance(exc, NotABundleError) and p.expression in ("", sent_type))
            for p in exc.problems
        )
        return exc


LOCAL = read_concept_map(fixture("local-codes.conceptmap.json"))


@FUZZ
@given(JSON)
def test_arbitrary_json_never_raises_anything_else(data: object) -> None:
    assert isinstance(outcome_of(data), Intake | BundleError)


@FUZZ
@given(st.dictionaries(KEYS, JSON, max_size=8))
def test_arbitrary_bundle_members_never_raise_anything_else(members: dict[str, Any]) -> None:
    data = {"resourceType": "Bundle", **members}
    assert isinstance(outcome_of(data), Intake | BundleError)


def _paths(node: Any, prefix: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    found = [prefix]
    if isinstance(node, dict):
        for key, child in node.items():
            found += _paths(child, (*prefix, key))
    elif isinstance(node, list):
        for i, child in enumerate(node):
            found += _paths(child, (*prefix, i))
    return found


@FUZZ
@given(st.sampled_from(fixture_names()), st.data())
def test_fixture_with_one_element_replaced_never_raises_anything_else(
    name: str, data: st.DataObject
) -> None:
    bundle = fixture(name)
    paths = [p for p in _paths(bundle) if p]
    path = data.draw(st.sampled_from(paths))
    mutated = copy.deepcopy(bundle)
    node: Any = mutated
    for part in path[:-1]:
        node = node[part]
    node[path[-1]] = data.draw(JSON)
    assert isinstance(outcome_of(mutated), Intake | BundleError)
