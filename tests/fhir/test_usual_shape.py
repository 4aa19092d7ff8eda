"""One reader, every input read once: the usual shape costs no FHIRPath, anything else is
located.

``read_bundle`` reads each element where the reading order puts it: a ``type()`` test of the
usual shape first, and only when it fails a located reading that says what is wrong and
where. These tests take the input cases of the two readers it replaced (a "plain" and a
"thorough" one, compared with each other) and check each against its expected outcome: the
values read and the issues, or the problems, each with its FHIRPath. The rules behind the
outcomes are FHIR R4's (Observation: ``status`` has a required binding, one ``value[x]``, one
``effective[x]``; datatypes: a ``dateTime`` with a time has a zone, a ``string`` is not blank;
Quantity qty-3: a code has a system) and the unit conversion is NIST SP 811 (2008), Appendix
B.9: 1 mmHg = 133.322 387 415 Pa (the service takes UCUM's mm[Hg], the same to 1e-5).
"""

from __future__ import annotations

import copy
import json
import re
from datetime import UTC, datetime, timedelta, timezone
from typing import Any
from unittest.mock import patch

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.fhir import codes as fhir_codes
from service.fhir import extract, values
from service.fhir import observation as observation_module
from service.fhir.concept_map import read_concept_map
from service.fhir.dates import parse_date_time
from service.fhir.extract import read_bundle
from service.fhir.outcome import BundleError, NotABundleError
from service.fhir.references import BundleIndex, type_and_id
from service.intake.model import Intake
from service.terminology import codes

from .builders import (
    ROOT,
    Json,
    bundle,
    fixture,
    fixture_names,
    observation,
    patient,
    quantity,
    tagged,
)
from .test_extract_fuzz import JSON, _paths

FUZZ = settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
LOCAL = read_concept_map(fixture("local-codes.conceptmap.json"))
DEMO = ROOT / "fixtures" / "demo"
MMHG_PA = 133.322387415  # NIST SP 811 (2008), Appendix B.9 (UCUM rounds it: 1e-5 apart)
R = "Bundle.entry[0].resource"


def answer(data: object) -> tuple[str, list[Any], list[Any]]:
    """What read_bundle says about ``data``: ("reads", values, issues) with each issue as
    (code, severity, FHIRPath), or ("refused", problems, []) with each as (code, FHIRPath)."""
    try:
        intake = read_bundle(copy.deepcopy(data), concept_map=LOCAL)
    except BundleError as exc:
        return "refused", [(p.code, p.expression) for p in exc.problems], []
    found = [(m.quantity.value, m.value) for m in intake.measurements]
    return "reads", found, [(i.code, i.severity.value, i.expression) for i in intake.issues]


def demo(name: str) -> Json:
    """A demo Bundle from ``fixtures/demo`` (a fresh copy)."""
    data: Json = json.loads((DEMO / name).read_text(encoding="utf-8"))
    return data


DEMOS = sorted(p.name for p in DEMO.glob("*.bundle.json"))
assert DEMOS, f"no demo Bundles in {DEMO}"


def _selects(data: object, expression: str) -> bool:
    """Whether a FHIRPath of names and indices (``Bundle.entry[0].resource.code``) selects an
    element of ``data`` (FHIRPath, N1: a path to an absent element selects nothing)."""
    parts = re.findall(r"\.([A-Za-z]+)|\[(\d+)\]", expression.removeprefix("Bundle"))
    if "".join(f".{n}" if n else f"[{i}]" for n, i in parts) != expression.removeprefix("Bundle"):
        return False
    node: Any = data
    for name, index in parts:
        if name:
            if not isinstance(node, dict) or name not in node:
                return False
            node = node[name]
        else:
            if not isinstance(node, list) or int(index) >= len(node):
                return False
            node = node[int(index)]
    return True


def assert_located(data: object) -> None:
    """Every problem and every issue of ``data`` names an element that is in it."""
    try:
        intake = read_bundle(copy.deepcopy(data), concept_map=LOCAL)
    except NotABundleError as exc:
        # Not a Bundle: located at the resource sent, or nowhere (FHIRPath names nothing else).
        sent = data.get("resourceType") if isinstance(data, dict) else None
        assert all(p.expression in ("", sent) for p in exc.problems)
        return
    except BundleError as exc:
        where = [p.expression for p in exc.problems]
    else:
        assert isinstance(intake, Intake)
        where = [i.expression for i in intake.issues]
    for expression in where:
        assert expression == "Bundle" or _selects(data, expression), expression


