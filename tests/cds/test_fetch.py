"""Prefetch the client did not send, read from its FHIR server over real HTTP, in budget.

The EHR is ``tests/cds/ehr.py`` on a loopback port, serving ``fixtures/cds-hooks/
ehr-server.json`` in pages of four; it answers only to the fixture's access token and records
every request, so the tests see what the service asked for, and with which token.
"""

from __future__ import annotations

import copy
import time
from typing import Any
from urllib.parse import parse_qs

from service.cds.services import PREFETCH
from tests.cds.conftest import AppMaker, hook_request, service_path
from tests.cds.ehr import Ehr
from tests.cds.spec import check_response

TOKEN = "invented-access-token-6c2f1e"


def post(
    cds: AppMaker, ehr: Ehr, body: dict[str, Any], **settings: Any
) -> tuple[int, dict[str, Any]]:
    settings.setdefault("cds_fhir_servers", [ehr.base + "/fhir"])
    answer = cds(**settings).post(service_path(body), json=body)
    return answer.status_code, answer.json()


def searches(ehr: Ehr) -> list[dict[str, list[str]]]:
    return [parse_qs(query) for path, query, _ in ehr.seen if path == "/fhir/Observation"]


def test_without_prefetch_every_key_is_read_with_the_token_page_by_page(
    cds: AppMaker, ehr: Ehr
) -> None:
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    status, answer = post(cds, ehr, body)
    assert status == 200, answer
    (card,) = check_response(answer)
    assert card["summary"].startswith("Hypoxaemia with more than one likely cause")
    paths = [path for path, _, _ in ehr.seen]
    assert "/fhir/Patient/cds-copd-1" in paths
    assert "/fhir/Encounter" in paths
    pages = searches(ehr)
    # bloodGases holds 8 Observations (two gases of four analytes): pages at offsets 0 and 4.
    gas_pages = [q.get("_offset", ["0"])[0] for q in pages if "2703-7" in q["code"][0]]
    assert gas_pages == ["0", "4"]
    assert all(q["_sort"] == ["-date"] for q in pages)
    assert {auth for _, _, auth in ehr.seen} == {f"Bearer {TOKEN}"}
    assert TOKEN not in str(answer)


def test_a_paged_prefetch_is_read_on_from_the_next_link_only(cds: AppMaker, ehr: Ehr) -> None:
    body = hook_request("patient-view-paged-prefetch", ehr.base + "/fhir")
    status, answer = post(cds, ehr, body)
    assert status == 200
    assert answer["cards"][0]["summary"].startswith("Hypoxaemia with more than one likely cause")
    # The client's next link keeps its page size of 3: offsets 3 and 6 (8 gas values in all).
    assert [q["_offset"] for q in searches(ehr)] == [["3"], ["6"]]
    assert [path for path, _, _ in ehr.seen] == ["/fhir/Observation"] * 2


def test_without_server_access_the_first_page_is_used_and_the_card_says_so(
    cds: AppMaker, ehr: Ehr
) -> None:
    body = hook_request("patient-view-paged-prefetch", ehr.base + "/fhir")
    status, answer = post(cds, ehr, body, cds_fhir_servers=[])
    assert status == 200
    assert (
        "blood gases: the client sent one page; the rest could not be read"
        in (answer["cards"][0]["detail"])
    )
    assert ehr.seen == []


def test_a_next_link_to_another_host_is_not_followed(cds: AppMaker, ehr: Ehr) -> None:
    body = hook_request("patient-view-paged-prefetch", ehr.base + "/fhir")
    link = body["prefetch"]["bloodGases"]["link"][1]
    link["url"] = link["url"].replace(ehr.base, "https://elsewhere.invented.test")
    status, answer = post(cds, ehr, body)
    assert status == 200
    assert "a next page outside fhirServer was not followed" in answer["cards"][0]["detail"]
    assert ehr.seen == []


def test_a_fhir_server_not_allowed_is_never_contacted(cds: AppMaker, ehr: Ehr) -> None:
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    status, answer = post(cds, ehr, body, cds_fhir_servers=["https://ehr.other.test/fhir"])
    assert status == 412
    assert "OXYRULE_CDS_FHIR_SERVERS" in answer["issue"][0]["diagnostics"]
    assert ehr.seen == []


def test_a_refused_token_is_a_412_that_does_not_repeat_the_token(cds: AppMaker, ehr: Ehr) -> None:
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    body["fhirAuthorization"]["access_token"] = "invented-wrong-token-0000"
    status, answer = post(cds, ehr, body)
    assert status == 412
    assert {i["expression"][0] for i in answer["issue"]} == {
        "prefetch.bloodGases",
        "prefetch.oximetry",
        "prefetch.oxygenSettings",
    }
    assert "refused the token (401)" in answer["issue"][0]["diagnostics"]
    assert "invented-wrong-token" not in str(answer)


def test_a_null_prefetch_key_means_no_data_and_is_not_read_again(cds: AppMaker, ehr: Ehr) -> None:
    body = hook_request("patient-view-hypoventilation", ehr.base + "/fhir")
    body["fhirServer"] = ehr.base + "/fhir"
    body["fhirAuthorization"] = {"access_token": TOKEN, "token_type": "Bearer"}
    body["prefetch"] = dict.fromkeys(PREFETCH)  # every key: "no data"
    status, answer = post(cds, ehr, body)
    assert (status, answer) == (200, {"cards": []})
    assert ehr.seen == []


