"""The reader's plain paths change nothing but speed.

``read_bundle`` offers each entry, each Observation and each subject reference to a plain path
that checks the usual shape with cheap type tests and declines anything else before recording
anything; the thorough reader then reads that part from the start. These tests read the same
input twice, once with every plain path declining, and require the same answer: the same
Intake (measurements, times and their offsets, issues in order) or the same problems.
"""

from __future__ import annotations

import copy
import json
import re
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime, timedelta, timezone
from typing import Any
from unittest.mock import patch

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.fhir import codes as fhir_codes
from service.fhir import extract
from service.fhir.concept_map import read_concept_map
from service.fhir.dates import parse_date_time
from service.fhir.extract import read_bundle
from service.fhir.observation import ObservationReader
from service.fhir.outcome import BundleError
from service.fhir.references import BundleIndex, type_and_id
from service.terminology import codes

from .builders import ROOT, Json, bundle, fixture, fixture_names, observation, patient, quantity
from .test_extract_fuzz import JSON, _paths

FUZZ = settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
LOCAL = read_concept_map(fixture("local-codes.conceptmap.json"))
DEMO = ROOT / "fixtures" / "demo"


@contextmanager
def thorough_only() -> Iterator[None]:
    """Every plain path declines, as it does for input it is not sure of."""
    with (
        patch.object(ObservationReader, "plain", lambda self, *args: None),
        patch.object(extract, "_plain_entry", lambda *args: None),
        patch.object(extract._Subjects, "plain_reference", staticmethod(lambda resource: None)),
    ):
        yield


def answer(data: object) -> object:
    """What read_bundle says about ``data``, in a form that compares every detail."""
    try:
        intake = read_bundle(copy.deepcopy(data), concept_map=LOCAL)
    except BundleError as exc:
        return type(exc).__name__, exc.problems
    measurements = [
        (m, type(m.value), None if m.time is None else m.time.utcoffset())
        for m in intake.measurements
    ]
    return intake.patient, measurements, intake.issues


def assert_same_answer(data: object) -> None:
    plain = answer(data)
    with thorough_only():
        thorough = answer(data)
    assert plain == thorough


def demo(name: str) -> Json:
    """A demo Bundle from ``fixtures/demo`` (a fresh copy)."""
    data: Json = json.loads((DEMO / name).read_text(encoding="utf-8"))
    return data


DEMOS = sorted(p.name for p in DEMO.glob("*.bundle.json"))
assert DEMOS, f"no demo Bundles in {DEMO}"


@pytest.mark.parametrize("name", fixture_names())
def test_intake_fixture_reads_the_same(name: str) -> None:
    assert_same_answer(fixture(name))


@pytest.mark.parametrize("name", DEMOS)
def test_demo_bundle_reads_the_same(name: str) -> None:
    assert_same_answer(demo(name))


@pytest.mark.parametrize("name", DEMOS)
def test_demo_bundle_is_read_on_the_plain_path(name: str) -> None:
    # Not behaviour but speed: were the plain path to decline these, nothing would fail
    # but the benchmark (python -m tests.benchmarks.stages).
    def refuse(*args: Any) -> None:
        raise AssertionError("the thorough reader was used")

    with (
        patch.object(ObservationReader, "thorough", refuse),
        patch.object(extract, "_entry", refuse),
        patch.object(extract._Subjects, "_reference", refuse),
    ):
        read_bundle(demo(name))


