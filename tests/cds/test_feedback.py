"""Feedback on cards: counted in the metrics, logged without patient data, bad bodies located."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest

from service.cds.cards import OVERRIDE_SYSTEM
from tests.cds.conftest import AppMaker, TestClient

FEEDBACK = "/cds-services/hypoxaemia-mechanism/feedback"
CARD = "4e0a3a1e-3283-4575-ab82-028d55fe2719"
SECRET_COMMENT = "Quillborne bed 7 MRN-58301977 was fine on PaO2 48.0371"


def item(outcome: str, **extra: Any) -> dict[str, Any]:
    return {"card": CARD, "outcome": outcome, "outcomeTimestamp": "2026-11-21T15:02:00Z"} | extra


def test_outcomes_and_reasons_are_counted_and_logged_without_the_comment(
    cds: AppMaker, log_lines: Callable[[], list[str]]
) -> None:
    client: TestClient = cds()
    body = {
        "feedback": [
            item("accepted", acceptedSuggestions=[{"id": "e56e1945-20b3-4393-8503-a1a20fd73152"}]),
            item(
                "overridden",
                overrideReason={
                    "reason": {"system": OVERRIDE_SYSTEM, "code": "data-wrong"},
                    "userComment": SECRET_COMMENT,
                },
            ),
            item(
                "overridden",
                overrideReason={"reason": {"system": "https://ehr.invented.test/r", "code": "x1"}},
            ),
            item("overridden", overrideReason={"userComment": SECRET_COMMENT}),
        ]
    }
    answer = client.post(FEEDBACK, json=body)
    assert (answer.status_code, answer.content) == (200, b"")
    metrics = client.get("/metrics").text
    service = 'service="hypoxaemia-mechanism"'
    for outcome, reason in (
        ("accepted", "none"),
        ("overridden", "data-wrong"),
        ("overridden", "other"),  # someone else's code: counted, never used as a label
        ("overridden", "none"),
    ):
        line = f'oxyrule_cds_feedback_total{{{service},outcome="{outcome}",reason="{reason}"}} 1'
        assert line in metrics
    text = "\n".join(log_lines())
    assert text.count('"message":"cds feedback"') == 4
    assert '"reason":"data-wrong"' in text and '"accepted_suggestions":1' in text
    assert "x1" not in text and "Quillborne" not in text and "MRN-58301977" not in text
    assert "48.0371" not in text and "Quillborne" not in metrics


@pytest.mark.parametrize(
    ("body", "where"),
    [
        ({}, "feedback"),
        ({"feedback": []}, "feedback"),
        ({"feedback": [item("accepted")]}, "feedback[0].acceptedSuggestions"),
        ({"feedback": [item("ignored")]}, "feedback[0].outcome"),
        ({"feedback": [item("overridden", card="not-a-uuid")]}, "feedback[0].card"),
        (
            {"feedback": [item("overridden", outcomeTimestamp="yesterday")]},
            "feedback[0].outcomeTimestamp",
        ),
        (
            {"feedback": [item("overridden", overrideReason={"reason": {"code": "x"}})]},
            "feedback[0].overrideReason.reason",
        ),
        (
            {"feedback": [item("overridden", overrideReason={"userComment": 7})]},
            "feedback[0].overrideReason.userComment",
        ),
        ({"feedback": [item("overridden"), "x"]}, "feedback[1]"),
        ({"feedback": [item("overridden")] * 101}, "feedback"),
    ],
)
def test_a_bad_feedback_body_is_refused_and_located(
    cds: AppMaker, body: dict[str, Any], where: str
) -> None:
    answer = cds().post(FEEDBACK, json=body)
    assert answer.status_code == 400, answer.text
    assert where in [(i.get("expression") or i["location"])[0] for i in answer.json()["issue"]]


def test_feedback_for_an_unknown_service_is_404(cds: AppMaker) -> None:
    answer = cds().post("/cds-services/no-such/feedback", json={"feedback": [item("overridden")]})
    assert answer.status_code == 404
    assert answer.json()["issue"][0]["code"] == "not-found"


def test_a_body_that_is_not_json_is_400_and_another_media_type_415(cds: AppMaker) -> None:
    client = cds()
    answer = client.post(FEEDBACK, content=b"{nope", headers={"Content-Type": "application/json"})
    assert answer.status_code == 400 and answer.json()["issue"][0]["expression"] == ["$"]
    answer = client.post(FEEDBACK, content=b"<x/>", headers={"Content-Type": "application/xml"})
    assert answer.status_code == 415


def test_a_body_over_the_size_limit_is_413_located_at_the_body(cds: AppMaker) -> None:
    answer = cds(max_body_bytes=2048).post(
        "/cds-services/hypoxaemia-mechanism", json={"hook": "patient-view", "x": "y" * 4096}
    )
    assert answer.status_code == 413
    assert answer.json()["issue"][0]["location"] == ["http.Content-Length"]