def test_an_operation_outcome_for_a_key_is_read_again_when_the_server_allows(
    cds: AppMaker, ehr: Ehr
) -> None:
    body = hook_request("patient-view-prefetch-outcome", ehr.base + "/fhir")
    body["fhirServer"] = ehr.base + "/fhir"
    body["fhirAuthorization"] = {"access_token": TOKEN, "token_type": "Bearer"}
    status, answer = post(cds, ehr, body)
    assert status == 200
    assert answer["cards"][0]["summary"].startswith("Hypoventilation is the likely cause")
    assert [q["code"][0].split(",")[0] for q in searches(ehr)] == ["http://loinc.org|59408-5"]


def test_the_location_of_the_encounter_is_read_when_only_the_encounter_was_sent(
    cds: AppMaker, ehr: Ehr
) -> None:
    body = hook_request("patient-view-altitude", ehr.base + "/fhir")
    entries = body["prefetch"]["encounterLocation"]["entry"]
    location = entries.pop()["resource"]
    ehr.resources.append(location)
    body["fhirServer"] = ehr.base + "/fhir"
    body["fhirAuthorization"] = {"access_token": TOKEN, "token_type": "Bearer"}
    status, answer = post(cds, ehr, body)
    assert status == 200
    assert [path for path, _, _ in ehr.seen] == ["/fhir/Location/invented-mountain-clinic"]
    # Without the Location's 2,500 m the card would not blame the inspired oxygen.
    assert answer["cards"][0]["summary"].startswith("Low inspired oxygen is")


# --- budgets ------------------------------------------------------------------------------


def test_the_page_budget_stops_a_search_and_the_card_says_so(cds: AppMaker, ehr: Ehr) -> None:
    ehr.page_size = 2
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    status, answer = post(cds, ehr, body, cds_fetch_max_pages=2)
    assert status == 200
    detail = answer["cards"][0]["detail"]
    assert "blood gases: more than 2 page(s): the rest was not read" in detail
    assert len([q for q in searches(ehr) if "2703-7" in q["code"][0]]) == 2


def test_the_entry_budget_stops_reading_and_the_card_says_so(cds: AppMaker, ehr: Ehr) -> None:
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    status, answer = post(cds, ehr, body, cds_fetch_max_entries=6)
    assert status == 200
    assert "the entry budget (6) was reached" in answer["cards"][0]["detail"]


def test_a_response_over_the_byte_budget_is_refused(cds: AppMaker, ehr: Ehr) -> None:
    ehr.padding = 20_000
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    status, answer = post(cds, ehr, body, cds_fetch_max_bytes=8192)
    assert status == 412
    assert "larger than 8192 bytes" in answer["issue"][0]["diagnostics"]


def test_a_slow_server_is_given_up_on_within_the_timeout(cds: AppMaker, ehr: Ehr) -> None:
    ehr.delay_s = 1.0
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    started = time.monotonic()
    status, answer = post(cds, ehr, body, cds_fetch_timeout_s=0.2)
    assert status == 412
    assert "did not answer in time" in answer["issue"][0]["diagnostics"]
    assert time.monotonic() - started < 3


def test_all_reads_of_one_call_share_a_deadline(cds: AppMaker, ehr: Ehr) -> None:
    ehr.delay_s = 0.15
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    started = time.monotonic()
    status, answer = post(cds, ehr, body, cds_fetch_timeout_s=2, cds_fetch_deadline_s=0.4)
    assert status == 412
    assert "time budget" in str(answer)
    assert time.monotonic() - started < 2


def test_the_connection_pool_is_bounded_by_its_setting(cds: AppMaker) -> None:
    client = cds(cds_fetch_max_connections=3)
    hooks = client.app.state.service.cds  # type: ignore[attr-defined]
    pool = hooks.http()._transport._pool  # httpx's own pool: where the limit is enforced
    assert pool._max_connections == 3
    assert hooks.http().follow_redirects is False


def test_a_prefetched_resource_counts_once_however_many_keys_hold_it(
    cds: AppMaker, ehr: Ehr
) -> None:
    body = hook_request("patient-view-shunt")
    doubled = copy.deepcopy(body["prefetch"]["bloodGases"])
    body["prefetch"]["oximetry"]["entry"] += doubled["entry"]
    status, answer = post(cds, ehr, body)
    first = post(cds, ehr, hook_request("patient-view-shunt"))[1]
    assert status == 200
    assert answer["cards"][0]["summary"] == first["cards"][0]["summary"]


def test_an_open_fhir_server_is_read_without_a_token(cds: AppMaker, ehr: Ehr) -> None:
    ehr.token = None
    body = hook_request("patient-view-without-prefetch", ehr.base + "/fhir")
    del body["fhirAuthorization"]
    status, answer = post(cds, ehr, body)
    assert status == 200 and answer["cards"]
    assert {auth for _, _, auth in ehr.seen} == {None}
