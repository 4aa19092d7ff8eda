"""The budgets of one request and of the process, over HTTP (deploy/README.md, "Budgets").

Before: a Bundle of 100,000 entries the service does not read was answered with 100,004
issues (47 MB, after ~2 s of work on the event loop); bodies had no budget as a whole;
duplicate JSON keys silently took the last value; requests that were not valid HTTP got a
plain-text 400 that no log or metric saw.
"""

from __future__ import annotations

import json
import socket
import threading
import time
from typing import Any

import httpx
import orjson

from service.api.protocol import MALFORMED
from tests.api.conftest import (
    ALTITUDE,
    ASSESS,
    FHIR_JSON,
    AppFactory,
    TestClient,
    issue,
    logged_requests,
)

Serve = Any


def demo() -> dict[str, Any]:
    data: dict[str, Any] = json.loads(ALTITUDE.read_bytes())
    return data


def with_entries(count: int, resource_type: str = "Condition") -> dict[str, Any]:
    bundle = demo()
    extra = [{"resource": {"resourceType": resource_type}} for _ in range(count)]
    bundle["entry"] = bundle["entry"] + extra
    return bundle


def outcome_of(result: dict[str, Any]) -> dict[str, Any]:
    found: list[dict[str, Any]] = [
        e["resource"]
        for e in result["entry"]
        if e["resource"]["resourceType"] == "OperationOutcome"
    ]
    assert len(found) == 1
    return found[0]


def test_a_bundle_over_the_entry_budget_is_refused_413_at_bundle_entry(
    make_app: AppFactory,
) -> None:
    client = TestClient(make_app(max_bundle_entries=50))
    body = orjson.dumps(with_entries(40))  # 11 entries of the demo and 40 more: 51
    response = client.post(ASSESS, content=body, headers=FHIR_JSON)
    assert response.status_code == 413
    found = issue(response.json())
    assert (found["code"], found["expression"]) == ("too-long", ["Bundle.entry"])
    assert "OXYRULE_MAX_BUNDLE_ENTRIES" in found["diagnostics"]
    assert client.post(ASSESS, content=orjson.dumps(with_entries(39)), headers=FHIR_JSON).is_success


def test_the_amplification_bundle_is_refused_at_once_with_a_short_answer(
    client: TestClient,
) -> None:
    # 100,000 ignored entries (3.7 MB): 47 MB and 100,004 issues before, ~2 s of work.
    body = orjson.dumps(with_entries(100_000))
    started = time.perf_counter()
    response = client.post(ASSESS, content=body, headers=FHIR_JSON)
    assert time.perf_counter() - started < 2.0  # generous: the machine is shared
    assert response.status_code == 413
    assert len(response.content) < 1000


def test_repeated_issues_are_counted_not_listed(client: TestClient) -> None:
    # 989 entries the service does not read: listed three times, the rest counted in one.
    response = client.post(ASSESS, content=orjson.dumps(with_entries(989)), headers=FHIR_JSON)
    assert response.status_code == 200
    issues = outcome_of(response.json())["issue"]
    ignored = [i for i in issues if "Condition resources are not read" in i["diagnostics"]]
    assert len(ignored) == 4
    assert ignored[3]["diagnostics"].startswith("and 986 more like the one above, not listed")
    assert ignored[3]["expression"] == ["Bundle.entry[14].resource"]
    assert len(response.content) < 64 * 1024


def test_no_more_than_the_issue_budget_is_listed_errors_first(make_app: AppFactory) -> None:
    client = TestClient(make_app(max_issues=20))
    kinds = ["Condition", "Procedure", "Encounter", "Device", "Flag", "Goal", "Task", "Basic"]
    bundle = demo()
    bundle["entry"] += [{"resource": {"resourceType": k}} for k in kinds for _ in range(3)]
    response = client.post(ASSESS, content=orjson.dumps(bundle), headers=FHIR_JSON)
    issues = outcome_of(response.json())["issue"]
    counted = [i for i in issues if "OXYRULE_MAX_ISSUES" in i["diagnostics"]]
    assert len(counted) == 1
    intake = [i for i in issues if "resources are not read" in i["diagnostics"]]
    assert len(intake) <= 20


def test_many_broken_entries_are_refused_with_their_problems_counted(
    client: TestClient,
) -> None:
    bundle = demo()
    pao2 = next(e for e in bundle["entry"] if "valueQuantity" in e["resource"])
    broken = json.loads(json.dumps(pao2))
    broken["resource"]["valueQuantity"]["code"] = "INVENTED-UNIT"
    bundle["entry"] += [json.loads(json.dumps(broken)) for _ in range(500)]
    response = client.post(ASSESS, content=orjson.dumps(bundle), headers=FHIR_JSON)
    assert response.status_code == 422
    issues = response.json()["issue"]
    assert len(issues) == 4
    assert issues[3]["diagnostics"].startswith("and 497 more like the one above")
    assert "INVENTED-UNIT" not in response.text


