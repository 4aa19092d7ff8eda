"""What FHIR R4 says the result and the reader must do, checked on small invented inputs.

Sources: FHIR R4 (4.0.1) bundle.html "Resolving references in Bundles" (§2.36.4.1),
references.html (contained resources, ref-1), extensibility.html "Modifier Extensions"
(an unknown modifier: the element must not be processed as if it were absent; implicitRules
likewise, resource.html), datatypes.html Quantity (qty-3: a code needs a system), UCUM
(% is 10^-2, so SpO2 % / FiO2 1 is in %), detectedissue.html and operationoutcome.html (what
each resource is for).
"""

from __future__ import annotations

import copy
from typing import Any

import pytest

from service.fhir.extract import read_bundle
from service.fhir.outcome import BundleError
from service.runtime import Runtime
from tests.conformance.validators import unresolved_references

from .builders import bundle, observation, patient, tagged

Json = dict[str, Any]
BASE = "https://ehr.example.org/fhir/"
MODIFIER = [{"url": "https://example.org/fhir/StructureDefinition/not-done", "valueBoolean": True}]


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _gas_bundle(**subject: Any) -> Json:
    gas = [
        observation("2703-7", 62, "mm[Hg]", oid="pao2"),
        observation("2019-8", 65, "mm[Hg]", oid="paco2"),
        observation("3150-0", 21, "%", oid="fio2"),
    ]
    for o in gas:
        o.update(subject)
    return bundle(patient(birthDate="1980-01-01", gender="female"), *gas)


def _resources(result: Json, kind: str) -> list[Json]:
    return [e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == kind]


def _entry_urls(result: Json) -> set[str]:
    return {e["fullUrl"] for e in result["entry"]}


# --- 1. references --------------------------------------------------------------------------


def test_result_entries_point_at_each_other_by_their_full_urls(runtime: Runtime) -> None:
    result = runtime.assess_bundle(_gas_bundle())
    urls = _entry_urls(result)
    guidance = result["entry"][0]["resource"]
    assert guidance["outputParameters"]["reference"] in urls
    assert guidance["evaluationMessage"][0]["reference"] in urls
    [assessment] = [
        r for r in _resources(result, "Observation") if r["id"] == "mechanism-assessment"
    ]
    assert {d["reference"] for d in assessment["derivedFrom"]} <= urls
    assert unresolved_references(result) == []


def test_absolute_input_addresses_come_back_absolute(runtime: Runtime) -> None:
    data = _gas_bundle(subject={"reference": f"{BASE}Patient/pt-1"})
    for e in data["entry"]:
        e["fullUrl"] = f"{BASE}{e['resource']['resourceType']}/{e['resource']['id']}"
    result = runtime.assess_bundle(data)
    guidance = result["entry"][0]["resource"]
    assert guidance["subject"]["reference"] == f"{BASE}Patient/pt-1"
    [alveolar] = [r for r in _resources(result, "Observation") if r["id"] == "alveolar-po2"]
    assert {d["reference"] for d in alveolar["derivedFrom"]} == {
        f"{BASE}Observation/paco2",
        f"{BASE}Observation/fio2",
    }
    assert unresolved_references(result) == []


def test_transaction_urn_references_become_logical_references(runtime: Runtime) -> None:
    data = _gas_bundle(subject={"reference": "urn:uuid:5b1a0d2e-0000-4000-8000-000000000001"})
    data["type"] = "transaction"
    for n, entry in enumerate(data["entry"]):
        entry["fullUrl"] = f"urn:uuid:5b1a0d2e-0000-4000-8000-{n + 1:012d}"
        entry["request"] = {"method": "POST", "url": entry["resource"]["resourceType"]}
    result = runtime.assess_bundle(data)
    subject = result["entry"][0]["resource"]["subject"]
    # Not a literal reference (it would point nowhere in the result): the URI as identifier.
    assert "reference" not in subject
    assert subject["identifier"] == {
        "system": "urn:ietf:rfc:3986",
        "value": "urn:uuid:5b1a0d2e-0000-4000-8000-000000000001",
    }
    assert unresolved_references(result) == []


