"""Cutting a patient's data into gas episodes, and what cannot be used (invented values).

Which values an episode must hold is checked against the whole history in ``test_history.py``;
here, the cases one by one, and the budgets.
"""

from __future__ import annotations

import json
import shutil
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest

from service.bulk.episodes import (
    Episode,
    EpisodeWindows,
    PatientData,
    cut_episodes,
    patient_data,
)
from service.bulk.errors import ErrorCode
from service.bulk.patient import Assessor, JobContext
from service.bulk.pseudonym import Pseudonymiser
from service.bulk.records import Record
from service.bulk.settings import BulkSettings
from service.config import Settings
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
T0 = datetime(2026, 3, 1, 8, 0, tzinfo=UTC)
WINDOWS = EpisodeWindows.of(Settings(), Runtime.load().ruleset)
KEY = "Patient/p1"
UNITS = {
    "2703-7": "mm[Hg]",
    "2019-8": "mm[Hg]",
    "2705-2": "mm[Hg]",
    "3150-0": "%",
    "59408-5": "%",
    "11556-8": "mm[Hg]",
    "718-7": "g/dL",
}


def obs(oid: str, code: str, value: float, when: datetime | None, **extra: Any) -> dict[str, Any]:
    system = "http://loinc.org"
    if code == "dlco-percent-predicted":
        system = "https://oxyrule.org/fhir/CodeSystem/input"
    unit = extra.pop("unit", UNITS.get(code, "%"))
    resource: dict[str, Any] = {
        "resourceType": "Observation",
        "id": oid,
        "status": "final",
        "code": {"coding": [{"system": system, "code": code}]},
        "subject": {"reference": KEY},
        "valueQuantity": {"value": value, "system": "http://unitsofmeasure.org", "code": unit},
    }
    if when is not None:
        resource["effectiveDateTime"] = when.isoformat()
    resource.update(extra)
    return resource


def gas(prefix: str, when: datetime, pao2: float = 62, fio2: float = 21) -> list[dict[str, Any]]:
    return [
        obs(f"{prefix}-fio2", "3150-0", fio2, when - timedelta(minutes=10)),
        obs(f"{prefix}-po2", "2703-7", pao2, when),
        obs(f"{prefix}-pco2", "2019-8", 40, when),
    ]


def records(*resources: dict[str, Any], patient: bool = True) -> list[Record]:
    items = [{"resourceType": "Patient", "id": "p1", "birthDate": "1960-01-01"}] if patient else []
    items += resources
    return [
        Record(r["resourceType"], KEY, "Observation.ndjson", n, json.dumps(r).encode())
        for n, r in enumerate(items, start=1)
    ]


def read(*resources: dict[str, Any], patient: bool = True, limit: int = 1000) -> PatientData:
    return patient_data(
        KEY,
        records(*resources, patient=patient),
        concept_map=None,
        pseudonym=Pseudonymiser(),
        max_resources=limit,
    )


def episodes(*resources: dict[str, Any], locations: dict[str, Any] | None = None) -> list[Episode]:
    return list(cut_episodes(read(*resources), windows=WINDOWS, locations=locations or {}))


def ids(episode: Episode) -> set[str]:
    entries: list[dict[str, Any]] = episode.bundle["entry"]  # type: ignore[assignment]
    return {e["resource"]["id"] for e in entries if e["resource"]["resourceType"] == "Observation"}


def test_each_arterial_gas_is_an_episode_and_never_sees_a_later_gas() -> None:
    first, second = episodes(*gas("a", T0), *gas("b", T0 + timedelta(hours=2), fio2=40))
    assert (first.time, second.time) == (T0, T0 + timedelta(hours=2))
    assert ids(first) >= {"a-fio2", "a-po2", "a-pco2"}
    assert "b-po2" not in ids(first)  # its PaCO2 and FiO2 may be: values pairing may report
    assert ids(second) >= {"a-po2", "a-pco2", "a-fio2", "b-po2", "b-pco2", "b-fio2"}
    assert (first.earlier_gases, second.earlier_gases) == (0, 1)
    assert (first.observation, second.observation) == ("Observation/a-po2", "Observation/b-po2")


