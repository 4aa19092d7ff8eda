"""Structured request logs: one JSON line per request, and never a patient's data."""

from __future__ import annotations

import json
import logging
from collections.abc import Callable

import httpx
import pytest

from service.api.logs import FIELDS
from service.api.tally import tally
from tests.api.conftest import ASSESS, logged_requests
from tests.api.privacy import leaks, marked_bodies, marked_v2_messages, v2_leaks

Serve = Callable[..., httpx.Client]


def test_each_request_logs_one_json_line_with_its_outcome(
    serve: Serve, log_lines: Callable[[], list[str]]
) -> None:
    client = serve()
    content_type, body = marked_bodies()[0]
    response = client.post(ASSESS, content=body, headers={"Content-Type": content_type})
    client.get("/healthz")
    lines = [json.loads(line) for line in logged_requests(log_lines, 2)]
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
    text = "\n".join(logged_requests(log_lines, 6))
    assert text.count('"message":"request"') == 6
    assert leaks(text) == []


def test_no_patient_data_reaches_error_bodies_metrics_or_any_logger(
    serve: Serve, caplog: pytest.LogCaptureFixture
) -> None:
    """Refusals name elements and units, never the values; metrics are counts; and no logger
    at all (python-hl7's included) writes what the patient's messages carried."""
    client = serve()
    caplog.set_level(logging.DEBUG)  # every logger, at every level
    refusals = []
    for content_type, body in marked_bodies():
        response = client.post(ASSESS, content=body, headers={"Content-Type": content_type})
        if response.status_code != 200:
            refusals.append(response)
    for message in marked_v2_messages():
        for reply in ({}, {"reply": "result"}):
            for accept in ("x-application/hl7-v2+er7", "application/fhir+json"):
                client.post(
                    "/hl7v2",
                    params=reply,
                    content=message,
                    headers={"Content-Type": "application/hl7-v2", "Accept": accept},
                )
    refused_bundle = refusals[0]
    assert refused_bundle.status_code == 422
    assert refused_bundle.json()["resourceType"] == "OperationOutcome"
    # It says what is wrong and where, not what was sent (the unit code is not one of ours) ...
    assert "valueQuantity.code" in refused_bundle.text and "psi" not in refused_bundle.text
    assert leaks(refused_bundle.text) == []  # ... and nothing of whom
    metrics = client.get("/metrics").text
    assert 'route="/hl7v2"' in metrics and "oxyrule_inputs_rejected_total" in metrics
    assert v2_leaks(metrics) == []
    logged = "\n".join(record.getMessage() for record in caplog.records)
    assert "HL7 v2 message answered" in logged  # the v2 path did log, without the data
    assert v2_leaks(logged) == []