def test_a_contained_patient_is_read_and_never_pointed_at_with_a_local_reference(
    runtime: Runtime,
) -> None:
    data = _gas_bundle(subject={"reference": "#p"})
    contained = patient(pid="p", birthDate="1950-06-01", gender="male")
    contained["identifier"] = [{"system": "https://hospital.example.org/mrn", "value": "X-1"}]
    data["entry"] = data["entry"][1:]
    for entry in data["entry"]:
        entry["resource"]["contained"] = [copy.deepcopy(contained)]
    intake = read_bundle(data)
    assert intake.patient is not None and intake.patient.birth_date is not None
    result = runtime.assess_bundle(data)
    subject = result["entry"][0]["resource"]["subject"]
    assert subject["identifier"]["value"] == "X-1" and "reference" not in subject
    assert '"#p"' not in str(result).replace("'", '"')
    assert unresolved_references(result) == []


def test_a_conditional_reference_is_accepted_and_named_by_its_identifier(
    runtime: Runtime,
) -> None:
    conditional = "Patient?identifier=https://hospital.example.org/mrn|X-2"
    data = _gas_bundle(subject={"reference": conditional})
    data["entry"] = data["entry"][1:]  # the patient only named by the condition
    result = runtime.assess_bundle(data)
    assert result["entry"][0]["resource"]["subject"] == {
        "type": "Patient",
        "identifier": {"system": "https://hospital.example.org/mrn", "value": "X-2"},
    }
    # With the Patient in the Bundle, the condition finds it (its age is read).
    with_patient = _gas_bundle(subject={"reference": conditional})
    with_patient["entry"][0]["resource"]["identifier"] = [
        {"system": "https://hospital.example.org/mrn", "value": "X-2"}
    ]
    intake = read_bundle(with_patient)
    assert intake.patient is not None and intake.patient.birth_date is not None


# --- 2. modifiers ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("where", "expression"),
    [
        ("observation", "Bundle.entry[1].resource.modifierExtension"),
        ("implicit-rules", "Bundle.entry[1].resource.implicitRules"),
        ("component", "Bundle.entry[1].resource.component[0].modifierExtension"),
        ("patient", "Bundle.entry[0].resource.modifierExtension"),
        ("entry", "Bundle.entry[1].modifierExtension"),
    ],
)
def test_an_unknown_modifier_refuses_what_it_modifies(where: str, expression: str) -> None:
    data = _gas_bundle()
    gas = data["entry"][1]["resource"]
    if where == "observation":
        gas["modifierExtension"] = MODIFIER
    elif where == "implicit-rules":
        gas["implicitRules"] = "https://example.org/fhir/rules"
    elif where == "component":
        gas["component"] = [{"code": gas["code"], "valueQuantity": gas.pop("valueQuantity")}]
        gas["component"][0]["modifierExtension"] = MODIFIER
    elif where == "patient":
        data["entry"][0]["resource"]["modifierExtension"] = MODIFIER
    else:
        data["entry"][1]["modifierExtension"] = MODIFIER
    with pytest.raises(BundleError) as caught:
        read_bundle(data)
    assert [(p.expression, p.code) for p in caught.value.problems] == [
        (expression, "not-supported")
    ]


def test_a_plain_extension_changes_nothing() -> None:
    data = _gas_bundle()
    data["entry"][1]["resource"]["extension"] = MODIFIER
    assert len(read_bundle(data).measurements) == 3


# --- 3. units -------------------------------------------------------------------------------


def _pao2_with(quantity: Json) -> Json:
    return bundle(
        patient(), tagged({**observation("2703-7", oid="pao2"), "valueQuantity": quantity})
    )


@pytest.mark.parametrize(
    ("quantity", "where"),
    [
        # A local unit system: its mm[Hg] is not UCUM's.
        (
            {"value": 62, "system": "https://lab.example.org/units", "code": "mm[Hg]"},
            "valueQuantity.system",
        ),
        # No system, and a code that names nothing this value takes.
        ({"value": 62, "code": "torrs"}, "valueQuantity.code"),
        # Only a text that names nothing this value takes.
        ({"value": 62, "unit": "millimetres"}, "valueQuantity.unit"),
    ],
)
def test_a_unit_that_is_not_ucum_and_not_unambiguous_is_refused(quantity: Json, where: str) -> None:
    with pytest.raises(BundleError) as caught:
        read_bundle(_pao2_with(quantity))
    assert [p.expression for p in caught.value.problems] == [f"Bundle.entry[1].resource.{where}"]