def test_earlier_gases_are_those_of_the_oxygen_response_window() -> None:
    hours = Settings().oxygen_response_window_hours
    at_edge = T0 + timedelta(hours=hours)
    _, second = episodes(*gas("a", T0), *gas("b", at_edge))
    assert "a-po2" in ids(second) and second.earlier_gases == 1
    _, third = episodes(*gas("a", T0), *gas("c", at_edge + timedelta(minutes=5)))
    assert "a-po2" not in ids(third) and third.earlier_gases == 0
    shorter = EpisodeWindows.of(Settings(oxygen_response_window_hours=1), Runtime.load().ruleset)
    _, fourth = cut_episodes(
        read(*gas("a", T0), *gas("b", T0 + timedelta(hours=2))), windows=shorter, locations={}
    )
    assert "a-po2" not in ids(fourth)


def test_a_doubtful_sample_is_judged_on_its_own() -> None:
    """A blood PO2 of unstated specimen beside an earlier arterial gas: the arterial gas is
    left out, or the service would assess it in the doubtful sample's place."""
    doubtful_at = T0 + timedelta(minutes=20)
    doubtful = obs("d-po2", "11556-8", 45, doubtful_at)
    first, second = episodes(*gas("a", T0), doubtful)
    assert second.time == doubtful_at
    assert "a-po2" not in ids(second) and "d-po2" in ids(second)
    assert second.earlier_gases == 0
    assert "d-po2" not in ids(first)  # a later PO2 is never part of an earlier gas's episode
    assert (first.specimen, second.specimen) == ("arterial", "unknown")


def test_a_setting_is_the_one_in_force_else_the_nearest_reported_out_of_its_window() -> None:
    setting_h = Settings().setting_window_hours
    far = obs("far-fio2", "3150-0", 28, T0 - timedelta(hours=setting_h + 1))
    (only,) = episodes(obs("po2", "2703-7", 60, T0), far)
    assert "far-fio2" in ids(only)  # the result will say the FiO2 was out of the window
    # The earliest setting stays (the titration is tried only on two moments of settings).
    earliest = obs("earliest-fio2", "3150-0", 24, T0 - timedelta(hours=setting_h + 2))
    near = obs("near", "3150-0", 35, T0 - timedelta(minutes=10))  # before the settling time
    (again,) = episodes(obs("po2", "2703-7", 60, T0), earliest, far, near)
    assert "far-fio2" not in ids(again) and {"near", "earliest-fio2"} <= ids(again)


def test_lung_function_is_the_nearest_before_and_after_within_its_window() -> None:
    older = obs("dlco-1", "dlco-percent-predicted", 60, T0 - timedelta(days=400))
    newer = obs("dlco-2", "dlco-percent-predicted", 45, T0 - timedelta(days=30))
    later = obs("dlco-3", "dlco-percent-predicted", 40, T0 + timedelta(days=2))
    latest = obs("dlco-4", "dlco-percent-predicted", 40, T0 + timedelta(days=90))
    (only,) = episodes(*gas("a", T0), older, newer, later, latest)
    assert {"dlco-2", "dlco-3"} <= ids(only) and not {"dlco-1", "dlco-4"} & ids(only)


def test_the_residence_is_the_latest_at_any_time() -> None:
    def residence(oid: str, code: str, when: datetime) -> dict[str, Any]:
        r = obs(oid, "altitude-residence", 0, when)
        del r["valueQuantity"]
        r["code"]["coding"][0]["system"] = "https://oxyrule.org/fhir/CodeSystem/input"
        system = "https://oxyrule.org/fhir/CodeSystem/altitude-residence"
        r["valueCodeableConcept"] = {"coding": [{"system": system, "code": code}]}
        return r

    before = residence("r-1", "visitor", T0 - timedelta(days=3))
    after = residence("r-2", "resident", T0 + timedelta(days=40))
    (only,) = episodes(*gas("a", T0), before, after)
    assert "r-2" in ids(only) and "r-1" not in ids(only)


def test_blood_samples_and_unused_values_are_kept_beside_the_gases_only() -> None:
    venous_near = obs("v-near", "2705-2", 38, T0 + timedelta(minutes=30))
    venous_far = obs("v-far", "2705-2", 38, T0 + timedelta(minutes=35))
    cancelled = obs("hb-x", "718-7", 12, T0 - timedelta(minutes=10), status="cancelled")
    cancelled_far = obs("hb-y", "718-7", 12, T0 - timedelta(hours=3), status="cancelled")
    (only,) = episodes(*gas("a", T0), venous_near, venous_far, cancelled, cancelled_far)
    assert {"v-near", "hb-x"} <= ids(only) and not {"v-far", "hb-y"} & ids(only)