# Small departures from the plain shape, each on its own: every one must give the same answer.
R = ["entry", 0, "resource"]
Q = [*R, "valueQuantity"]
EDITS: list[tuple[list[Any], object]] = [
    ([*R, "status"], "preliminary"),
    ([*R, "status"], "entered-in-error"),
    ([*R, "status"], "unknown"),
    ([*R, "status"], "bogus"),
    ([*R, "status"], " "),
    ([*R, "status"], None),
    ([*R, "code"], {"coding": [{"system": codes.LOINC, "code": "8867-4"}]}),
    ([*R, "code"], {"coding": [{"code": "2703-7"}]}),
    ([*R, "code"], {"coding": [{"system": codes.LOINC, "code": " "}]}),
    ([*R, "code"], {"text": "PaO2"}),
    ([*R, "code"], {"coding": [{"system": codes.LOINC, "code": "2708-6"}]}),
    (
        [*R, "code"],
        {"coding": [{"system": codes.LOINC, "code": "2708-6"}, {"system": "x", "code": "y"}]},
    ),
    (
        [*R, "code"],
        {"coding": [{"system": "https://example.org/lab/analyser-codes", "code": "PO2-A"}]},
    ),
    ([*R, "code"], {"coding": [{"system": codes.LOINC, "code": "11556-8"}]}),
    ([*R, "code"], {"coding": [{"system": codes.LOINC, "code": "3150-0"}]}),
    ([*R, "code"], {"coding": [{"system": codes.LOINC, "code": "107117-4"}]}),
    ([*R, "code"], {"coding": [{"system": codes.LOINC, "code": "19911-7"}]}),
    ([*R, "meta"], {"profile": [fhir_codes.US_CORE_PULSE_OXIMETRY]}),
    ([*R, "meta"], {"profile": "x"}),
    ([*R, "meta"], {"profile": None}),
    ([*R, "meta"], None),
    ([*R, "meta"], []),
    ([*R, "effectiveDateTime"], "2026-01-05"),
    ([*R, "effectiveDateTime"], "2026-01-05T10:00:00"),
    ([*R, "effectiveDateTime"], "2026-01-05T10:00:00+14:60"),
    ([*R, "effectiveDateTime"], "2026-01-05T24:00:00Z"),
    ([*R, "effectiveDateTime"], "2026-01-05T10:00:00.123456789-03:30"),
    ([*R, "effectiveDateTime"], "2026-01-05T10:00Z"),
    ([*R, "effectiveDateTime"], 20260105),
    ([*R, "effectiveInstant"], "2026-01-05T10:00:00Z"),
    ([*R, "issued"], "2026-01-05T10:20:00Z"),
    ([*R, "valueString"], "80"),
    ([*R, "valueBoolean"], True),
    ([*R, "valueFoo"], 1),
    ([*R, "dataAbsentReason"], {"text": "x"}),
    ([*R, "component"], []),
    ([*R, "specimen"], {"reference": "Specimen/none"}),
    ([*R, "subject"], {"reference": "Patient/pt-2"}),
    ([*R, "subject"], {"reference": "Group/g1"}),
    ([*R, "subject"], {"reference": " "}),
    ([*R, "subject"], {"display": "someone"}),
    ([*R, "subject"], None),
    ([*R, "subject"], "Patient/pt-1"),
    ([*R, "id"], "has space"),
    ([*R, "id"], None),
    ([*R, "id"], 7),
    ([*R, "resourceType"], " "),
    ([*R, "resourceType"], "Encounter"),
    (["entry", 0, "fullUrl"], None),
    (["entry", 0, "fullUrl"], ""),
    (["entry", 0, "fullUrl"], "urn:uuid:0b7c1d4e-0000-4000-8000-000000000001"),
    (Q, {"value": 80}),
    (Q, quantity(80, "kPa")),
    (Q, quantity(10.6, "kPa")),
    (Q, quantity(80, "mmHg")),
    (Q, quantity(80, "mg")),
    (Q, quantity(-5, "mm[Hg]")),
    (Q, quantity(80.0, "mm[Hg]")),
    (Q, quantity(10**400, "mm[Hg]")),
    (Q, quantity(float("nan"), "mm[Hg]")),
    (Q, quantity(float("inf"), "mm[Hg]")),
    (Q, quantity(True, "mm[Hg]")),
    (Q, quantity("80", "mm[Hg]")),
    (Q, {"value": 80, "unit": "kPa"}),
    (Q, {"value": 80, "code": "mm[Hg]", "system": "http://example.org/u"}),
    (Q, {"value": 80, "code": "mm[Hg]", "system": None}),
    (Q, {"value": 80, "code": "mm[Hg]", "unit": " "}),
    (Q, {"value": 80, "code": "mm[Hg]", "unit": None}),
    (Q, {"value": 80, "code": "mm[Hg]", "comparator": ">"}),
    (Q, {"value": 80, "code": " "}),
    (Q, 80),
]


@pytest.mark.parametrize(("path", "value"), EDITS, ids=[f"{p[-1]}={v!r}"[:60] for p, v in EDITS])
def test_a_departure_from_the_plain_shape_reads_the_same(path: list[Any], value: object) -> None:
    data = bundle(observation("2703-7", 80, "mm[Hg]", oid="pao2"), patient())
    node: Any = data
    for part in path[:-1]:
        node = node[part]
    node[path[-1]] = value
    if path[-1] in ("effectiveInstant", "issued"):
        del data["entry"][0]["resource"]["effectiveDateTime"]
    assert_same_answer(data)


def test_fio2_forms_read_the_same() -> None:
    forms = [(21, "%"), (0.21, "1"), (0.21, "%"), (21, "1"), (1.4, "1"), (0, "%"), (50, "%")]
    for n, (value, unit) in enumerate(forms):
        for loinc in ("3150-0", "19994-3"):
            assert_same_answer(bundle(observation(loinc, value, unit, oid=f"f{n}")))


@FUZZ
@given(st.sampled_from(fixture_names() + DEMOS), st.data())
def test_fixture_with_one_element_replaced_reads_the_same(name: str, data: st.DataObject) -> None:
    original = demo(name) if name in DEMOS else fixture(name)
    path = data.draw(st.sampled_from([p for p in _paths(original) if p]))
    mutated = copy.deepcopy(original)
    node: Any = mutated
    for part in path[:-1]:
        node = node[part]
    node[path[-1]] = data.draw(JSON)
    assert_same_answer(mutated)


