"""Structured request logs: one JSON line per request, and never a patient's data."""

from __future__ import annotations

import json
from collections.abc import Callable

import httpx

from service.api.logs import FIELDS
from service.api.tally import tally
from tests.api.conftest import ASSESS
from tests.api.privacy import leaks, marked_bodies

Serve = Callable[..., httpx.Client]


def test_each_request_logs_one_json_line_with_its_outcome(
    serve: Serve, log_lines: Callable[[], list[str]]
) -> None:
    client = serve()
    content_type, body = marked_bodies()[0]
    response = client.post(ASSESS, content=body, headers={"Content-Type": content_type})
    client.get("/healthz")
    lines = [json.loads(line) for line in log_lines()]
    requests = [line for line in lines if line["message"] == "request"]
    assert len(requests) == 2
    first = requests[0]
    assert first["correlation_id"] == response.headers["x-correlation-id"]
    assert first["route"] == "/fhir/$assess-hypoxaemia"
    assert first["status"] == 200
    assert first["pattern"] == tally(response.json()).pattern
    assert isinstance(first["duration_ms"], float)
    assert set(first) <= {"time", "level", "logger", "message", *FIELDS}


def test_no_patient_name_identifier_or_value_reaches_the_log(
    serve: Serve, log_lines: Callable[[], list[str]]
) -> None:
    client = serve()
    statuses = []
    for content_type, body in marked_bodies():
        for params in ({}, {"units": "kPa"}):
            response = client.post(
                ASSESS, params=params, content=body, headers={"Content-Type": content_type}
            )
            statuses.append(response.status_code)
            assert leaks(response.text) or response.status_code != 200  # the data did go in
    assert sorted(set(statuses)) == [200, 422]
    text = "\n".join(log_lines())
    assert text.count('"message":"request"') == 6
    assert leaks(text) == []
