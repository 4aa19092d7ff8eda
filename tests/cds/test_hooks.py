"""Every hook fixture through the HTTP service: the status, the cards, the spec's rules.

The fixtures (``fixtures/cds-hooks/*.hook.json``) are invented hook requests; each states in
its ``extension`` what it is. Their data are from the morning of 2026-11-21 and the service's
clock is set to 15:00 that day. Cards are held to the CDS Hooks 2.0 response rules
(``spec.py``); the grades behind each card are compared with ``$assess-hypoxaemia`` on the
same data (``test_same_grades_as_the_assess_operation``).
"""

from __future__ import annotations

import json
import re
from datetime import timedelta
from typing import Any

import pytest

from tests.cds.conftest import (
    FIXTURES,
    NOW,
    AppMaker,
    hook_request,
    service_path,
)
from tests.cds.ehr import Ehr
from tests.cds.spec import check_response

# fixture -> (status, [(indicator, start of the summary)] or [issue expressions] for errors)
EXPECTED: dict[str, tuple[int, list[tuple[str, str]] | list[str]]] = {
    "patient-view-hypoventilation": (
        200,
        [("warning", "Hypoventilation is the likely cause of hypoxaemia: PaCO2 65 mmHg")],
    ),
    "patient-view-altitude": (
        200,
        # Rule set 2.0: the A-a gradient is above the normal at this alveolar PO2, so a
        # gas-exchange defect of open type sits beside the altitude.
        [("info", "Low inspired oxygen is likely, beside a gas-exchange defect of open type")],
    ),
    "patient-view-shunt": (
        200,
        # P/F 100 on FiO2 1.0 is severe (ARDS Definition Task Force, JAMA 2012): critical.
        [("critical", "Shunt is the likely cause of hypoxaemia: shunt fraction 30 %")],
    ),
    "patient-view-nothing-to-say": (200, []),
    "patient-view-not-classifiable": (
        200,
        [("warning", "Not graded: the sample may be venous; a repeat arterial gas would")],
    ),
    "patient-view-without-prefetch": (
        200,
        [("warning", "Hypoxaemia with more than one likely cause (hypoventilation and V/Q")],
    ),
    "patient-view-paged-prefetch": (
        200,
        [("warning", "Hypoxaemia with more than one likely cause (hypoventilation and V/Q")],
    ),
    "patient-view-no-access": (
        412,
        ["prefetch.bloodGases", "prefetch.oximetry", "prefetch.oxygenSettings"],
    ),
    "patient-view-prefetch-outcome": (412, ["prefetch.oximetry"]),
    "patient-view-other-patient": (
        422,
        ["prefetch.bloodGases.entry[1].resource.subject.reference"],
    ),
    "order-select-oxygen-hypercapnia": (
        200,
        [("warning", "This order raises FiO2 from 0.35 to 0.40 while PaCO2 is 61 mmHg")],
    ),
    "order-select-oxygen-shunt": (
        200,
        # Below near-pure oxygen the content equation gives venous admixture, and says so.
        [("info", "Venous admixture about 30 %: raising FiO2 to 0.80 will raise PaO2 little.")],
    ),
    "order-sign-oxygen-no-concern": (200, []),
    "order-select-not-oxygen": (200, []),
}


def test_every_fixture_has_an_expectation_and_there_are_at_least_eight() -> None:
    names = {p.name.removesuffix(".hook.json") for p in FIXTURES.glob("*.hook.json")}
    assert names == set(EXPECTED)
    assert len(names) >= 8


def call(make: AppMaker, ehr: Ehr, name: str) -> tuple[dict[str, Any], Any]:
    body = hook_request(name, ehr.base + "/fhir")
    client = make(cds_fhir_servers=[ehr.base + "/fhir"])
    return body, client.post(service_path(body), json=body)


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_each_fixture_is_answered_as_expected(cds: AppMaker, ehr: Ehr, name: str) -> None:
    status, expected = EXPECTED[name]
    _, answer = call(cds, ehr, name)
    assert answer.status_code == status, answer.text
    if status != 200:
        body = answer.json()
        assert body["resourceType"] == "OperationOutcome"
        assert [i["expression"][0] for i in body["issue"]] == expected
        return
    cards = check_response(answer.json())
    assert [
        (c["indicator"], c["summary"][: len(s)]) for c, (_, s) in zip(cards, expected, strict=False)
    ] == expected
    assert len(cards) == len(expected)
    for card in cards:
        assert "not a diagnosis" in card["detail"]
        assert "links" not in card  # the bench link is off unless OXYRULE_CDS_BENCH_URL is set
        assert all(s["isRecommended"] is False for s in card.get("suggestions", []))


