"""Every error path over real HTTP: its status, and an OperationOutcome that locates the fault."""

from __future__ import annotations

import json
import socket
import threading
from collections.abc import Callable, Iterator
from dataclasses import fields
from typing import Any

import httpx
import pytest

from service.api import create_app
from service.config import ServerSettings, Settings
from service.runtime import Runtime
from tests.api.conftest import ALTITUDE, ASSESS, FHIR_JSON, issue, logged_requests

Serve = Callable[..., httpx.Client]


def observation(value: Any, unit: str = "mm[Hg]") -> dict[str, Any]:
    return {
        "resourceType": "Observation",
        "status": "final",
        "code": {"coding": [{"system": "http://loinc.org", "code": "2703-7"}]},
        "effectiveDateTime": "2026-11-20T10:00:00Z",
        "valueQuantity": {"value": value, "system": "http://unitsofmeasure.org", "code": unit},
    }


def bundle(*resources: dict[str, Any]) -> bytes:
    entries = [{"resource": r} for r in resources]
    return json.dumps({"resourceType": "Bundle", "type": "collection", "entry": entries}).encode()


def fhir_error(response: httpx.Response, status: int, code: str) -> dict[str, Any]:
    """Check the status, the media type and the issue code; return the first issue."""
    assert response.status_code == status, response.text
    assert response.headers["content-type"].startswith("application/fhir+json")
    found = issue(response.json())
    assert found["code"] == code, found
    assert found["severity"] == "error"
    assert "Traceback" not in response.text
    return found


@pytest.mark.parametrize(
    ("body", "status", "code", "expression"),
    [
        # A body that is not a resource has no element to name: no expression (FHIRPath would
        # select nothing); a resource of another type is named by its type.
        (b"this is not json", 400, "structure", None),
        (b"", 400, "structure", None),
        (b'{"resourceType": "Patient"}', 400, "structure", "Patient"),
        (b"[1, 2, 3]", 400, "structure", None),
        (
            bundle(observation(80, "psi")),
            422,
            "value",
            "Bundle.entry[0].resource.valueQuantity.code",
        ),
        (
            bundle(observation("eighty")),
            422,
            "structure",
            "Bundle.entry[0].resource.valueQuantity.value",
        ),
    ],
    ids=["not-json", "empty", "not-a-bundle", "array", "unknown-unit", "string-for-number"],
)
def test_assess_refuses_bad_bodies_with_a_located_outcome(
    live: httpx.Client, body: bytes, status: int, code: str, expression: str | None
) -> None:
    response = live.post(ASSESS, content=body, headers=FHIR_JSON)
    found = fhir_error(response, status, code)
    assert found.get("expression") == (None if expression is None else [expression])


@pytest.mark.parametrize(
    "content_type",
    ["text/plain", "application/xml", "application/fhir+xml", "application/x-www-form-urlencoded"],
)
def test_assess_refuses_other_media_types_with_415(live: httpx.Client, content_type: str) -> None:
    response = live.post(
        ASSESS, content=ALTITUDE.read_bytes(), headers={"Content-Type": content_type}
    )
    found = fhir_error(response, 415, "not-supported")
    assert found["location"] == ["http.Content-Type"]
    assert "application/fhir+json" in found["diagnostics"]


def test_assess_refuses_a_body_without_content_type(live: httpx.Client) -> None:
    response = live.post(ASSESS, content=ALTITUDE.read_bytes())  # httpx sends no Content-Type
    found = fhir_error(response, 415, "not-supported")
    assert found["location"] == ["http.Content-Type"]


def test_assess_refuses_a_fhir_version_it_does_not_read(live: httpx.Client) -> None:
    headers = {"Content-Type": "application/fhir+json; fhirVersion=5.0"}
    response = live.post(ASSESS, content=ALTITUDE.read_bytes(), headers=headers)
    diagnostics = fhir_error(response, 415, "not-supported")["diagnostics"]
    assert "5.0" not in diagnostics and "R4B (4.3)" in diagnostics  # named, never echoed


def test_assess_refuses_a_charset_other_than_utf8(live: httpx.Client) -> None:
    headers = {"Content-Type": "application/fhir+json; charset=latin-1"}
    fhir_error(
        live.post(ASSESS, content=ALTITUDE.read_bytes(), headers=headers), 415, "not-supported"
    )


@pytest.mark.parametrize(
    ("params", "headers", "expression"),
    [
        ({"_format": "xml"}, {}, "http._format"),
        ({"_format": "application/fhir+ndjson"}, {}, "http._format"),
        ({}, {"Accept": "application/fhir+xml"}, "http.Accept"),
    ],
    ids=["format-xml", "format-ndjson-for-a-bundle", "accept-xml"],
)
def test_assess_refuses_an_answer_format_it_cannot_give_with_406(
    live: httpx.Client, params: dict[str, str], headers: dict[str, str], expression: str
) -> None:
    response = live.post(
        ASSESS, params=params, content=ALTITUDE.read_bytes(), headers=FHIR_JSON | headers
    )
    assert fhir_error(response, 406, "not-supported")["location"] == [expression]


