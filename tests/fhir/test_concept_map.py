"""Local codes to LOINC through a FHIR R4 ConceptMap (README, What it reads)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest

from service.fhir.concept_map import read_concept_map
from service.fhir.models import validate_resource
from service.fhir.outcome import ConceptMapError

from .builders import Json, fixture

LAB = "https://example.org/lab/analyser-codes"
T = "ConceptMap.group[0].element[0].target[0]"


def test_fixture_concept_map_is_valid_r4b() -> None:
    validate_resource(fixture("local-codes.conceptmap.json"))


def test_equivalent_and_equal_are_used_others_skipped() -> None:
    local = read_concept_map(fixture("local-codes.conceptmap.json"))
    assert local.loinc_for(LAB, "PO2-A") == "2703-7"  # equivalence: equivalent
    assert local.loinc_for(LAB, "PCO2-A") == "2019-8"  # equivalence: equal
    assert local.loinc_for(LAB, "PO2-ANY") is None  # equivalence: wider
    assert local.skipped == 1
    assert local.loinc_for("https://example.org/other", "PO2-A") is None


def test_r5_relationship_equivalent_is_used() -> None:
    data = fixture("local-codes.conceptmap.json")
    target = data["group"][0]["element"][0]["target"][0]
    del target["equivalence"]
    target["relationship"] = "equivalent"
    assert read_concept_map(data).loinc_for(LAB, "PO2-A") == "2703-7"


def edit(path: str, value: object) -> Callable[[Json], None]:
    def change(data: Json) -> None:
        *parents, last = path.split(".")
        node: Any = data
        for part in parents:
            node = node[int(part)] if part.isdigit() else node[part]
        if value is ...:
            del node[last]
        else:
            node[last] = value

    return change


@pytest.mark.parametrize(
    ("change", "expression"),
    [
        # A missing element is located at the element lacking it (FHIRPath selects that).
        (edit("group", ...), "ConceptMap"),
        (edit("group", {}), "ConceptMap.group"),
        (edit("group.0.source", ...), "ConceptMap.group[0]"),
        (edit("group.0.target", "http://snomed.info/sct"), "ConceptMap.group[0].target"),
        (edit("group.0.element", ...), "ConceptMap.group[0]"),
        (edit("group.0.element.0.code", 5), "ConceptMap.group[0].element[0].code"),
        (edit("group.0.element.0.target.0.equivalence", ...), T),
        (edit("group.0.element.0.target.0.equivalence", "same"), f"{T}.equivalence"),
        (edit("group.0.element.0.target.0.code", "8867-4"), f"{T}.code"),  # not read here
        (edit("group.0.element.0.target.0.code", ...), T),
        (edit("group.0.element.1.code", "PO2-A"), "ConceptMap.group[0].element[1].target[0].code"),
    ],
)
def test_malformed_concept_map_names_the_element(
    change: Callable[[Json], None], expression: str
) -> None:
    data = fixture("local-codes.conceptmap.json")
    change(data)
    with pytest.raises(ConceptMapError) as caught:
        read_concept_map(data, source="rules/local-codes.json")
    [problem] = caught.value.problems
    assert problem.expression == expression
    assert problem.diagnostics.startswith("rules/local-codes.json")


@pytest.mark.parametrize("data", [None, [], "ConceptMap", {"resourceType": "ValueSet"}])
def test_not_a_concept_map_is_refused(data: object) -> None:
    with pytest.raises(ConceptMapError) as caught:
        read_concept_map(data)
    assert caught.value.problems[0].expression == "ConceptMap"