def test_a_gas_older_than_a_day_is_not_used_and_the_card_says_so(cds: AppMaker, ehr: Ehr) -> None:
    # The fixture also holds a gas from two days before on FiO2 0.40: had it been used, the
    # serial comparison would see an FiO2 step.
    _, answer = call(cds, ehr, "patient-view-hypoventilation")
    card = answer.json()["cards"][0]
    assert "3 value(s) too old (over 24 h" in card["detail"]
    assert "FiO2 0.21" in card["summary"]


def test_the_not_classifiable_card_offers_a_draft_arterial_gas_on_the_stated_fio2(
    cds: AppMaker, ehr: Ehr
) -> None:
    body, answer = call(cds, ehr, "patient-view-not-classifiable")
    card = answer.json()["cards"][0]
    (suggestion,) = card["suggestions"]
    assert card["selectionBehavior"] == "at-most-one"
    (action,) = suggestion["actions"]
    request = action["resource"]
    assert (action["type"], request["resourceType"], request["status"]) == (
        "create",
        "ServiceRequest",
        "draft",
    )
    # LOINC 24336-0 "Gas panel - Arterial blood"
    assert request["code"]["coding"][0] == {
        "system": "http://loinc.org",
        "code": "24336-0",
        "display": "Gas panel - Arterial blood",
    }
    assert request["subject"] == {"reference": f"Patient/{body['context']['patientId']}"}
    assert request["encounter"] == {"reference": f"Encounter/{body['context']['encounterId']}"}
    assert "FiO2 0.21" in request["orderDetail"][0]["text"]


def test_the_hypercapnia_order_card_offers_a_gas_on_the_ordered_fio2(
    cds: AppMaker, ehr: Ehr
) -> None:
    _, answer = call(cds, ehr, "order-select-oxygen-hypercapnia")
    card = answer.json()["cards"][0]
    assert "DeviceRequest/o2-venturi-40" in card["detail"]
    text = card["suggestions"][0]["actions"][0]["resource"]["orderDetail"][0]["text"]
    assert "ordered FiO2 0.40" in text


def test_every_card_carries_the_decision_the_caution_and_override_reasons(
    cds: AppMaker, ehr: Ehr
) -> None:
    _, answer = call(cds, ehr, "patient-view-shunt")
    card = answer.json()["cards"][0]
    decision = card["extension"]["org.oxyrule.assessment"]["decisionId"]
    assert f"decision {decision}" in card["detail"]
    assert {r["code"] for r in card["overrideReasons"]} >= {"already-addressed", "data-wrong"}
    assert card["source"]["topic"]["code"] == "hypoxaemia-mechanism"


def test_the_bench_link_is_added_only_when_a_url_is_set(cds: AppMaker, ehr: Ehr) -> None:
    body = hook_request("patient-view-shunt")
    client = cds(cds_bench_url="https://oxyrule.hospital.test/bench?decision={decision_id}")
    card = check_response(client.post(service_path(body), json=body).json())[0]
    decision = card["extension"]["org.oxyrule.assessment"]["decisionId"]
    assert card["links"] == [
        {
            "label": "Open this assessment on the rule bench",
            "url": f"https://oxyrule.hospital.test/bench?decision={decision}",
            "type": "absolute",
        }
    ]


def test_kpa_sites_read_kpa_on_the_cards(runtime: Any, ehr: Ehr) -> None:
    from service.api import create_app
    from service.config import ServerSettings, Settings
    from service.runtime import Runtime
    from tests.cds.conftest import TestClient

    kpa = Runtime.load(Settings(pressure_unit="kPa"))
    app = create_app(kpa.settings, ServerSettings(cds_allow_unsigned=True), runtime=kpa)
    app.state.service.cds.clock = lambda: NOW
    body = hook_request("patient-view-hypoventilation")
    with TestClient(app) as client:
        card = client.post(service_path(body), json=body).json()["cards"][0]
    # 65 mmHg = 8.67 kPa (1 kPa = 7.50062 mmHg, the conventional factor)
    assert "PaCO2 8.7 kPa" in card["summary"]