@pytest.mark.parametrize("name", fixture_names())
def test_intake_fixture_locates_what_it_reports(name: str) -> None:
    assert_located(fixture(name))


@pytest.mark.parametrize("name", DEMOS)
def test_demo_bundle_reads_cleanly(name: str) -> None:
    status, found, issues = answer(demo(name))
    assert status == "reads" and found
    assert all(severity != "error" for _, severity, _ in issues)


@pytest.mark.parametrize("name", DEMOS)
def test_demo_bundle_is_read_in_its_usual_shape(name: str) -> None:
    # Not behaviour but speed: were the usual-shape tests to fail on these, nothing would
    # fail but the benchmark (python -m tests.benchmarks.stages).
    def refuse(*args: Any, **kwargs: Any) -> None:
        raise AssertionError("a located reading was used")

    with (
        patch.object(extract, "_located_entry", refuse),
        patch.object(values, "_located_quantity", refuse),
        patch.object(observation_module, "member_object", refuse),
        patch.object(observation_module, "effective_time", refuse),
        patch.object(observation_module.ObservationReader, "_status_allows_use", refuse),
    ):
        read_bundle(demo(name))


# Small departures from the usual shape of one PaO2 Observation (80 mm[Hg]), each on its own,
# with what the reader must say. A ("reads", values, issues) or ("refused", problems, []).
PAO2 = [("arterial_po2", 80.0)]
READS: tuple[str, list[Any], list[Any]] = ("reads", PAO2, [])
Q = f"{R}.valueQuantity"
SPO2 = {"coding": [{"system": codes.LOINC, "code": "2708-6"}]}
BLD = {"coding": [{"system": codes.LOINC, "code": "11556-8"}]}


def refused(*problems: tuple[str, str]) -> tuple[str, list[Any], list[Any]]:
    return "refused", list(problems), []


def ignored(
    severity: str, where: str, *before: tuple[str, str, str]
) -> tuple[str, list[Any], list[Any]]:
    return "reads", [], [*before, ("observation-ignored", severity, where)]


