"""No patient data and no token in logs or metrics from the CDS Hooks routes."""

from __future__ import annotations

import io
import json
import logging
from collections.abc import Iterator

import pytest

from service.api.logs import JsonFormatter, log_config
from tests.api.privacy import BIRTH_DATE, IDENTIFIER, NAME, PATIENT_ID, VALUES, leaks
from tests.cds.conftest import AppMaker, hook_request, service_path
from tests.cds.ehr import Ehr

TOKEN = "invented-access-token-6c2f1e"


@pytest.fixture
def captured() -> Iterator[io.StringIO]:
    """Everything the service's loggers write during the test, configured as ``oxyrule serve``
    configures them (``log_config``), at debug level; anything reaching the root logger too."""
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    saved = []
    for name, conf in log_config("debug")["loggers"].items():
        logger = logging.getLogger(name)
        saved.append((logger, logger.level, logger.propagate, logger.handlers[:]))
        logger.setLevel(conf["level"])
        logger.propagate = conf["propagate"]
        logger.handlers = [handler] if conf["handlers"] else []
    root = logging.getLogger()
    saved.append((root, root.level, root.propagate, root.handlers[:]))
    root.addHandler(handler)
    root.setLevel(logging.DEBUG)
    yield stream
    for logger, level, propagate, handlers in saved:
        logger.setLevel(level)
        logger.propagate = propagate
        logger.handlers = handlers


def marked(name: str, ehr_url: str) -> dict[str, object]:
    """A fixture re-labelled with the distinctive invented patient of ``tests/api/privacy``."""
    text = hook_request(name, ehr_url)
    raw = json.dumps(text).replace(text["context"]["patientId"], PATIENT_ID)
    body: dict[str, object] = json.loads(raw)
    prefetch = body["prefetch"]
    assert isinstance(prefetch, dict)
    prefetch["patient"] |= {
        "name": [{"family": NAME[1], "given": [NAME[0]]}],
        "identifier": [{"value": IDENTIFIER}],
        "birthDate": BIRTH_DATE,
    }
    gas = prefetch["bloodGases"]["entry"][0]["resource"]
    gas["valueQuantity"]["value"] = float(VALUES[1])
    return body


def test_a_hook_call_logs_and_counts_no_patient_data_and_no_token(
    cds: AppMaker, ehr: Ehr, captured: io.StringIO
) -> None:
    client = cds(cds_fhir_servers=[ehr.base + "/fhir"])
    body = marked("patient-view-paged-prefetch", ehr.base + "/fhir")
    ehr.resources = json.loads(json.dumps(ehr.resources).replace("cds-copd-1", PATIENT_ID))
    answer = client.post(service_path(body), json=body)
    assert answer.status_code == 200, answer.text
    assert [p for p, _, _ in ehr.seen] == ["/fhir/Observation", "/fhir/Observation"]
    metrics = client.get("/metrics").text
    written = captured.getvalue()
    assert '"message":"cds cards"' in written
    assert leaks(written) == [] and TOKEN not in written
    assert leaks(metrics) == [] and TOKEN not in metrics
    assert "oxyrule_cds_fhir_reads_total{" not in metrics  # a next page is no missing key
    indicator = answer.json()["cards"][0]["indicator"]
    counted = f'oxyrule_cds_cards_total{{service="hypoxaemia-mechanism",indicator="{indicator}"}} 1'
    assert counted in metrics


def test_refusals_name_no_patient_and_no_token(
    cds: AppMaker, ehr: Ehr, captured: io.StringIO
) -> None:
    client = cds(cds_fhir_servers=[ehr.base + "/fhir"])
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    body["context"]["patientId"] = PATIENT_ID
    body["fhirAuthorization"]["patient"] = PATIENT_ID
    body["fhirAuthorization"]["access_token"] = "invented-secret-token-77"
    answer = client.post(service_path(body), json=body)
    assert answer.status_code == 412
    other = hook_request("patient-view-other-patient")
    other_answer = client.post(service_path(other), json=other)
    assert other_answer.status_code == 422
    for text in (answer.text, other_answer.text, captured.getvalue(), client.get("/metrics").text):
        assert leaks(text) == [] and "invented-secret-token-77" not in text
        assert "cds-someone-else" not in text and "cds-mixup-1" not in text
    assert (
        'oxyrule_cds_refused_total{status="412",code="processing"} 1' in client.get("/metrics").text
    )


def test_the_http_client_libraries_never_write_a_log_line() -> None:
    # Their request lines carry the FHIR URL, and with it the patient's id.
    loggers = log_config("debug")["loggers"]
    for name in ("httpx", "httpcore"):
        assert loggers[name] == {"handlers": [], "level": "CRITICAL", "propagate": False}