# --- the same patient through $assess-hypoxaemia ---------------------------------------------

LUNG_FUNCTION_CODES = {"dlco-percent-predicted", "19911-7", "spo2-exertional-nadir"}


def _bundle_of(body: dict[str, Any], ehr: Ehr) -> dict[str, Any]:
    """The request's data as one Bundle, with the same recency rule the service documents:
    observations of the last 24 h, lung-function tests of the last 365 days."""
    resources: list[dict[str, Any]] = []
    for value in (body.get("prefetch") or {}).values():
        if not isinstance(value, dict):
            continue
        if value["resourceType"] == "Bundle":
            resources += [e["resource"] for e in value.get("entry", [])]
        else:
            resources.append(value)
    if "prefetch" not in body or "next" in json.dumps(body.get("prefetch")):
        resources += ehr.resources
    kept, seen = [], set()
    for r in resources:
        key = (r["resourceType"], r.get("id"))
        if key in seen or r["resourceType"] not in ("Patient", "Observation", "Location"):
            continue
        seen.add(key)
        if r["resourceType"] == "Observation":
            made = NOW.fromisoformat(r["effectiveDateTime"].replace("Z", "+00:00"))
            code = r["code"]["coding"][0]["code"]
            window = timedelta(days=365) if code in LUNG_FUNCTION_CODES else timedelta(hours=24)
            if made < NOW - window:
                continue
        kept.append({"resource": r})
    return {"resourceType": "Bundle", "type": "collection", "entry": kept}


def _grades(result: dict[str, Any]) -> tuple[str, dict[str, str]]:
    parameters = next(
        e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "Parameters"
    )
    pattern = next(p["valueCode"] for p in parameters["parameter"] if p["name"] == "pattern")
    grades = {}
    for p in parameters["parameter"]:
        if p["name"] == "mechanism":
            parts = {q["name"]: q.get("valueCode") for q in p["part"]}
            grades[parts["code"]] = parts["grade"]
    return pattern, grades


TABLE_ROW = re.compile(r"^\| ([^|]+) \| ([a-z-]+) \|", re.M)
NAMES = {
    "Low inspired oxygen": "low-inspired-oxygen",
    "Hypoventilation": "hypoventilation",
    "Diffusion limitation": "diffusion-limitation",
    "V/Q mismatch": "vq-mismatch",
    "Shunt": "shunt",
}


@pytest.mark.parametrize(
    "name", [n for n, (status, cards) in sorted(EXPECTED.items()) if status == 200 and cards]
)
def test_same_grades_as_the_assess_operation(cds: AppMaker, ehr: Ehr, name: str) -> None:
    body, answer = call(cds, ehr, name)
    card = answer.json()["cards"][0]
    client = cds()
    result = client.post(
        "/fhir/$assess-hypoxaemia",
        content=json.dumps(_bundle_of(body, ehr)),
        headers={"Content-Type": "application/fhir+json"},
    )
    assert result.status_code == 200, result.text
    pattern, grades = _grades(result.json())
    stated = card["extension"]["org.oxyrule.assessment"]
    assert (stated["pattern"], stated["mechanisms"]) == (pattern, grades)
    shown = {NAMES[m.strip()]: g for m, g in TABLE_ROW.findall(card["detail"]) if m in NAMES}
    assert shown == grades  # the table a clinician reads says the same


def test_fixtures_are_invented_and_tagged() -> None:
    for path in FIXTURES.glob("*.json"):
        text = path.read_text()
        assert "invented" in text.lower(), path
        data = json.loads(text)
        resources = re.findall(r'"resourceType": "(Patient|Observation)"', text)
        assert resources == [] or text.count('"HTEST"') >= len(resources), path
        assert data.get("extension") or data.get("id") == "invented-ehr-dataset", path
