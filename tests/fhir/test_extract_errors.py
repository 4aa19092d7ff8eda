"""read_bundle refuses what it cannot read: one BundleError, every problem, each located."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest

from service.fhir.extract import read_bundle
from service.fhir.outcome import BundleError, NotABundleError, Problem
from service.fhir.references import BundleIndex

from .builders import Json, bundle, observation, patient, tagged

R = "Bundle.entry[0].resource"


def refused(data: object) -> list[Problem]:
    with pytest.raises(BundleError) as caught:
        read_bundle(data)
    return list(caught.value.problems)


def broken(change: Callable[[Json], object]) -> Json:
    """A one-Observation Bundle (PaO2 80 mm[Hg]) with ``change`` applied to the Observation."""
    data = bundle(observation("2703-7", 80, "mm[Hg]"))
    change(data["entry"][0]["resource"])
    return data


def put(path: str, value: object) -> Callable[[Json], object]:
    """Set (or with ``...`` delete) a dotted path inside the resource."""

    def change(resource: Json) -> None:
        *parents, last = path.split(".")
        node: Any = resource
        for part in parents:
            node = node[int(part)] if part.isdigit() else node[part]
        if value is ...:
            del node[last]
        elif last.isdigit():
            node[int(last)] = value
        else:
            node[last] = value

    return change


# (what is broken, the change, the exact FHIRPath expected, the issue type expected)
MALFORMED = [
    # A missing element is located at the element that lacks it: FHIRPath to it selects nothing.
    ("status missing", put("status", ...), R, "required"),
    ("status not a string", put("status", 5), f"{R}.status", "structure"),
    ("status empty", put("status", ""), f"{R}.status", "value"),
    ("status not R4", put("status", "bogus"), f"{R}.status", "code-invalid"),
    ("code missing", put("code", ...), R, "required"),
    ("code not an object", put("code", "2703-7"), f"{R}.code", "structure"),
    ("coding not a list", put("code.coding", {}), f"{R}.code.coding", "structure"),
    ("coding item not an object", put("code.coding.0", "x"), f"{R}.code.coding[0]", "structure"),
    (
        "coding code not a string",
        put("code.coding.0.code", 2703),
        f"{R}.code.coding[0].code",
        "structure",
    ),
    ("value[x] not an object", put("valueQuantity", 80), f"{R}.valueQuantity", "structure"),
    ("value missing", put("valueQuantity.value", ...), f"{R}.valueQuantity", "required"),
    ("value a string", put("valueQuantity.value", "80"), f"{R}.valueQuantity.value", "structure"),
    ("value a boolean", put("valueQuantity.value", True), f"{R}.valueQuantity.value", "structure"),
    ("value null", put("valueQuantity.value", None), f"{R}.valueQuantity.value", "structure"),
    (
        "value infinite",
        put("valueQuantity.value", float("inf")),
        f"{R}.valueQuantity.value",
        "value",
    ),
    (
        "value huge integer",
        put("valueQuantity.value", 10**400),
        f"{R}.valueQuantity.value",
        "value",
    ),
    ("unit not convertible", put("valueQuantity.code", "mg"), f"{R}.valueQuantity.code", "value"),
    ("unit missing", put("valueQuantity", {"value": 80}), f"{R}.valueQuantity", "required"),
    (
        "unit text bad",
        put("valueQuantity", {"value": 80, "unit": "torr?"}),
        f"{R}.valueQuantity.unit",
        "value",
    ),
    (
        "code not UCUM",
        put("valueQuantity.system", "http://example.org/u"),
        f"{R}.valueQuantity.system",
        "value",
    ),
    (
        "comparator bad",
        put("valueQuantity.comparator", "~"),
        f"{R}.valueQuantity.comparator",
        "code-invalid",
    ),
    ("two value[x]", put("valueString", "80"), R, "structure"),
    (
        "dateTime without zone",
        put("effectiveDateTime", "2026-01-05T10:00:00"),
        f"{R}.effectiveDateTime",
        "value",
    ),
    (
        "dateTime not a date",
        put("effectiveDateTime", "2026-02-30"),
        f"{R}.effectiveDateTime",
        "value",
    ),
    ("dateTime words", put("effectiveDateTime", "yesterday"), f"{R}.effectiveDateTime", "value"),
    ("dateTime number", put("effectiveDateTime", 20260105), f"{R}.effectiveDateTime", "structure"),
    (
        "instant without time",
        put("effectiveInstant", "2026-01-05"),
        f"{R}.effectiveInstant",
        "value",
    ),
    (
        "period start bad",
        put("effectivePeriod", {"start": "soon"}),
        f"{R}.effectivePeriod.start",
        "value",
    ),
    ("issued bad", put("issued", "2026-13-01T00:00:00Z"), f"{R}.issued", "value"),
    ("component not a list", put("component", {}), f"{R}.component", "structure"),
    (
        "component without code",
        put("component", [{"valueQuantity": {"value": 2}}]),
        f"{R}.component[0]",
        "required",
    ),
    ("meta.profile not a list", put("meta.profile", "x"), f"{R}.meta.profile", "structure"),
    ("profile not a string", put("meta.profile", [3]), f"{R}.meta.profile[0]", "structure"),
    (
        "subject reference not a string",
        put("subject", {"reference": 1}),
        f"{R}.subject.reference",
        "structure",
    ),
    ("id not a FHIR id", put("id", "has space"), f"{R}.id", "value"),
]


@pytest.mark.parametrize(
    ("change", "expression", "code"), [m[1:] for m in MALFORMED], ids=[m[0] for m in MALFORMED]
)
def test_malformed_observation_element_is_a_located_error(
    change: Callable[[Json], object], expression: str, code: str
) -> None:
    data = broken(change)
    if expression.endswith(("effectiveInstant", "effectivePeriod.start")):
        del data["entry"][0]["resource"]["effectiveDateTime"]
    if expression.endswith("issued"):
        del data["entry"][0]["resource"]["effectiveDateTime"]
    problems = refused(data)
    assert [(p.expression, p.code) for p in problems] == [(expression, code)]
    assert all(p.severity == "error" for p in problems)


def test_unspecified_blood_specimen_reference_is_checked() -> None:
    obs = observation("11556-8", 45, "mm[Hg]", specimen={"reference": ["Specimen/1"]})
    [problem] = refused(bundle(obs))
    assert problem.expression == f"{R}.specimen.reference"


@pytest.mark.parametrize(
    ("data", "expression"),
    [
        ({"resourceType": "Bundle", "type": "collection", "entry": {}}, "Bundle.entry"),
        ({"resourceType": "Bundle", "type": "collection", "entry": [[]]}, "Bundle.entry[0]"),
        (
            {"resourceType": "Bundle", "type": "collection", "entry": [{"fullUrl": "x"}]},
            "Bundle.entry[0]",
        ),
        (
            {"resourceType": "Bundle", "type": "collection", "entry": [{"resource": []}]},
            "Bundle.entry[0].resource",
        ),
        (
            {"resourceType": "Bundle", "type": "collection", "entry": [{"resource": {}}]},
            "Bundle.entry[0].resource",
        ),
        (
            {
                "resourceType": "Bundle",
                "type": "collection",
                "entry": [{"fullUrl": 3, "resource": patient()}],
            },
            "Bundle.entry[0].fullUrl",
        ),
        ({"resourceType": "Bundle", "type": "bogus"}, "Bundle.type"),
        ({"resourceType": "Bundle", "type": 1}, "Bundle.type"),
        ({"resourceType": "Bundle", "entry": []}, "Bundle"),  # type is 1..1: never guessed
    ],
)
def test_malformed_bundle_element_is_a_located_error(data: Json, expression: str) -> None:
    assert [p.expression for p in refused(data)] == [expression]


@pytest.mark.parametrize(
    ("change", "expression"),
    [
        (put("birthDate", "12/04/1961"), "Bundle.entry[0].resource.birthDate"),
        (put("birthDate", "1961-02-30"), "Bundle.entry[0].resource.birthDate"),
        (put("gender", "f"), "Bundle.entry[0].resource.gender"),
    ],
)
def test_malformed_patient_element_is_a_located_error(
    change: Callable[[Json], object], expression: str
) -> None:
    pt = patient()
    change(pt)
    assert [p.expression for p in refused(bundle(pt))] == [expression]


def test_malformed_location_altitude_is_a_located_error() -> None:
    loc = tagged({"resourceType": "Location", "id": "l1", "position": {"altitude": "high"}})
    [problem] = refused(bundle(loc))
    assert problem.expression == "Bundle.entry[0].resource.position.altitude"


@pytest.mark.parametrize(
    ("data", "found", "expression"),
    [
        # Not a resource: nothing in it a FHIRPath could select, so no expression ('').
        ([], "JSON array", ""),
        ("Bundle", "JSON string", ""),
        (42, "JSON number", ""),
        (None, "JSON null", ""),
        (True, "JSON boolean", ""),
        ({}, "an object without a FHIR resourceType", ""),
        # Another resource: named by its type, which selects it.
        ({"resourceType": "Patient", "id": "pt-1"}, "a Patient resource", "Patient"),
        ({"resourceType": 7}, "an object without a FHIR resourceType", ""),
    ],
)
def test_non_bundle_input_is_refused(data: object, found: str, expression: str) -> None:
    # A body that is not a Bundle is a 400, told apart from a fixable Bundle (a 422).
    with pytest.raises(NotABundleError):
        read_bundle(data)
    [problem] = refused(data)
    assert (problem.expression, problem.code) == (expression, "structure")
    assert problem.diagnostics.endswith(found)


def test_every_problem_is_collected_and_raised_once() -> None:
    data = bundle(
        observation("2703-7", "80", "mm[Hg]", oid="a"),
        observation("2019-8", 40, "mmHgg", oid="b"),
        patient(gender="F"),
    )
    with pytest.raises(BundleError) as caught:
        read_bundle(data)
    assert not isinstance(caught.value, NotABundleError)  # a fixable Bundle: 422, not 400
    expressions = [p.expression for p in refused(data)]
    assert expressions == [
        "Bundle.entry[0].resource.valueQuantity.value",
        "Bundle.entry[1].resource.valueQuantity.code",
        "Bundle.entry[2].resource.gender",
    ]


def test_second_patient_is_refused() -> None:
    problems = refused(bundle(patient("pt-1"), patient("pt-2")))
    assert [p.expression for p in problems] == ["Bundle.entry[1].resource"]


def test_observation_about_another_patient_is_refused() -> None:
    other = observation("2019-8", 40, "mm[Hg]", oid="b", subject={"reference": "Patient/pt-2"})
    problems = refused(bundle(patient("pt-1"), observation("2703-7", 80, "mm[Hg]"), other))
    assert [p.expression for p in problems] == ["Bundle.entry[2].resource.subject.reference"]


def test_same_patient_named_two_ways_is_accepted() -> None:
    data = bundle(
        patient("pt-1"),
        observation(
            "2703-7", 80, "mm[Hg]", subject={"reference": "https://example.org/fhir/Patient/pt-1"}
        ),
    )
    assert len(read_bundle(data).measurements) == 1


def test_problem_messages_do_not_quote_values_names_or_identifiers() -> None:
    pt = patient(gender="F", name=[{"family": "Invented-Family"}])
    pt["identifier"] = [{"value": "MRN-TEST-77"}]
    data = bundle(pt, observation("2703-7", "80.123", "mm[Hg]"))
    for problem in refused(data):
        for secret in ("80.123", "Invented-Family", "MRN-TEST-77", "'F'"):
            assert secret not in problem.diagnostics


def test_bundle_index_resolves_full_url_and_type_id() -> None:
    index = BundleIndex()
    index.add(0, {"resourceType": "Specimen", "id": "s1"}, "urn:uuid:1")
    index.add(1, {"resourceType": "Specimen", "id": "s2"}, None)
    assert index.resolve("urn:uuid:1") == 0
    assert index.resolve("Specimen/s1") == 0
    assert index.resolve("https://elsewhere.example/fhir/Specimen/s2/_history/3") == 1
    assert index.resolve("#s1") is None