def test_a_body_that_does_not_fit_the_buffered_budget_is_429_until_there_is_room(
    make_app: AppFactory,
) -> None:
    app = make_app(max_body_bytes=16384, max_buffered_bytes=16384, ndjson_read_ahead_bytes=16384)
    client = TestClient(app)
    budget = app.state.service.budget
    assert budget.try_take(10_000)  # other requests hold most of it
    response = client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
    assert response.status_code == 429
    assert response.headers["retry-after"] == "1"
    found = issue(response.json())
    assert found["code"] == "throttled" and found["location"] == ["http.Content-Length"]
    assert "OXYRULE_MAX_BUFFERED_BYTES" in found["diagnostics"]
    budget.give(10_000)
    assert client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON).is_success
    assert budget.used == 0  # every body's bytes given back


def test_a_duplicated_json_key_is_refused_located_never_chosen(client: TestClient) -> None:
    text = ALTITUDE.read_text()
    bundle = demo()
    index = next(i for i, e in enumerate(bundle["entry"]) if "valueQuantity" in e["resource"])
    value = bundle["entry"][index]["resource"]["valueQuantity"]["value"]
    # The same key twice, as a careless engine might write it: 58 then 30 was assessed as 30.
    doubled = text.replace(f'"value": {value},', f'"value": {value}, "value": 30,', 1)
    assert doubled != text
    response = client.post(ASSESS, content=doubled.encode(), headers=FHIR_JSON)
    assert response.status_code == 422
    found = issue(response.json())
    assert found["expression"] == [f"Bundle.entry[{index}].resource.valueQuantity.value"]
    assert "same key twice" in found["diagnostics"]
    ndjson = doubled.replace("\n", " ").encode() + b"\n"
    line = client.post(ASSESS, content=ndjson, headers={"Content-Type": "application/fhir+ndjson"})
    assert "line 1: an object has the same key twice" in line.text


def test_healthz_answers_while_a_long_assessment_runs(serve: Serve) -> None:
    # 9,000 Observations with the entry budget lifted: seconds of work, off the event loop.
    client: httpx.Client = serve(max_bundle_entries=20_000)
    bundle = demo()
    observations = [e for e in bundle["entry"] if e["resource"]["resourceType"] == "Observation"]
    for n in range(1000):
        for entry in observations:
            copy = json.loads(json.dumps(entry))
            copy["resource"]["id"] = f"{copy['resource'].get('id', 'o')}x{n}"
            copy.pop("fullUrl", None)
            bundle["entry"].append(copy)
    body = orjson.dumps(bundle)
    answered: list[int] = []
    began = time.perf_counter()
    worker = threading.Thread(
        target=lambda: answered.append(
            client.post(ASSESS, content=body, headers=FHIR_JSON, timeout=120).status_code
        )
    )
    worker.start()
    time.sleep(0.3)
    slowest = 0.0
    while worker.is_alive():
        started = time.perf_counter()
        assert client.get("/healthz", timeout=5).status_code == 200
        slowest = max(slowest, time.perf_counter() - started)
        time.sleep(0.05)
    worker.join()
    took = time.perf_counter() - began
    assert answered == [200]
    # The event loop kept answering: on the event loop, /healthz waited for the whole
    # assessment. (Bounds generous: the machine is shared.)
    assert slowest < min(1.5, took / 2), (slowest, took)


def test_a_request_that_is_not_valid_http_is_a_located_logged_counted_400(
    serve: Serve, log_lines: Any
) -> None:
    client: httpx.Client = serve()
    port = int(str(client.base_url).rsplit(":", 1)[1].rstrip("/"))
    with socket.create_connection(("127.0.0.1", port), timeout=5) as sock:
        sock.sendall(
            f"POST {ASSESS} HTTP/1.1\r\nHost: x\r\nContent-Length: 5\r\n"
            "Transfer-Encoding: chunked\r\n\r\n0\r\n\r\n".encode()
        )
        answer = b""
        while chunk := sock.recv(65536):
            answer += chunk
    head, _, body = answer.partition(b"\r\n\r\n")
    assert head.startswith(b"HTTP/1.1 400")
    assert b"content-type: application/fhir+json" in head.lower()
    found = issue(json.loads(body))
    assert found["location"] == ["http.request"] and found["diagnostics"] == MALFORMED
    assert 'route="other",method="-",status="400"' in client.get("/metrics").text
    logged = [json.loads(line) for line in logged_requests(log_lines, 2)]
    assert any(line.get("status") == 400 and line["route"] == "other" for line in logged)
