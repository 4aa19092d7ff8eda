"""Discovery: the services, their hooks and prefetch templates, as CDS Hooks 2.0 describes."""

from __future__ import annotations

import re
from urllib.parse import parse_qsl

from service.cds.services import PREFETCH, SERVICES, fill
from service.terminology import codes
from tests.cds.conftest import AppMaker
from tests.cds.spec import check_discovery

TOKEN = re.compile(r"\{\{([^}]*)\}\}")


def test_discovery_lists_the_three_services(cds: AppMaker) -> None:
    answer = cds().get("/cds-services")
    assert answer.status_code == 200
    assert answer.headers["content-type"] == "application/json"
    body = answer.json()
    check_discovery(body)
    assert [(s["id"], s["hook"]) for s in body["services"]] == [
        ("hypoxaemia-mechanism", "patient-view"),
        ("oxygen-order-select", "order-select"),
        ("oxygen-order-sign", "order-sign"),
    ]
    for service in body["services"]:
        assert service["prefetch"] == {key: t for key, (t, _) in PREFETCH.items()}
        assert "not a diagnosis" in service["usageRequirements"]


def test_templates_use_only_context_tokens_of_the_hooks() -> None:
    # CDS Hooks 2.0 "Prefetch tokens": context fields as {{context.name}}; patientId and
    # encounterId are prefetch tokens of patient-view, order-select and order-sign.
    for template, _ in PREFETCH.values():
        assert set(TOKEN.findall(template)) <= {"context.patientId", "context.encounterId"}


def test_templates_keep_to_reads_and_simple_searches() -> None:
    # "Prefetch query restrictions": instance reads, type searches by reference and token,
    # _count and _sort. _include (the encounter's location) is the one addition: clients that
    # cannot satisfy it leave the key out and the service follows the reference itself.
    for key, (template, _) in PREFETCH.items():
        path, _, query = template.partition("?")
        if not query:
            assert re.fullmatch(r"[A-Z][A-Za-z]+/\{\{context\.\w+\}\}", path), key
            continue
        names = {name for name, _ in parse_qsl(query)}
        assert names <= {"patient", "code", "_sort", "_count", "_id", "_include"}, key


def test_every_code_the_reader_knows_is_asked_for_by_exactly_one_template() -> None:
    asked: list[str] = []
    for template, _ in PREFETCH.values():
        for name, value in parse_qsl(template.partition("?")[2]):
            if name == "code":
                asked += value.split(",")
    known = [f"{codes.LOINC}|{c}" for c in codes.LOINC_CONCEPTS] + [
        f"{codes.INPUT_CODES}|{c}" for c in codes.INPUT_CONCEPTS
    ]
    assert sorted(asked) == sorted(known)


def test_only_the_observation_searches_are_required() -> None:
    required = {key for key, (_, needed) in PREFETCH.items() if needed}
    assert required == {"bloodGases", "oximetry", "oxygenSettings"}


def test_tokens_are_filled_url_escaped_and_a_missing_one_drops_the_key() -> None:
    assert fill("Patient/{{context.patientId}}", {"context.patientId": "a b/c"}) == (
        "Patient/a%20b%2Fc"
    )
    assert fill(PREFETCH["encounterLocation"][0], {"context.patientId": "p"}) is None


def test_service_ids_are_unique_and_each_hook_is_served() -> None:
    assert len(SERVICES) == 3
    assert {s.hook for s in SERVICES.values()} == {"patient-view", "order-select", "order-sign"}
