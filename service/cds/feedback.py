"""The feedback endpoint's body (CDS Hooks 2.0, "Feedback"), read and checked.

``{"feedback": [{card, outcome, acceptedSuggestions, overrideReason, outcomeTimestamp}]}``:
``card`` is the ``uuid`` of one of our cards (we issue only UUIDs), ``outcome`` is
``accepted`` (with ``acceptedSuggestions``, each ``{"id": <suggestion uuid>}``) or
``overridden`` (with an optional ``overrideReason``: a ``reason`` Coding and/or a
``userComment``), ``outcomeTimestamp`` an RFC 3339 date-time in UTC.

What is kept: for each item, the outcome and a reason code from a closed set (one of our
override codes, ``other`` for someone else's, ``none``), for the metrics and the log. The
user's comment may hold anything, patient details included: it is checked for type and then
dropped, never logged or stored. At most ``MAX_ITEMS`` items per call.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from service.cds.cards import OVERRIDE_CODES, OVERRIDE_SYSTEM
from service.cds.errors import CdsError, Issue
from service.fhir.shape import json_type

MAX_ITEMS = 100
OUTCOMES = ("accepted", "overridden")


@dataclass(frozen=True, slots=True)
class Feedback:
    """One item, reduced to what may be counted and logged."""

    card: str  # a UUID (ours)
    outcome: str  # accepted | overridden
    reason: str  # one of our override codes, "other", or "none"
    accepted_suggestions: int


def _uuid(value: object) -> bool:
    if not isinstance(value, str):
        return False
    try:
        uuid.UUID(value)
    except ValueError:
        return False
    return True


def _timestamp(value: object) -> bool:
    if not isinstance(value, str) or "T" not in value:
        return False
    try:
        parsed = datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        return False
    return parsed.tzinfo is not None


def _reason(item: dict[str, Any], at: str, issues: list[Issue]) -> str:
    override = item.get("overrideReason")
    if override is None:
        return "none"
    if not isinstance(override, dict):
        issues.append(
            Issue("structure", f"{at}.overrideReason must be an object", f"{at}.overrideReason")
        )
        return "none"
    comment = override.get("userComment")
    if comment is not None and not isinstance(comment, str):
        issues.append(
            Issue(
                "structure",
                f"{at}.overrideReason.userComment must be a string",
                f"{at}.overrideReason.userComment",
            )
        )
    reason = override.get("reason")
    if reason is None:
        return "none"
    if not isinstance(reason, dict) or not all(
        isinstance(reason.get(k), str) and reason[k] for k in ("system", "code")
    ):
        issues.append(
            Issue(
                "structure",
                f"{at}.overrideReason.reason must be a Coding with system and code",
                f"{at}.overrideReason.reason",
            )
        )
        return "none"
    if reason["system"] == OVERRIDE_SYSTEM and reason["code"] in OVERRIDE_CODES:
        return str(reason["code"])
    return "other"


def _item(item: object, at: str, issues: list[Issue]) -> Feedback | None:
    if not isinstance(item, dict):
        issues.append(Issue("structure", f"{at} must be an object, not {json_type(item)}", at))
        return None
    before = len(issues)
    card = item.get("card")
    if not _uuid(card):
        issues.append(Issue("value", f"{at}.card must be the uuid of a card", f"{at}.card"))
    outcome = item.get("outcome")
    if outcome not in OUTCOMES:
        issues.append(
            Issue("code-invalid", f"{at}.outcome must be accepted or overridden", f"{at}.outcome")
        )
    if not _timestamp(item.get("outcomeTimestamp")):
        issues.append(
            Issue(
                "value",
                f"{at}.outcomeTimestamp must be an RFC 3339 date-time",
                f"{at}.outcomeTimestamp",
            )
        )
    accepted = item.get("acceptedSuggestions")
    count = 0
    if outcome == "accepted" or accepted is not None:
        if not isinstance(accepted, list) or (outcome == "accepted" and not accepted):
            issues.append(
                Issue(
                    "required",
                    f"{at}.acceptedSuggestions must list the accepted suggestions",
                    f"{at}.acceptedSuggestions",
                )
            )
        else:
            for i, chosen in enumerate(accepted):
                if not isinstance(chosen, dict) or not isinstance(chosen.get("id"), str):
                    issues.append(
                        Issue(
                            "structure",
                            "each accepted suggestion needs an id",
                            f"{at}.acceptedSuggestions[{i}].id",
                        )
                    )
            count = len(accepted)
    reason = _reason(item, at, issues)
    if len(issues) > before:
        return None
    return Feedback(str(card), str(outcome), reason, count)


def read_feedback(body: object) -> list[Feedback]:
    """The feedback items of ``body`` (parsed JSON).

    Raises:
        CdsError: 400 with every problem located (``feedback[2].outcome``).
    """
    if not isinstance(body, dict) or not isinstance(body.get("feedback"), list):
        raise CdsError.one(400, "structure", 'the body must be {"feedback": [...]}', "feedback")
    items = body["feedback"]
    if not items:
        raise CdsError.one(400, "required", "feedback must list at least one item", "feedback")
    if len(items) > MAX_ITEMS:
        raise CdsError.one(
            400, "too-long", f"at most {MAX_ITEMS} feedback items per call", "feedback"
        )
    issues: list[Issue] = []
    found = [f for i, item in enumerate(items) if (f := _item(item, f"feedback[{i}]", issues))]
    if issues:
        raise CdsError(400, issues)
    return found