EDITS: list[tuple[str, object, object]] = [
    # status: a required binding; only a result that stands is used.
    ("status", "preliminary", READS),
    ("status", "entered-in-error", ignored("information", f"{R}.status")),
    ("status", "unknown", ignored("warning", f"{R}.status")),
    ("status", "bogus", refused(("code-invalid", f"{R}.status"))),
    ("status", " ", refused(("value", f"{R}.status"))),
    ("status", None, refused(("structure", f"{R}.status"))),
    # code: a coding without a system, or a code the service does not read, is ignored.
    (
        "code",
        {"coding": [{"system": codes.LOINC, "code": "8867-4"}]},
        ignored("information", f"{R}.code"),
    ),
    ("code", {"coding": [{"code": "2703-7"}]}, ignored("information", f"{R}.code")),
    (
        "code",
        {"coding": [{"system": codes.LOINC, "code": " "}]},
        refused(("value", f"{R}.code.coding[0].code")),
    ),
    ("code", {"text": "PaO2"}, ignored("information", f"{R}.code")),
    # SpO2 takes %, not mm[Hg]: the unit is refused where it is.
    ("code", SPO2, refused(("value", f"{Q}.code"))),
    (
        "code",
        {"coding": [*SPO2["coding"], {"system": "x", "code": "y"}]},
        refused(("value", f"{Q}.code")),
    ),
    (
        "code",
        {"coding": [{"system": "https://example.org/lab/analyser-codes", "code": "PO2-A"}]},
        READS,
    ),
    # PO2 in blood of unstated type: read, and the specimen is said to be unknown.
    ("code", BLD, ("reads", PAO2, [("specimen-unknown", "warning", R)])),
    (
        "code",
        {"coding": [{"system": codes.LOINC, "code": "3150-0"}]},
        refused(("value", f"{Q}.code")),
    ),
    # The oxygen device is coded: a valueQuantity is not read for it.
    ("code", {"coding": [{"system": codes.LOINC, "code": "107117-4"}]}, ignored("warning", Q)),
    (
        "code",
        {"coding": [{"system": codes.LOINC, "code": "19911-7"}]},
        refused(("value", f"{Q}.code")),
    ),
    ("meta", {"profile": [fhir_codes.US_CORE_PULSE_OXIMETRY]}, READS),
    ("meta", {"profile": "x"}, refused(("structure", f"{R}.meta.profile"))),
    ("meta", {"profile": None}, refused(("structure", f"{R}.meta.profile"))),
    ("meta", None, refused(("structure", f"{R}.meta"))),
    ("meta", [], refused(("structure", f"{R}.meta"))),
    # dateTime: a date alone is imprecise; a time needs a zone and must exist.
    (
        "effectiveDateTime",
        "2026-01-05",
        ("reads", PAO2, [("time-imprecise", "warning", f"{R}.effectiveDateTime")]),
    ),
    ("effectiveDateTime", "2026-01-05T10:00:00", refused(("value", f"{R}.effectiveDateTime"))),
    (
        "effectiveDateTime",
        "2026-01-05T10:00:00+14:60",
        refused(("value", f"{R}.effectiveDateTime")),
    ),
    ("effectiveDateTime", "2026-01-05T24:00:00Z", refused(("value", f"{R}.effectiveDateTime"))),
    ("effectiveDateTime", "2026-01-05T10:00:00.123456789-03:30", READS),
    ("effectiveDateTime", "2026-01-05T10:00Z", refused(("value", f"{R}.effectiveDateTime"))),
    ("effectiveDateTime", 20260105, refused(("structure", f"{R}.effectiveDateTime"))),
    ("effectiveInstant", "2026-01-05T10:00:00Z", READS),
    (
        "issued",
        "2026-01-05T10:20:00Z",
        ("reads", PAO2, [("time-from-issued", "information", f"{R}.issued")]),
    ),
    # One value[x] only.
    ("valueString", "80", refused(("structure", R))),
    ("valueBoolean", True, refused(("structure", R))),
    ("valueFoo", 1, refused(("structure", R))),
    ("dataAbsentReason", {"text": "x"}, READS),
    ("component", [], READS),
    ("specimen", {"reference": "Specimen/none"}, READS),
    # subject: one patient per Bundle; another kind of subject says nothing about the patient.
    ("subject", {"reference": "Patient/pt-2"}, refused(("invalid", "Bundle.entry[1].resource"))),
    ("subject", {"reference": "Group/g1"}, READS),
    ("subject", {"reference": " "}, refused(("value", f"{R}.subject.reference"))),
    ("subject", {"display": "someone"}, READS),
    ("subject", None, refused(("structure", f"{R}.subject"))),
    ("subject", "Patient/pt-1", refused(("structure", f"{R}.subject"))),
    ("id", "has space", refused(("value", f"{R}.id"))),
    ("id", None, refused(("structure", f"{R}.id"))),
    ("id", 7, refused(("structure", f"{R}.id"))),
    ("resourceType", " ", refused(("value", f"{R}.resourceType"))),
    ("resourceType", "Encounter", ("reads", [], [("resource-ignored", "information", R)])),
    ("fullUrl", None, refused(("structure", "Bundle.entry[0].fullUrl"))),
    ("fullUrl", "", refused(("value", "Bundle.entry[0].fullUrl"))),
    ("fullUrl", "urn:uuid:0b7c1d4e-0000-4000-8000-000000000001", READS),
    # valueQuantity: a unit is required; UCUM codes are read, other spellings said so.
    ("valueQuantity", {"value": 80}, refused(("required", Q))),
    (
        "valueQuantity",
        quantity(80, "kPa"),
        ("reads", [("arterial_po2", 80_000 / MMHG_PA)], [("unit-converted", "information", Q)]),
    ),
    (
        "valueQuantity",
        quantity(10.6, "kPa"),
        ("reads", [("arterial_po2", 10_600 / MMHG_PA)], [("unit-converted", "information", Q)]),
    ),
    (
        "valueQuantity",
        quantity(80, "mmHg"),
        ("reads", PAO2, [("unit-not-ucum", "warning", f"{Q}.code")]),
    ),
    ("valueQuantity", quantity(80, "mg"), refused(("value", f"{Q}.code"))),
    (
        "valueQuantity",
        quantity(-5, "mm[Hg]"),
        ("reads", [], [("value-out-of-range", "error", f"{Q}.value")]),
    ),
    ("valueQuantity", quantity(80.0, "mm[Hg]"), READS),
    ("valueQuantity", quantity(10**400, "mm[Hg]"), refused(("value", f"{Q}.value"))),
    ("valueQuantity", quantity(float("nan"), "mm[Hg]"), refused(("value", f"{Q}.value"))),
    ("valueQuantity", quantity(float("inf"), "mm[Hg]"), refused(("value", f"{Q}.value"))),
    ("valueQuantity", quantity(True, "mm[Hg]"), refused(("structure", f"{Q}.value"))),
    ("valueQuantity", quantity("80", "mm[Hg]"), refused(("structure", f"{Q}.value"))),
    (
        "valueQuantity",
        {"value": 80, "unit": "kPa"},
        (
            "reads",
            [("arterial_po2", 80_000 / MMHG_PA)],
            [("unit-not-ucum", "warning", f"{Q}.unit"), ("unit-converted", "information", Q)],
        ),
    ),
    (
        "valueQuantity",
        {"value": 80, "code": "mm[Hg]", "system": "http://example.org/u"},
        refused(("value", f"{Q}.system")),
    ),
    (
        "valueQuantity",
        {"value": 80, "code": "mm[Hg]", "system": None},
        refused(("structure", f"{Q}.system")),
    ),
    (
        "valueQuantity",
        {"value": 80, "code": "mm[Hg]", "unit": " "},
        refused(("value", f"{Q}.unit")),
    ),
    (
        "valueQuantity",
        {"value": 80, "code": "mm[Hg]", "unit": None},
        refused(("structure", f"{Q}.unit")),
    ),
    (
        "valueQuantity",
        {"value": 80, "code": "mm[Hg]", "comparator": ">"},
        ignored("warning", f"{Q}.comparator", ("unit-not-ucum", "warning", f"{Q}.code")),
    ),
    ("valueQuantity", {"value": 80, "code": " "}, refused(("value", f"{Q}.code"), ("required", Q))),
    ("valueQuantity", 80, refused(("structure", Q))),
]
ENTRY_ELEMENTS = ("fullUrl",)


