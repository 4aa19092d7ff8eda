"""Content types of request bodies and the media type of the answer."""

from __future__ import annotations

import pytest

from service.api.errors import ApiError
from service.api.media import BodyKind, answer_type, body_kind


@pytest.mark.parametrize(
    ("content_type", "kind"),
    [
        ("application/fhir+json", BodyKind.BUNDLE),
        ("application/json; charset=utf-8", BodyKind.BUNDLE),
        ('application/fhir+json; fhirVersion="4.3"', BodyKind.BUNDLE),
        ("application/fhir+json; fhirVersion=4.0.1", BodyKind.BUNDLE),
        ("application/fhir+ndjson", BodyKind.NDJSON),
        ("application/ndjson", BodyKind.NDJSON),
    ],
)
def test_body_kind_reads_the_supported_types(content_type: str, kind: BodyKind) -> None:
    assert body_kind(content_type) is kind


@pytest.mark.parametrize(
    "content_type",
    [
        None,
        "",
        "text/json",
        "application/fhir+json; fhirVersion=4.30",
        "application/json; charset=utf-16",
    ],
)
def test_body_kind_refuses_others_with_415(content_type: str | None) -> None:
    with pytest.raises(ApiError) as refused:
        body_kind(content_type)
    assert refused.value.status == 415


def test_format_wins_over_accept_and_plus_may_arrive_as_a_space() -> None:
    assert answer_type(BodyKind.BUNDLE, "application/fhir json", "application/json") == (
        "application/fhir+json"
    )
    assert answer_type(BodyKind.NDJSON, "ndjson", None) == "application/fhir+ndjson"


def test_accept_skips_types_refused_with_q_zero() -> None:
    accept = "application/fhir+json;q=0, application/json"
    assert answer_type(BodyKind.BUNDLE, None, accept) == "application/json"
    with pytest.raises(ApiError) as refused:
        answer_type(BodyKind.BUNDLE, None, "application/fhir+json;q=0")
    assert refused.value.status == 406