def test_assess_refuses_an_unknown_pressure_unit(live: httpx.Client) -> None:
    response = live.post(
        ASSESS, params={"units": "psi"}, content=ALTITUDE.read_bytes(), headers=FHIR_JSON
    )
    found = fhir_error(response, 400, "value")
    assert found["location"] == ["http.units"]
    assert "kPa" in found["diagnostics"]


def test_assess_refuses_a_declared_length_over_the_limit_before_reading_the_body(
    serve: Serve,
) -> None:
    client = serve(max_body_bytes=4096)
    port = httpx.URL(str(client.base_url)).port
    assert port is not None
    # Announce 100 MB and send none of it: the answer must come without waiting for the body.
    with socket.create_connection(("127.0.0.1", port), timeout=5) as sock:
        sock.sendall(
            b"POST /fhir/$assess-hypoxaemia HTTP/1.1\r\nHost: t\r\n"
            b"Content-Type: application/fhir+json\r\nContent-Length: 104857600\r\n\r\n"
        )
        head = sock.recv(65536).decode()
    assert head.startswith("HTTP/1.1 413")
    body = json.loads(head.split("\r\n\r\n", 1)[1])
    assert issue(body)["code"] == "too-long"
    assert issue(body)["location"] == ["http.Content-Length"]


def test_assess_refuses_a_streamed_body_once_it_passes_the_limit(serve: Serve) -> None:
    client = serve(max_body_bytes=4096)

    def chunks() -> Iterator[bytes]:  # chunked transfer encoding: no Content-Length
        for _ in range(16):
            yield b" " * 1024

    response = client.post(ASSESS, content=chunks(), headers=FHIR_JSON)
    found = fhir_error(response, 413, "too-long")
    assert "expression" not in found  # the body as a whole: no element of it to name
    assert "OXYRULE_MAX_BODY_BYTES" in found["diagnostics"]


def test_assess_accepts_a_streamed_body_within_the_limit(serve: Serve) -> None:
    client = serve()
    data = ALTITUDE.read_bytes()
    response = client.post(ASSESS, content=iter([data[:1000], data[1000:]]), headers=FHIR_JSON)
    assert response.status_code == 200


def test_assess_answers_429_beyond_the_concurrency_limit(serve: Serve) -> None:
    client = serve(max_concurrent_requests=1)
    release = threading.Event()
    first: list[httpx.Response] = []

    def slow_body() -> Iterator[bytes]:
        yield ALTITUDE.read_bytes()[:100]
        release.wait(10)
        yield ALTITUDE.read_bytes()[100:]

    def send_slow() -> None:
        first.append(client.post(ASSESS, content=slow_body(), headers=FHIR_JSON))

    holder = threading.Thread(target=send_slow)
    holder.start()
    try:
        for _ in range(200):  # wait until the slow request is in flight
            metrics = client.get("/metrics").text
            if "oxyrule_assessments_in_flight 1" in metrics:
                break
            threading.Event().wait(0.01)
        response = client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
        found = fhir_error(response, 429, "throttled")
        assert response.headers["retry-after"] == "1"
        assert "OXYRULE_MAX_CONCURRENT_REQUESTS" in found["diagnostics"]
        assert client.get("/healthz").status_code == 200  # probes are never limited
    finally:
        release.set()
        holder.join(10)
    assert first[0].status_code == 200
    # The slot is given back once the first request's work is done, which may come a moment
    # after its client has read the answer: wait for it as for the start, then the next passes.
    for _ in range(200):
        if "oxyrule_assessments_in_flight 0" in client.get("/metrics").text:
            break
        threading.Event().wait(0.01)
    assert client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON).status_code == 200


class _Broken(Runtime):
    """A runtime whose assessment fails inside the service, with patient words in the error."""

    def assess_bundle(self, data: object, **kwargs: Any) -> dict[str, Any]:
        raise RuntimeError("Quorvale Tindemann MRN-99812 PaO2 47.3")


def test_an_internal_error_is_a_500_outcome_with_a_correlation_id_and_no_traceback(
    serve: Serve, runtime: Runtime, log_lines: Callable[[], list[str]]
) -> None:
    broken = _Broken(**{f.name: getattr(runtime, f.name) for f in fields(Runtime)})
    client = serve(create_app(Settings(), ServerSettings(), runtime=broken))
    response = client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
    found = fhir_error(response, 500, "exception")
    correlation = response.headers["x-correlation-id"]
    assert correlation in found["diagnostics"]
    for secret in ("Quorvale", "MRN-99812", "47.3", "RuntimeError", ".py"):
        assert secret not in response.text
    logged = [json.loads(line) for line in logged_requests(log_lines, 1)]
    error = next(line for line in logged if line["message"] == "internal error")
    assert error["correlation_id"] == correlation
    assert error["error_type"] == "RuntimeError"
    assert any("assess_bundle" in frame for frame in error["frames"])
    assert not any("Quorvale" in line or "MRN-99812" in line for line in log_lines())
    request = next(line for line in logged if line["message"] == "request")
    assert request["status"] == 500