def test_the_location_is_the_one_the_encounter_held_at_the_gas_time() -> None:
    encounter = {
        "resourceType": "Encounter",
        "id": "e1",
        "subject": {"reference": KEY},
        "location": [
            {
                "location": {"reference": "Location/ward-a"},
                "period": {"start": "2026-03-01T00:00:00Z", "end": "2026-03-01T07:00:00Z"},
            },
            {
                "location": {"reference": "Location/ward-b"},
                "period": {"start": "2026-03-01T07:00:00Z"},
            },
        ],
    }
    po2 = obs("po2", "2703-7", 60, T0, encounter={"reference": "Encounter/e1"})
    ward_b: dict[str, object] = {
        "resourceType": "Location",
        "id": "ward-b",
        "position": {"altitude": 1500},
    }
    data = read(po2, encounter)
    (only,) = cut_episodes(data, windows=WINDOWS, locations={"Location/ward-b": ward_b})
    assert only.location == "Location/ward-b"
    entries: list[dict[str, Any]] = only.bundle["entry"]  # type: ignore[assignment]
    assert ward_b in [e["resource"] for e in entries]  # its altitude reaches the reader


@pytest.fixture(scope="module")
def assessor() -> Assessor:
    settings = Settings()
    runtime = Runtime.load(settings)
    context = JobContext(
        settings, BulkSettings(), Pseudonymiser(), T0, runtime.ruleset.content_hash
    )
    return Assessor(context, {})


def test_a_resource_the_reader_refuses_is_reported_and_the_gas_still_assessed(
    assessor: Assessor,
) -> None:
    bad = obs("bad-pco2", "2019-8", 40, T0, unit="g")
    outcome = assessor.patient(KEY, records(*gas("a", T0), bad))
    assert len(outcome.results) == 1
    (error,) = outcome.errors
    assert (error.code, error.file, error.line) == (
        ErrorCode.UNREADABLE_RESOURCE,
        "Observation.ndjson",
        5,
    )
    assert error.expression == "Observation.valueQuantity.code"
    assert error.resource_id == "Observation/bad-pco2"


def test_a_missing_or_repeated_patient_is_said_and_the_gas_assessed(assessor: Assessor) -> None:
    missing = assessor.patient(KEY, records(*gas("a", T0), patient=False))
    assert [e.code for e in missing.errors] == [ErrorCode.PATIENT_NOT_EXPORTED]
    assert missing.results[0]["age_years"] is None
    again = {"resourceType": "Patient", "id": "p1", "birthDate": "1990-01-01"}
    twice = assessor.patient(KEY, records(again, *gas("a", T0)))
    assert [(e.code, e.line) for e in twice.errors] == [(ErrorCode.DUPLICATE_RESOURCE, 2)]
    assert twice.results[0]["age_years"] == 66.0  # the first Patient's birth date (1960)


def test_a_gas_without_a_time_is_reported_not_assessed(assessor: Assessor) -> None:
    outcome = assessor.patient(KEY, records(obs("po2", "2703-7", 60, None)))
    assert outcome.results == []
    assert [e.code for e in outcome.errors] == [ErrorCode.GAS_WITHOUT_TIME]


def test_a_patient_over_the_resource_budget_is_reported_not_assessed() -> None:
    data = read(*gas("a", T0), limit=3)
    assert [e.code for e in data.errors] == [ErrorCode.TOO_MANY_RESOURCES]
    assert list(cut_episodes(data, windows=WINDOWS, locations={})) == []


def test_local_codes_are_read_through_the_sites_concept_map(tmp_path: Path) -> None:
    """A gas coded only with the analyser's own codes is found and assessed when the rule
    directory maps them to LOINC (``concept-map.json``)."""
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    shutil.copy(
        ROOT / "fixtures" / "intake" / "local-codes.conceptmap.json", rules / "concept-map.json"
    )
    settings = Settings(rules_dir=rules)
    runtime = Runtime.load(settings)
    context = JobContext(
        settings, BulkSettings(), Pseudonymiser(), T0, runtime.ruleset.content_hash
    )
    local = "https://example.org/lab/analyser-codes"
    po2 = obs("po2", "2703-7", 62, T0)
    pco2 = obs("pco2", "2019-8", 40, T0)
    po2["code"] = {"coding": [{"system": local, "code": "PO2-A"}]}
    pco2["code"] = {"coding": [{"system": local, "code": "PCO2-A"}]}
    outcome = Assessor(context, {}).patient(KEY, records(po2, pco2))
    (row,) = outcome.results
    assert (row["pao2_mmhg"], row["paco2_mmhg"]) == (62.0, 40.0)


