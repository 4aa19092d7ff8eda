"""The CapabilityStatement, the OperationDefinition and the OpenAPI description."""

from __future__ import annotations

import pytest

from service.api.capability import FHIR_VERSION, OPERATION_URL
from service.fhir.models import validate_resource
from tests.api.conftest import AppFactory, TestClient


def test_metadata_is_a_valid_r4b_capability_statement_naming_the_operation(
    client: TestClient,
) -> None:
    response = client.get("/fhir/metadata")
    assert response.status_code == 200
    assert response.headers["content-type"] == "application/fhir+json"
    statement = response.json()
    validate_resource(statement)
    assert statement["fhirVersion"] == FHIR_VERSION == "4.0.1"  # R4, declared
    assert {"application/fhir+json", "application/fhir+ndjson"} <= set(statement["format"])
    operation = statement["rest"][0]["operation"][0]
    assert operation == {
        "name": "assess-hypoxaemia",
        "definition": OPERATION_URL,
        "documentation": operation["documentation"],
    }
    assert "not a diagnosis" in statement["description"]
    assert "security" not in statement["rest"][0]


def test_metadata_states_the_security_when_authentication_is_on(make_app: AppFactory) -> None:
    with TestClient(make_app(api_key_hashes=["sha256:" + "0" * 64])) as client:
        statement = client.get("/fhir/metadata").json()
    validate_resource(statement)
    assert "API key" in statement["rest"][0]["security"]["description"]


def test_operation_definition_is_valid_r4b_and_defines_the_operation(client: TestClient) -> None:
    response = client.get("/fhir/OperationDefinition/assess-hypoxaemia")
    assert response.status_code == 200
    definition = response.json()
    validate_resource(definition)
    assert definition["url"] == OPERATION_URL
    assert definition["code"] == "assess-hypoxaemia"
    assert definition["system"] is True and definition["instance"] is False
    assert {(p["name"], p["use"]) for p in definition["parameter"]} == {
        ("resource", "in"),
        ("units", "in"),
        ("return", "out"),
    }


@pytest.mark.parametrize("format_", ["json", "application/json", "application/fhir+json"])
def test_conformance_resources_honour_format(client: TestClient, format_: str) -> None:
    response = client.get("/fhir/metadata", params={"_format": format_})
    assert response.status_code == 200
    expected = "application/fhir+json" if format_ == "json" else format_
    assert response.headers["content-type"] == expected
    refused = client.get("/fhir/metadata", params={"_format": "xml"})
    assert refused.status_code == 406


def test_openapi_documents_every_route_with_its_docstring(client: TestClient) -> None:
    spec = client.get("/openapi.json").json()
    paths = spec["paths"]
    assert set(paths) == {
        "/fhir/$assess-hypoxaemia",
        "/fhir/metadata",
        "/fhir/$versions",
        "/fhir/OperationDefinition/assess-hypoxaemia",
        "/healthz",
        "/readyz",
        "/metrics",
        "/hl7v2",
        "/cds-services",
        "/cds-services/{service_id}",
        "/cds-services/{service_id}/feedback",
    }
    assert "not a diagnosis" in paths["/hl7v2"]["post"]["description"]
    operation = paths["/fhir/$assess-hypoxaemia"]["post"]
    assert "not a diagnosis" in operation["description"]
    assert "application/fhir+ndjson" in operation["requestBody"]["content"]
    assert {"400", "413", "415", "422", "429"} <= set(operation["responses"])
    assert client.get("/docs").status_code == 200