@pytest.mark.parametrize(
    ("element", "value", "expected"), EDITS, ids=[f"{e}={v!r}"[:60] for e, v, _ in EDITS]
)
def test_a_departure_from_the_usual_shape_reads_as_expected(
    element: str, value: object, expected: tuple[str, list[Any], list[Any]]
) -> None:
    data = bundle(observation("2703-7", 80, "mm[Hg]", oid="pao2"), patient())
    holder = data["entry"][0] if element in ENTRY_ELEMENTS else data["entry"][0]["resource"]
    holder[element] = value
    if element in ("effectiveInstant", "issued"):
        del data["entry"][0]["resource"]["effectiveDateTime"]
    status, found, issues = answer(data)
    assert (status, issues) == (expected[0], expected[2])
    if status == "reads":
        assert [q for q, _ in found] == [q for q, _ in expected[1]]
        assert [v for _, v in found] == pytest.approx([v for _, v in expected[1]], rel=1e-5)
    else:
        assert found == expected[1]
    assert_located(data)


# A Patient's birthDate (FHIR date: YYYY, YYYY-MM or YYYY-MM-DD) and gender (required binding
# AdministrativeGender: male, female, other, unknown).
P = "Bundle.entry[0].resource"
PATIENT_EDITS: list[tuple[str, object, object]] = [
    ("birthDate", "1961-04-12", ("reads", [], [])),
    ("birthDate", "1961-04", ("reads", [], [("time-imprecise", "warning", f"{P}.birthDate")])),
    ("birthDate", " ", refused(("value", f"{P}.birthDate"))),
    ("birthDate", 19610412, refused(("structure", f"{P}.birthDate"))),
    ("birthDate", None, refused(("structure", f"{P}.birthDate"))),
    ("birthDate", "12/04/1961", refused(("value", f"{P}.birthDate"))),
    ("gender", "other", ("reads", [], [])),
    ("gender", "F", refused(("code-invalid", f"{P}.gender"))),
    ("gender", " ", refused(("value", f"{P}.gender"))),
    ("gender", 1, refused(("structure", f"{P}.gender"))),
    ("gender", None, refused(("structure", f"{P}.gender"))),
]


@pytest.mark.parametrize(
    ("element", "value", "expected"),
    PATIENT_EDITS,
    ids=[f"{e}={v!r}" for e, v, _ in PATIENT_EDITS],
)
def test_a_patient_reads_as_expected(element: str, value: object, expected: object) -> None:
    resource = patient()
    resource[element] = value
    data = bundle(resource)
    assert answer(data) == expected
    assert_located(data)