def test_unknown_paths_and_methods_are_answered_as_fhir(live: httpx.Client) -> None:
    found = fhir_error(live.get("/fhir/Patient/1"), 404, "not-found")
    assert "$assess-hypoxaemia" in found["diagnostics"]
    # Located like every other error (they had no expression before).
    assert found["location"] == ["http.path"]
    assert fhir_error(live.get(ASSESS), 405, "not-supported")["location"] == ["http.method"]
    fhir_error(live.delete("/fhir/metadata"), 405, "not-supported")


def test_a_trailing_slash_is_a_located_404_not_an_empty_redirect(live: httpx.Client) -> None:
    for path in ("/healthz/", "/fhir/metadata/", ASSESS + "/"):
        answer = live.get(path, follow_redirects=False)
        found = fhir_error(answer, 404, "not-found")  # it was an empty 307
        assert found["location"] == ["http.path"] and "slash" in found["diagnostics"]


def test_every_error_the_document_offers_is_located(live: httpx.Client) -> None:
    answers = [
        live.get("/nowhere"),
        live.put("/healthz"),
        live.post(ASSESS, content=b"{}", headers={"Content-Type": "text/csv"}),
        live.post(ASSESS, content=b"{}", headers=FHIR_JSON, params={"units": "psi"}),
        live.post(ASSESS, content=b'{"resourceType": "Patient"}', headers=FHIR_JSON),
        live.get("/fhir/metadata", params={"_format": ""}),
    ]
    for answer in answers:
        assert answer.status_code >= 400
        # A FHIRPath into the body, or the part of the HTTP request at fault.
        issues = answer.json()["issue"]
        assert all(i.get("expression") or i.get("location") for i in issues), answer.text
        assert not [e for i in issues for e in i.get("expression", []) if e.startswith("http.")]


def test_the_document_offers_no_format_or_body_the_service_refuses(live: httpx.Client) -> None:
    document = live.get("/openapi.json").json()
    operation = document["paths"][ASSESS]["post"]
    formats = next(p for p in operation["parameters"] if p["name"] == "_format")["schema"]
    assert "" not in formats["enum"] and "ndjson" in formats["enum"]
    for value in formats["enum"][:3]:
        answer = live.post(
            ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON, params={"_format": value}
        )
        assert answer.status_code == 200, value
    body = operation["requestBody"]["content"]["application/fhir+json"]["schema"]
    assert body["required"] == ["resourceType", "type"]  # {} was offered, and refused


@pytest.mark.parametrize(
    "body",
    [
        b"\xff\xfe\x00garbage",
        b"null",
        b"1e999999",
        b'"a string"',
        b"[" * 5000 + b"]" * 5000,
        b'{"resourceType": "Bundle"}',
        b'{"resourceType": "Bundle", "entry": "many"}',
        b'{"resourceType": "Bundle", "entry": [null, 1, "x", {"resource": null}]}',
        b'{"resourceType": "Bundle", "entry": [{"resource": {"resourceType": "Observation"}}]}',
        b'{"resourceType": "Bundle", "entry": [{"resource": {"resourceType": "Patient", '
        b'"birthDate": 12}}]}',
        b'{"resourceType": "Bundle", "type": 7, "entry": [{"resource": {"resourceType": '
        b'"Observation", "valueQuantity": {"value": 1e308, "code": "kPa"}}}]}',
    ],
)
def test_no_client_input_gets_a_5xx(live: httpx.Client, body: bytes) -> None:
    response = live.post(ASSESS, content=body, headers=FHIR_JSON)
    assert response.status_code < 500, response.text
    if response.status_code >= 400:
        issue(response.json())


def test_clients_that_never_exceed_the_concurrency_limit_are_never_refused(
    serve: Serve,
) -> None:
    """A request stops counting as in flight once its answer has gone, so clients that wait
    for each answer before sending again, no more of them than the limit, always get in
    (before, the slot was held until the app's exit work after its last byte had run, and a
    client's next request could arrive first: 40 % refusals at 64 connections and a limit of
    64, measured with ``tests/benchmarks/http.py``)."""
    limit = 2
    client = serve(max_concurrent_requests=limit)
    body = ALTITUDE.read_bytes()
    statuses: list[int] = []

    def keep_sending() -> None:
        with httpx.Client(base_url=client.base_url, timeout=10) as own:
            statuses.extend(
                own.post(ASSESS, content=body, headers=FHIR_JSON).status_code for _ in range(40)
            )

    senders = [threading.Thread(target=keep_sending) for _ in range(limit)]
    for sender in senders:
        sender.start()
    for sender in senders:
        sender.join(60)
    assert statuses == [200] * (40 * limit)
