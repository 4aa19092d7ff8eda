"""The HTTP surface as FHIR R4 and HTTP say it must behave.

Sources: FHIR R4 (4.0.1) http.html (the ``fhirVersion`` MIME parameter, ``$versions``: a
Parameters with ``version`` and ``default``), capabilitystatement.html (implementation.url,
the restful-security-service codes), operations.html (an operation's input as a Parameters
resource); RFC 9110 §12.5.1 (Accept: q-values, ``q=0`` is "not acceptable", the most specific
range wins) and §9.3.2 (HEAD is GET without the body).
"""

from __future__ import annotations

import hashlib
import json
import re
import subprocess
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.config import ServerSettings, Settings
from service.runtime import Runtime

from .conftest import ASSESS, FHIR_JSON
from .live import LiveServer

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
CHROMIUM = Path("/usr/bin/chromium")


def _demo() -> dict[str, Any]:
    data: dict[str, Any] = json.loads(DEMO.read_bytes())
    return data


# --- 10. Accept ------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("accept", "chosen"),
    [
        ("application/json;q=0.1, application/fhir+json", "application/fhir+json"),
        ("application/fhir+json;q=0, */*", "application/json"),  # fhir+json refused
        ("application/*;q=0.2, application/json;q=0.9", "application/json"),
        ("*/*", "application/fhir+json"),  # a tie goes to the FHIR media type
    ],
)
def test_accept_q_values_are_honoured(client: TestClient, accept: str, chosen: str) -> None:
    answer = client.post(ASSESS, content=DEMO.read_bytes(), headers={**FHIR_JSON, "Accept": accept})
    assert answer.status_code == 200
    assert answer.headers["content-type"].split(";")[0] == chosen


def test_an_accept_that_refuses_everything_is_406(client: TestClient) -> None:
    answer = client.get("/fhir/metadata", headers={"Accept": "application/fhir+json;q=0"})
    assert answer.status_code == 406
    assert answer.json()["issue"][0]["location"] == ["http.Accept"]


# --- 4. versions -----------------------------------------------------------------------------


def test_the_service_declares_r4(client: TestClient) -> None:
    statement = client.get("/fhir/metadata").json()
    assert statement["fhirVersion"] == "4.0.1"
    assert statement["implementation"]["url"].endswith("/fhir")


@pytest.mark.parametrize("header", ["Accept", "Content-Type"])
def test_an_unsupported_fhir_version_is_refused_on_either_header(
    client: TestClient, header: str
) -> None:
    headers = {**FHIR_JSON, header: "application/fhir+json; fhirVersion=5.0"}
    answer = client.post(ASSESS, content=DEMO.read_bytes(), headers=headers)
    assert answer.status_code == (406 if header == "Accept" else 415)
    assert answer.json()["issue"][0]["location"] == [f"http.{header}"]


def test_an_r4b_request_is_answered_in_r4b(client: TestClient) -> None:
    accept = {"Accept": "application/fhir+json; fhirVersion=4.3"}
    answer = client.get("/fhir/metadata", headers=accept)
    assert answer.status_code == 200
    assert answer.headers["content-type"] == "application/fhir+json; fhirVersion=4.3"
    assert answer.json()["fhirVersion"] == "4.3.0"


def test_versions_names_r4_as_the_default(client: TestClient) -> None:
    answer = client.get("/fhir/$versions")
    assert answer.status_code == 200
    parameters = answer.json()["parameter"]
    assert {"name": "default", "valueCode": "4.0"} in parameters
    assert {"name": "version", "valueCode": "4.0"} in parameters


def test_head_is_answered_where_get_is(client: TestClient) -> None:
    answer = client.head("/fhir/metadata")
    assert answer.status_code == 200 and answer.content == b""


def test_api_keys_are_not_labelled_oauth(runtime: Runtime) -> None:
    digest = "sha256:" + hashlib.sha256(b"an-invented-engine-key-0001").hexdigest()
    server = ServerSettings(api_key_hashes=[digest])
    with TestClient(create_app(Settings(), server, runtime=runtime)) as keyed:
        statement = keyed.get("/fhir/metadata").json()
    services = statement["rest"][0]["security"]["service"]
    assert all("coding" not in s for s in services)
    assert "API key" in services[0]["text"]


# --- 5. the operation called with a Parameters body ------------------------------------------


def _parameters(bundle: dict[str, Any], units: str | None = None) -> dict[str, Any]:
    parameter: list[dict[str, Any]] = [{"name": "resource", "resource": bundle}]
    if units is not None:
        parameter.append({"name": "units", "valueCode": units})
    return {"resourceType": "Parameters", "parameter": parameter}


def test_the_operation_takes_a_parameters_body(client: TestClient) -> None:
    direct = client.post(
        ASSESS, content=DEMO.read_bytes(), headers=FHIR_JSON, params={"units": "kPa"}
    )
    wrapped = client.post(
        ASSESS, content=json.dumps(_parameters(_demo(), "kPa")), headers=FHIR_JSON
    )
    assert wrapped.status_code == direct.status_code == 200

    def verdict(answer: Any) -> list[Any]:
        return [
            p
            for p in answer.json()["entry"][1]["resource"]["parameter"]
            if p["name"] in ("pattern", "mechanism", "alveolar-po2")
        ]

    assert verdict(wrapped) == verdict(direct)


def test_a_problem_in_a_wrapped_bundle_is_located_in_the_parameters(client: TestClient) -> None:
    bundle = _demo()
    del bundle["entry"][1]["resource"]["code"]
    answer = client.post(ASSESS, content=json.dumps(_parameters(bundle)), headers=FHIR_JSON)
    assert answer.status_code == 422
    assert answer.json()["issue"][0]["expression"] == [
        "Parameters.parameter[0].resource.entry[1].resource"
    ]


def test_the_operation_definition_describes_both_forms(client: TestClient) -> None:
    definition = client.get("/fhir/OperationDefinition/assess-hypoxaemia").json()
    names = {p["name"]: p for p in definition["parameter"]}
    assert names["resource"]["type"] == "Bundle" and names["units"]["type"] == "code"
    assert "Parameters" in definition["description"]


# --- 11. /docs offline ------------------------------------------------------------------------

ASSET = re.compile(r"""(?:src|href)=["']([^"']+)["']""")


def test_docs_load_nothing_from_outside(client: TestClient) -> None:
    page = client.get("/docs")
    assert page.status_code == 200
    assets = ASSET.findall(page.text)
    assert len(assets) >= 3
    for url in assets:
        assert url.startswith("/"), url  # served here, by path: no other host
        assert client.get(url).status_code == 200, url
    assert not re.search(r"https?://", page.text)
    assert '"validatorUrl": null' in page.text  # no badge fetched from a validator


@pytest.mark.skipif(
    not CHROMIUM.exists(), reason="/usr/bin/chromium is not installed: /docs not rendered"
)
def test_docs_render_in_a_browser_with_no_way_out(runtime: Runtime, tmp_path: Path) -> None:
    app = create_app(Settings(), ServerSettings(), runtime=runtime)
    with LiveServer(app) as server:
        command = [
            str(CHROMIUM),
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            # Every host but loopback goes to a proxy that is not there: the network is off.
            "--proxy-server=http://127.0.0.1:9",
            f"--user-data-dir={tmp_path / 'profile'}",
            "--virtual-time-budget=8000",
            "--dump-dom",
            f"{server.url}/docs",
        ]
        done = subprocess.run(command, capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    # Swagger UI drew the operations: its script and styles came from the service itself.
    assert "opblock" in done.stdout, done.stdout[-2000:]
    assert "$assess-hypoxaemia" in done.stdout