# Location.position.altitude: metres (FHIR R4 Location), a decimal; possible from -500 m (below
# the Dead Sea shore, -430 m) to 9,000 m (above Everest, 8,849 m): common practice, the
# service's bounds.
A = "Bundle.entry[0].resource.position"
LOCATION_EDITS: list[tuple[object, object]] = [
    ({"altitude": 2500}, ("reads", [("altitude", 2500.0)], [])),
    ({"altitude": 2500.5}, ("reads", [("altitude", 2500.5)], [])),
    ({"altitude": -500}, ("reads", [("altitude", -500.0)], [])),
    ({"altitude": 9000}, ("reads", [("altitude", 9000.0)], [])),
    ({"altitude": 9500}, ("reads", [], [("value-out-of-range", "error", f"{A}.altitude")])),
    ({"altitude": -1000}, ("reads", [], [("value-out-of-range", "error", f"{A}.altitude")])),
    ({"altitude": "high"}, refused(("structure", f"{A}.altitude"))),
    ({"altitude": True}, refused(("structure", f"{A}.altitude"))),
    ({"altitude": 10**400}, refused(("value", f"{A}.altitude"))),
    ({"altitude": float("nan")}, refused(("value", f"{A}.altitude"))),
    (
        {"altitude": 2500, "modifierExtension": [{"url": "urn:x"}]},
        refused(("not-supported", f"{A}.modifierExtension")),
    ),
    ([], refused(("structure", A))),
    ({}, ("reads", [], [])),
]  # fmt: skip


@pytest.mark.parametrize(
    ("position", "expected"), LOCATION_EDITS, ids=[repr(p)[:40] for p, _ in LOCATION_EDITS]
)
def test_a_location_reads_as_expected(position: object, expected: object) -> None:
    data = bundle(tagged({"resourceType": "Location", "id": "l1", "position": position}))
    assert answer(data) == expected
    assert_located(data)


# FiO2 (LOINC 3150-0 measured, 19994-3 ventilator setting) as a fraction, whatever the unit:
# a value above 1 with unit '1' is a percentage and one at most 1 with '%' a fraction (common
# practice for analysers' and ventilators' exports); 0.1-1 is possible (0.1: common practice).
FIO2_FORMS: list[tuple[float, str, float | None, str | None]] = [
    (21, "%", 0.21, None),
    (0.21, "1", 0.21, None),
    (0.21, "%", 0.21, "unit-converted"),
    (21, "1", 0.21, "unit-converted"),
    (1.4, "1", None, "value-out-of-range"),
    (0, "%", None, "value-out-of-range"),
    (50, "%", 0.5, None),
]


def test_fio2_forms_read_as_expected() -> None:
    for n, (value, unit, fraction, issue) in enumerate(FIO2_FORMS):
        for loinc in ("3150-0", "19994-3"):
            status, found, issues = answer(bundle(observation(loinc, value, unit, oid=f"f{n}")))
            assert status == "reads"
            assert found == ([] if fraction is None else [("fio2", pytest.approx(fraction))])
            assert [code for code, _, _ in issues] == ([] if issue is None else [issue])


@FUZZ
@given(st.sampled_from(fixture_names() + DEMOS), st.data())
def test_fixture_with_one_element_replaced_locates_what_it_reports(
    name: str, data: st.DataObject
) -> None:
    original = demo(name) if name in DEMOS else fixture(name)
    path = data.draw(st.sampled_from([p for p in _paths(original) if p]))
    mutated = copy.deepcopy(original)
    node: Any = mutated
    for part in path[:-1]:
        node = node[part]
    node[path[-1]] = data.draw(JSON)
    assert_located(mutated)


# --- The pieces the reader leans on --------------------------------------------------------

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


def test_a_specimen_reference_without_a_reference_is_located_at_the_reference() -> None:
    # FHIR R4 Reference: an identifier or a display alone is allowed; the Specimen cannot be
    # found then, and the warning names the Reference, not its absent ``reference``.
    data = bundle(observation("11556-8", 80, "mm[Hg]", specimen={"display": "blood"}), patient())
    assert answer(data) == ("reads", PAO2, [("specimen-unknown", "warning", f"{R}.specimen")])
    assert_located(data)
    data["entry"][0]["resource"]["specimen"] = {"reference": "Specimen/elsewhere"}
    where = f"{R}.specimen.reference"
    assert answer(data) == ("reads", PAO2, [("specimen-unknown", "warning", where)])
