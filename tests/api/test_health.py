"""Health, readiness and the Prometheus metrics."""

from __future__ import annotations

import re
from collections.abc import Callable

import httpx

from service.api.metrics import Metrics
from tests.api.conftest import ALTITUDE, ASSESS, FHIR_JSON, AppFactory, TestClient

Serve = Callable[..., httpx.Client]


def test_healthz_and_readyz_answer_when_the_rule_set_is_loaded(client: TestClient) -> None:
    assert client.get("/healthz").json() == {"status": "ok"}
    ready = client.get("/readyz")
    assert ready.status_code == 200
    assert ready.json()["ruleset"].startswith("oxyrule-default|")


def test_readyz_answers_503_while_shutting_down(make_app: AppFactory, serve: Serve) -> None:
    app = make_app()
    client = serve(app)
    app.state.service.draining = True
    response = client.get("/readyz")
    assert response.status_code == 503
    assert response.headers["content-type"] == "application/fhir+json"
    assert response.json()["issue"][0]["code"] == "transient"
    assert client.get("/healthz").status_code == 200


def test_metrics_count_requests_verdicts_and_findings(client: TestClient) -> None:
    client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
    client.post(ASSESS, content=b"{", headers=FHIR_JSON)
    response = client.get("/metrics")
    assert response.headers["content-type"].startswith("text/plain; version=0.0.4")
    text = response.text
    assert (
        'oxyrule_http_requests_total{route="/fhir/$assess-hypoxaemia",method="POST",status="200"} 1'
        in text
    )
    assert 'status="400"} 1' in text
    assert re.search(r'oxyrule_verdicts_total\{pattern="[a-z-]+"\} 1', text)
    assert re.search(r'oxyrule_findings_total\{code="[a-z0-9-]+"\} \d', text)
    assert 'oxyrule_inputs_rejected_total{code="structure"} 1' in text
    assert 'oxyrule_ruleset_info{id="oxyrule-default"' in text
    assert 'oxyrule_http_request_duration_seconds_count{route="/fhir/$assess-hypoxaemia"} 2' in text


def test_metrics_text_format_is_well_formed() -> None:
    metrics = Metrics()
    metrics.request("/healthz", "GET", 200, 0.0004)
    metrics.request("/healthz", "GET", 200, 0.03)
    metrics.verdict("single", ["pb-assumed-sea-level", "pb-assumed-sea-level"])
    metrics.ruleset.set(1, (("id", 'odd"name\\'),))
    text = metrics.render()
    assert 'oxyrule_http_request_duration_seconds_bucket{route="/healthz",le="0.001"} 1' in text
    assert 'oxyrule_http_request_duration_seconds_bucket{route="/healthz",le="0.05"} 2' in text
    assert 'oxyrule_http_request_duration_seconds_bucket{route="/healthz",le="+Inf"} 2' in text
    assert 'oxyrule_findings_total{code="pb-assumed-sea-level"} 2' in text
    assert 'oxyrule_ruleset_info{id="odd\\"name\\\\"} 1' in text
    sample = re.compile(r'^[a-z_]+(\{([a-z_]+="([^"\\]|\\.)*",?)+\})? -?[0-9.e+-]+$')
    for line in text.splitlines():
        assert line.startswith("# HELP ") or line.startswith("# TYPE ") or sample.match(line), line


def test_unknown_paths_share_one_metrics_label(client: TestClient) -> None:
    for n in range(5):
        client.get(f"/fhir/Patient/{n}")
    text = client.get("/metrics").text
    assert 'route="other",method="GET",status="404"} 5' in text
    assert "Patient" not in text
