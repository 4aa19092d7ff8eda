"""``POST /fhir/$assess-hypoxaemia`` over real HTTP: Bundles, media types, units and NDJSON."""

from __future__ import annotations

import json
import socket
from collections.abc import Callable
from typing import Any

import httpx
import pytest

from service.fhir.models import validate_resource
from tests.api.conftest import ALTITUDE, ASSESS, DEMO, FHIR_JSON, NDJSON, issue

Serve = Callable[..., httpx.Client]


def parameter(result: dict[str, Any], name: str) -> dict[str, Any]:
    params = result["entry"][1]["resource"]["parameter"]
    found: dict[str, Any] = next(p for p in params if p["name"] == name)
    return found


def test_assess_answers_a_fixture_with_a_valid_result_bundle(live: httpx.Client) -> None:
    response = live.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
    assert response.status_code == 200, response.text
    assert response.headers["content-type"] == "application/fhir+json"
    assert response.headers["cache-control"] == "no-store"
    assert len(response.headers["x-correlation-id"]) == 32
    result = response.json()
    assert result["resourceType"] == "Bundle"
    assert result["entry"][0]["resource"]["resourceType"] == "GuidanceResponse"
    assert parameter(result, "pattern")["valueCode"] in {"single", "mixed", "indeterminate"}
    caution = result["entry"][2]["resource"]["issue"][-1]["diagnostics"]
    assert "not a diagnosis" in caution
    for entry in result["entry"]:
        validate_resource(entry["resource"])


@pytest.mark.parametrize(
    "content_type",
    [
        "application/fhir+json",
        "application/json",
        "application/fhir+json; fhirVersion=4.0",
        "application/fhir+json;fhirVersion=4.3.0; charset=UTF-8",
        "Application/JSON; charset=utf-8",
    ],
)
def test_assess_accepts_the_json_media_types(live: httpx.Client, content_type: str) -> None:
    response = live.post(
        ASSESS, content=ALTITUDE.read_bytes(), headers={"Content-Type": content_type}
    )
    assert response.status_code == 200, response.text


@pytest.mark.parametrize(
    ("params", "accept", "expected"),
    [
        ({}, None, "application/fhir+json"),
        ({}, "application/json", "application/json"),
        ({}, "text/html, application/json;q=0.9", "application/json"),
        ({}, "*/*", "application/fhir+json"),
        ({"_format": "json"}, None, "application/fhir+json"),
        ({"_format": "application/json"}, "application/fhir+json", "application/json"),
        ({"_format": "application/fhir+json"}, None, "application/fhir+json"),
    ],
)
def test_assess_answers_in_the_media_type_asked_for(
    live: httpx.Client, params: dict[str, str], accept: str | None, expected: str
) -> None:
    headers = FHIR_JSON | ({"Accept": accept} if accept else {})
    response = live.post(ASSESS, params=params, content=ALTITUDE.read_bytes(), headers=headers)
    assert response.status_code == 200, response.text
    assert response.headers["content-type"] == expected


def test_assess_reports_pressures_in_kpa_on_request(live: httpx.Client) -> None:
    response = live.post(
        ASSESS, params={"units": "kPa"}, content=ALTITUDE.read_bytes(), headers=FHIR_JSON
    )
    assert parameter(response.json(), "barometric-pressure")["valueQuantity"]["code"] == "kPa"
    response = live.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
    assert parameter(response.json(), "barometric-pressure")["valueQuantity"]["code"] == "mm[Hg]"


def ndjson(*lines: bytes) -> bytes:
    return b"\n".join(lines) + b"\n"


def one_line(path: Any) -> bytes:
    return json.dumps(json.loads(path.read_bytes())).encode()


def test_ndjson_is_answered_line_by_line_in_order_naming_broken_lines(serve: Serve) -> None:
    client = serve(max_body_bytes=16384)
    bundles = sorted(DEMO.glob("*.bundle.json"))
    body = ndjson(
        one_line(bundles[0]),
        b"not json",
        b"",
        b'{"resourceType": "Patient"}',
        b'{"resourceType": "Bundle", "entry": [' + b" " * 20000 + b"]}",
        one_line(bundles[1]),
    )
    response = client.post(ASSESS, params={"units": "kPa"}, content=body, headers=NDJSON)
    assert response.status_code == 200
    assert response.headers["content-type"] == "application/fhir+ndjson"
    out = [json.loads(line) for line in response.text.splitlines()]
    assert [o["resourceType"] for o in out] == [
        "Bundle",
        "OperationOutcome",
        "OperationOutcome",
        "OperationOutcome",
        "Bundle",
    ]
    assert "line 2" in issue(out[1])["diagnostics"]
    assert "line 4" in issue(out[2])["diagnostics"]
    assert issue(out[3])["code"] == "too-long"
    assert "line 5" in issue(out[3])["diagnostics"]
    assert parameter(out[4], "barometric-pressure")["valueQuantity"]["code"] == "kPa"
    metrics = client.get("/metrics").text
    assert 'oxyrule_inputs_rejected_total{code="too-long"} 1' in metrics


@pytest.mark.parametrize("content_type", ["application/fhir+ndjson", "application/ndjson"])
def test_ndjson_media_types_are_both_accepted(live: httpx.Client, content_type: str) -> None:
    response = live.post(
        ASSESS, content=ndjson(one_line(ALTITUDE)), headers={"Content-Type": content_type}
    )
    assert response.status_code == 200
    assert response.headers["content-type"] == "application/fhir+ndjson"
    response = live.post(
        ASSESS,
        params={"_format": "application/ndjson"},
        content=one_line(ALTITUDE),  # a last line without its newline still counts
        headers={"Content-Type": content_type},
    )
    assert response.headers["content-type"] == "application/ndjson"
    assert json.loads(response.text)["resourceType"] == "Bundle"


def test_ndjson_without_lines_is_refused(live: httpx.Client) -> None:
    response = live.post(ASSESS, content=b"\n\n  \n", headers=NDJSON)
    assert response.status_code == 400
    assert issue(response.json())["code"] == "required"


def test_ndjson_answers_stream_while_the_body_is_still_arriving(live: httpx.Client) -> None:
    port = httpx.URL(str(live.base_url)).port
    assert port is not None
    line = one_line(ALTITUDE) + b"\n"
    with socket.create_connection(("127.0.0.1", port), timeout=10) as sock:
        sock.sendall(
            b"POST /fhir/$assess-hypoxaemia HTTP/1.1\r\nHost: t\r\n"
            b"Content-Type: application/fhir+ndjson\r\nTransfer-Encoding: chunked\r\n\r\n"
        )
        sock.sendall(f"{len(line):x}\r\n".encode() + line + b"\r\n")
        received = b""
        while b'"resourceType":"Bundle"' not in received:  # the first answer, body unfinished
            chunk = sock.recv(65536)
            assert chunk, "the server closed the connection"
            received += chunk
        assert received.startswith(b"HTTP/1.1 200")
        sock.sendall(f"{len(line):x}\r\n".encode() + line + b"\r\n0\r\n\r\n")
        while not received.endswith(b"0\r\n\r\n"):
            chunk = sock.recv(65536)
            if not chunk:
                break
            received += chunk
    assert received.count(b'"resourceType":"GuidanceResponse"') == 2
