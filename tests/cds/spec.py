"""The CDS Hooks 2.0 rules a response must keep, checked field by field.

Each check quotes the HL7 CDS Hooks specification (2.0, "CDS Service Response" and "Use of
JSON"): the tests hold every answer of the service to it, independently of how the cards
were built.
"""

from __future__ import annotations

import re
from typing import Any
from urllib.parse import urlsplit

INDICATORS = ("info", "warning", "critical")  # "in order of increasing urgency"
ACTION_TYPES = ("create", "update", "delete")
SELECTION = ("at-most-one", "any")
LINK_TYPES = ("absolute", "smart")
SENTENCE_BREAK = re.compile(r"[.!?]\s+[A-Z]")


def no_null_or_empty(value: Any, where: str = "$") -> None:
    """ "JSON elements SHALL NOT be null ... SHALL NOT be empty, unless otherwise specified"
    (the cards array may be empty)."""
    assert value is not None, f"{where} is null"
    if isinstance(value, str | list | dict) and where != "$.cards":
        assert len(value) > 0, f"{where} is empty"
    if isinstance(value, dict):
        for key, item in value.items():
            no_null_or_empty(item, f"{where}.{key}")
    elif isinstance(value, list):
        for i, item in enumerate(value):
            no_null_or_empty(item, f"{where}[{i}]")


def _coding(coding: Any, *, display: bool) -> None:
    assert isinstance(coding, dict)
    assert isinstance(coding["code"], str) and isinstance(coding["system"], str)
    if display:  # "REQUIRED for Override Reasons"
        assert isinstance(coding["display"], str) and coding["display"]


def _absolute(url: str) -> None:
    parts = urlsplit(url)
    assert parts.scheme in ("http", "https") and parts.netloc, url


def check_card(card: dict[str, Any]) -> None:
    """One card against "Card Attributes"."""
    summary = card["summary"]  # REQUIRED
    assert isinstance(summary, str)
    assert len(summary) < 140, f"summary of {len(summary)} characters: {summary}"
    assert not SENTENCE_BREAK.search(summary), f"more than one sentence: {summary}"
    assert card["indicator"] in INDICATORS  # REQUIRED
    source = card["source"]  # REQUIRED
    assert isinstance(source["label"], str) and source["label"]
    if "url" in source:
        _absolute(source["url"])
    if "topic" in source:
        _coding(source["topic"], display=False)
    if "detail" in card:
        assert isinstance(card["detail"], str)
    if "uuid" in card:
        assert isinstance(card["uuid"], str)
    suggestions = card.get("suggestions")
    if suggestions is not None:
        # "If suggestions are present, selectionBehavior MUST also be provided."
        assert card["selectionBehavior"] in SELECTION
        for suggestion in suggestions:
            assert isinstance(suggestion["label"], str) and suggestion["label"]
            assert isinstance(suggestion.get("isRecommended", False), bool)
            for action in suggestion.get("actions", []):
                assert action["type"] in ACTION_TYPES
                assert isinstance(action["description"], str) and action["description"]
                if action["type"] in ("create", "update"):
                    assert isinstance(action["resource"]["resourceType"], str)
    for reason in card.get("overrideReasons", []):
        _coding(reason, display=True)
    for link in card.get("links", []):
        assert isinstance(link["label"], str) and link["label"]
        _absolute(link["url"])
        assert link["type"] in LINK_TYPES
        if link["type"] == "absolute":
            assert "appContext" not in link  # "only ... if the link type is smart"


def check_response(body: Any) -> list[dict[str, Any]]:
    """A service response against "HTTP Response"; returns its cards."""
    assert isinstance(body, dict)
    assert isinstance(body["cards"], list)  # REQUIRED
    assert set(body) <= {"cards", "systemActions"}
    no_null_or_empty(body)
    for card in body["cards"]:
        check_card(card)
    cards: list[dict[str, Any]] = body["cards"]
    return cards


def check_discovery(body: Any) -> None:
    """The discovery response against "Discovery" ("Each CDS Service SHALL be described")."""
    assert isinstance(body["services"], list)
    no_null_or_empty(body)
    for service in body["services"]:
        for required in ("hook", "description", "id"):
            assert isinstance(service[required], str) and service[required]
        assert isinstance(service.get("title", ""), str)
        prefetch = service.get("prefetch", {})
        assert all(isinstance(k, str) and isinstance(v, str) for k, v in prefetch.items())