def _assessor(bulk: BulkSettings) -> Assessor:
    settings = Settings()
    runtime = Runtime.load(settings)
    context = JobContext(settings, bulk, Pseudonymiser(), T0, runtime.ruleset.content_hash)
    return Assessor(context, {})


def test_a_long_stay_over_the_request_budget_is_read_with_the_jobs_budget(
    assessor: Assessor,
) -> None:
    """1,021 resources: more entries than the service takes in one request (1,000, setting
    OXYRULE_MAX_BUNDLE_ENTRIES), which does not bound the job's own reading."""
    stay = [r for i in range(340) for r in gas(f"g{i}", T0 + timedelta(hours=4 * i))]
    outcome = assessor.patient(KEY, records(*stay))
    assert outcome.errors == [] and len(outcome.results) == 340


def test_an_episode_over_its_budget_is_an_error_row_and_the_others_are_assessed() -> None:
    """Gases every 10 minutes: each episode holds the earlier gases of 12 hours (and the
    latest setting), so the 32nd and later episodes hold more than 100 entries."""
    stay = [r for i in range(36) for r in gas(f"g{i}", T0 + timedelta(minutes=10 * i))]
    outcome = _assessor(BulkSettings(max_episode_entries=100)).patient(KEY, records(*stay))
    assert {e.code for e in outcome.errors} == {ErrorCode.EPISODE_TOO_LARGE}
    refused = {e.resource_id for e in outcome.errors}
    assert refused == {f"Observation/g{i}-po2" for i in range(36 - len(refused), 36)}
    assert 0 < len(refused) < 6 and len(outcome.results) == 36 - len(refused)
    assert "OXYRULE_BULK_MAX_EPISODE_ENTRIES" in outcome.errors[0].message
    whole = _assessor(BulkSettings()).patient(KEY, records(*stay))
    assert whole.errors == [] and len(whole.results) == 36


def test_the_patient_budget_counts_components_as_the_reader_does() -> None:
    panel = obs("panel", "2703-7", 60, T0)
    panel["component"] = [
        {
            "code": {"coding": [{"system": "http://loinc.org", "code": "2019-8"}]},
            "valueQuantity": {"value": 40, "system": "http://unitsofmeasure.org", "code": "mm[Hg]"},
        }
    ] * 9
    data = read(panel, limit=10)  # the Patient, the panel and its nine components: 11
    assert [e.code for e in data.errors] == [ErrorCode.TOO_MANY_RESOURCES]
    assert "OXYRULE_BULK_MAX_PATIENT_RESOURCES" in data.errors[0].message
    assert not read(panel, limit=11).errors


def test_each_refused_resource_is_reported_with_its_own_problem(assessor: Assessor) -> None:
    """The reader lists one problem three times and counts the rest; each refused resource
    still gets its own row, with its own problem, and the gas is assessed — its values too
    that name a Specimen, which only the whole Bundle holds."""
    specimen = {
        "resourceType": "Specimen",
        "id": "s1",
        "type": {"coding": [{"system": "http://snomed.info/sct", "code": "122552005"}]},
        "subject": {"reference": KEY},
    }
    po2 = obs("po2", "11556-8", 62, T0, specimen={"reference": "Specimen/s1"})
    bad = [obs(f"bad-{i}", "2019-8", 40, T0 - timedelta(hours=i + 1), unit="g") for i in range(7)]
    outcome = assessor.patient(KEY, records(specimen, po2, *bad))
    assert sorted(e.resource_id or "" for e in outcome.errors) == [
        f"Observation/bad-{i}" for i in range(7)
    ]
    messages = {e.message for e in outcome.errors}
    assert len(messages) == 1 and not next(iter(messages)).startswith("and ")
    assert {e.expression for e in outcome.errors} == {"Observation.valueQuantity.code"}
    (row,) = outcome.results
    assert (row["pao2_mmhg"], row["specimen"]) == (62.0, "arterial")