@pytest.mark.parametrize(
    ("quantity", "where"),
    [
        ({"value": 62, "code": "mm[Hg]"}, "valueQuantity.code"),  # qty-3: no system
        ({"value": 62, "unit": "mmHg"}, "valueQuantity.unit"),  # text only
        (
            {"value": 62, "system": "http://unitsofmeasure.org", "code": "mmHg"},
            "valueQuantity.code",
        ),
    ],
)
def test_an_unambiguous_unit_is_read_and_said_so(quantity: Json, where: str) -> None:
    intake = read_bundle(_pao2_with(quantity))
    [measurement] = intake.measurements
    assert measurement.value == pytest.approx(62.0)
    [issue] = [i for i in intake.issues if i.code == "unit-not-ucum"]
    assert (issue.severity, issue.expression) == ("warning", f"Bundle.entry[1].resource.{where}")


# --- 8. findings as FHIR resources meant for them -------------------------------------------


def test_findings_are_not_issues_of_the_operation_outcome(runtime: Runtime) -> None:
    data = _gas_bundle()
    data["entry"].append({"resource": tagged({"resourceType": "Condition", "id": "c"})})
    result = runtime.assess_bundle(data)
    [outcome] = _resources(result, "OperationOutcome")
    codes = [i.get("details", {}).get("coding", [{}])[0].get("code") for i in outcome["issue"]]
    # Processing (a resource not read) and the caution only: no clinical finding.
    assert "resource-ignored" in codes
    assert "hypercapnia" not in codes and "hypoxaemia-mild" not in codes
    assert all(i["code"] != "business-rule" for i in outcome["issue"])
    assert any("not a diagnosis" in i.get("diagnostics", "") for i in outcome["issue"])
    [assessment] = [
        r for r in _resources(result, "Observation") if r["id"] == "mechanism-assessment"
    ]
    context = {c["code"]["coding"][0]["code"] for c in assessment["component"]}
    assert "hypercapnia" in context  # a clinical context finding, present


def test_a_data_quality_finding_is_a_detected_issue(runtime: Runtime) -> None:
    data = _gas_bundle()
    data["entry"] = [e for e in data["entry"] if e["resource"]["id"] != "fio2"]
    result = runtime.assess_bundle(data)
    issues = _resources(result, "DetectedIssue")
    codes = {i["code"]["coding"][0]["code"]: i for i in issues}
    assert "fio2-missing" in codes
    issue = codes["fio2-missing"]
    assert issue["status"] == "final" and issue["severity"] in ("high", "moderate", "low")
    params = _resources(result, "Parameters")[0]["parameter"]
    findings = [p for p in params if p["name"] == "finding"]
    assert "fio2-missing" in {p["part"][0]["valueCode"] for p in findings}  # still in the view


# --- 9. coding of derived Observations ------------------------------------------------------


def test_derived_observations_are_coded_as_computed_values(runtime: Runtime) -> None:
    data = _gas_bundle()
    data["entry"].append(
        {"resource": observation("59408-5", 90, "%", oid="spo2")},
    )
    result = runtime.assess_bundle(data)
    observations = {r["id"]: r for r in _resources(result, "Observation")}
    # Computed, not measured by a laboratory: no observation-category at all.
    assert all("category" not in o for o in observations.values())
    # No LOINC code for the a/A ratio could be confirmed: the project's code.
    ratio = observations["a-a-ratio"]["code"]["coding"][0]
    assert ratio["system"] == "https://oxyrule.org/fhir/CodeSystem/derived"
    # S/F: SpO2 90 % / FiO2 0.21 = 428.6 %, i.e. a ratio of 4.286 (UCUM % = 10^-2).
    sf = observations["sf-ratio"]["valueQuantity"]
    assert (sf["code"], sf["value"]) == ("%", pytest.approx(428.6, abs=0.5))
    module = result["entry"][0]["resource"]["moduleUri"]
    assert module.startswith("https://") and "|" not in module


def test_an_fio2_estimated_from_the_device_names_the_device_and_flow(runtime: Runtime) -> None:
    device = observation("107117-4", oid="device")
    device["valueCodeableConcept"] = {
        "coding": [
            {"system": "https://oxyrule.org/fhir/CodeSystem/oxygen-device", "code": "nasal-cannula"}
        ]
    }
    data = bundle(
        patient(birthDate="1980-01-01"),
        observation("2703-7", 62, "mm[Hg]", oid="pao2"),
        observation("2019-8", 45, "mm[Hg]", oid="paco2"),
        observation("3151-8", 2, "L/min", oid="flow"),
        device,
    )
    result = runtime.assess_bundle(data)
    [alveolar] = [r for r in _resources(result, "Observation") if r["id"] == "alveolar-po2"]
    named = {d["reference"] for d in alveolar["derivedFrom"]}
    assert any(n.endswith("Observation/flow") for n in named), named
    assert any(n.endswith("Observation/device") for n in named), named