# --- The pieces the plain paths lean on --------------------------------------------------------

_OLD_PATTERN = re.compile(
    r"(?P<year>\d{4})(?:-(?P<month>\d{2})(?:-(?P<day>\d{2})"
    r"(?:T(?P<hour>\d{2}):(?P<minute>\d{2}):(?P<second>\d{2})(?:\.(?P<fraction>\d{1,9}))?"
    r"(?P<zone>Z|[+-]\d{2}:\d{2}))?)?)?",
    re.ASCII,
)


def _by_fields(text: str) -> datetime | str:
    """The dateTime as the groups of the FHIR pattern give it (or the error), for comparison."""
    match = _OLD_PATTERN.fullmatch(text)
    if match is None or match["hour"] is None:
        return "not a FHIR dateTime"
    zone = match["zone"]
    if zone == "Z":
        tz = UTC
    else:
        hours, minutes = int(zone[1:3]), int(zone[4:6])
        if hours > 14 or minutes > 59:
            return "time-zone offset out of range"
        sign = -1 if zone[0] == "-" else 1
        tz = timezone(sign * timedelta(hours=hours, minutes=minutes))
    try:
        return datetime(
            int(match["year"]),
            int(match["month"]),
            int(match["day"]),
            int(match["hour"]),
            int(match["minute"]),
            int(match["second"]),
            int((match["fraction"] or "").ljust(6, "0")[:6]),
            tzinfo=tz,
        )
    except ValueError as exc:
        return str(exc)


TIMES = st.builds(
    "{}-{}-{}T{}:{}:{}{}{}".format,
    st.text("0123456789", min_size=4, max_size=4),
    st.sampled_from(["00", "01", "02", "09", "10", "12", "13", "99"]),
    st.sampled_from(["00", "01", "28", "29", "30", "31", "32"]),
    st.sampled_from(["00", "09", "23", "24", "99"]),
    st.sampled_from(["00", "30", "59", "60"]),
    st.sampled_from(["00", "30", "59", "60", "61"]),
    st.sampled_from(["", ".5", ".123", ".123456", ".1234567", ".123456789", ".0000000001"]),
    st.sampled_from(["Z", "+00:00", "-00:00", "+05:30", "-14:00", "+14:59", "+15:00", "+03:60"]),
)


@FUZZ
@given(TIMES)
def test_date_time_reads_as_its_fields_say(text: str) -> None:
    expected = _by_fields(text)
    try:
        when = parse_date_time(text)
    except ValueError as exc:
        assert isinstance(expected, str) and str(exc).startswith(expected)
    else:
        assert when.precise and when.value == expected
        assert when.value.utcoffset() == expected.utcoffset()  # type: ignore[union-attr]


_OLD_TYPE_ID = re.compile(r"(?:^|/)([A-Z][A-Za-z]+)/([A-Za-z0-9\-.]{1,64})(?:/_history/[^/]+)?$")
REFERENCES = st.lists(
    st.sampled_from(["/", "Patient", "Specimen", "p1", "_history", "2", "urn:uuid:", "#", "\n"]),
    max_size=7,
).map("".join)


@FUZZ
@given(REFERENCES)
def test_type_and_id_matches_the_pattern(reference: str) -> None:
    match = _OLD_TYPE_ID.search(reference)
    expected = None if match is None else f"{match.group(1)}/{match.group(2)}"
    assert type_and_id(reference) == expected


ENTRIES = st.lists(
    st.tuples(
        st.sampled_from(["Patient", "Specimen", "Location"]),
        st.sampled_from(["a", "b", "c", None]),
        st.sampled_from([None, "urn:uuid:1", "https://x.org/Patient/a", "Specimen/b", "x/c"]),
    ),
    max_size=6,
)


@FUZZ
@given(ENTRIES, st.lists(REFERENCES | st.sampled_from(["Patient/a", "Specimen/b", "urn:uuid:1"])))
def test_bundle_index_resolves_as_the_first_matching_entry(
    entries: list[tuple[str, str | None, str | None]], references: list[str]
) -> None:
    index = BundleIndex()
    # The rule written out plainly: by fullUrl first, then the first entry whose own Type/id
    # or whose fullUrl's Type/id is the reference's.
    by_url: dict[str, int] = {}
    by_type_id: dict[str, int] = {}
    for n, (kind, rid, url) in enumerate(entries):
        resource: Json = {"resourceType": kind}
        if rid is not None:
            resource["id"] = rid
        index.add(n, resource, url)
        if url is not None:
            by_url.setdefault(url, n)
            if (key := type_and_id(url)) is not None:
                by_type_id.setdefault(key, n)
        if rid is not None:
            by_type_id.setdefault(f"{kind}/{rid}", n)
    for reference in references:
        key = type_and_id(reference)
        expected = by_url.get(reference, None if key is None else by_type_id.get(key))
        assert index.resolve(reference) == expected
