"""One patient's resources as gas episodes: one FHIR Bundle per arterial gas.

The service assesses "one patient's recent data": the latest arterial gas is the index gas,
earlier gases on another FiO2 show the response to oxygen, context is paired by time. A Bulk
Data export holds years of a patient's data, so the job cuts it into episodes, one per sampling
time ``t`` of an arterial PO2, each an ordinary collection Bundle that the service's reader and
assessment take as they are. The episode of the gas sampled at ``t`` holds:

* **the sample and the samples beside it**: every blood-gas value (arterial, venous,
  capillary) sampled within the pairing window of ``t``, so the sample's own specimen problems
  and a venous gas drawn beside it are seen; never a later arterial PO2;
* **earlier arterial gases** of the last ``lookback`` hours whose sample is known to be arterial,
  for the response to oxygen (only when the gas at ``t`` is itself usable; a doubtful sample is
  judged on its own, as ``oxyrule assess`` judges a Bundle holding only it);
* **context** (FiO2, flow, device, SpO2, temperature, Hb, PEEP, mixed-venous values, ...) within
  the pairing window of ``t`` or of an earlier gas it holds, and, for a kind of value with none
  in the window of ``t``, the nearest one within ``lookback`` (the result then says it was out
  of the window);
* **patient-level values** (altitude, DLCO, walk-test oximetry): the latest of each kind up to
  ``t`` + window; values sent with no time; the Patient; the Specimens the Observations name;
  the Location of the gas's Encounter (``Observation.encounter`` → ``Encounter.location``, the
  one whose period holds ``t``, else the last), whose altitude the reader uses.

Later gases are never in an episode, so the index gas of every episode is its own gas. Which
values pair with which gas is still the service's pairing code, run on each episode Bundle.

Before episodes are cut, the patient's resources are read once, together, by the service's
reader: a resource the reader refuses (a bad dateTime, a unit a quantity cannot take) becomes
an error row with its file, line and the located problem, and the rest are read again without
it, so one bad line never costs a patient's other gases.
"""

from __future__ import annotations

import re
from bisect import bisect_left, bisect_right
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from enum import Enum

import orjson

from service.assess.pairing import ARTERIAL, PATIENT_LEVEL
from service.fhir.dates import effective_time, parse_date_time
from service.fhir.extract import read_bundle
from service.fhir.observation import identify
from service.fhir.outcome import BundleError, Problem
from service.fhir.references import FHIR_ID, type_and_id
from service.fhir.shape import Collector
from service.intake.model import Intake, Measurement, Quantity, Specimen
from service.terminology.local_codes import LocalCodeMap

from .errors import ErrorCode, ErrorRow, Stage
from .pseudonym import Pseudonymiser
from .records import Record

OTHER_SAMPLE: frozenset[Quantity] = frozenset(
    {
        Quantity.VENOUS_PO2,
        Quantity.VENOUS_PCO2,
        Quantity.VENOUS_PH,
        Quantity.VENOUS_SO2,
        Quantity.CENTRAL_VENOUS_SO2,
        Quantity.CAPILLARY_PO2,
        Quantity.CAPILLARY_PCO2,
        Quantity.CAPILLARY_PH,
    }
)
_ENTRY = re.compile(r"^Bundle\.entry\[(\d+)\](?:\.resource)?")


class Role(Enum):
    """How an Observation takes part in episodes."""

    ARTERIAL = "arterial"  # a value of an arterial(-coded) sample
    OTHER_SAMPLE = "other-sample"  # a venous or capillary sample's value
    PATIENT_LEVEL = "patient-level"
    CONTEXT = "context"


@dataclass(slots=True)
class Entry:
    """One resource of the patient with what episode cutting needs."""

    kind: str
    resource: dict[str, object]
    file: str
    line: int
    ref: str | None  # Type/id
    time: datetime | None = None
    role: Role = Role.CONTEXT
    quantities: frozenset[Quantity] = frozenset()
    pao2: bool = False  # carries an arterial(-coded) PO2: anchors a gas
    usable: bool = True  # every arterial value's sample is known to be arterial (or unstated)


@dataclass(frozen=True, slots=True)
class Episode:
    """One gas's episode: the Bundle to assess and what the result row needs."""

    time: datetime
    observation: str | None  # the gas's PO2 Observation, Type/id
    location: str | None  # Location/id of the gas's Encounter
    earlier_gases: int
    bundle: dict[str, object]


@dataclass(frozen=True, slots=True)
class Windows:
    """The time spans that cut episodes (from the settings)."""

    pairing: timedelta
    same_sample: timedelta
    lookback: timedelta


@dataclass(slots=True)
class PatientData:
    """A patient's resources after the first read: episodes to cut, errors found."""

    key: str
    patient: Entry | None = None
    entries: list[Entry] = field(default_factory=list)  # Observations, file/line order
    specimens: dict[str, Entry] = field(default_factory=dict)
    encounters: dict[str, list[tuple[str, datetime | None, datetime | None]]] = field(
        default_factory=dict
    )
    errors: list[ErrorRow] = field(default_factory=list)


def patient_data(
    key: str,
    records: Iterable[Record],
    *,
    concept_map: LocalCodeMap | None,
    pseudonym: Pseudonymiser,
    max_resources: int,
) -> PatientData:
    """Parse, sort and read a patient's records; what cannot be used becomes error rows."""
    data = PatientData(key)
    ordered = sorted(records, key=lambda r: (r.file, r.line))
    if len(ordered) > max_resources:
        data.errors.append(
            ErrorRow(
                None,
                None,
                Stage.PATIENT,
                ErrorCode.TOO_MANY_RESOURCES,
                "error",
                f"{len(ordered)} resources for one patient, more than "
                f"OXYRULE_BULK_MAX_PATIENT_RESOURCES ({max_resources}): not assessed",
                patient=pseudonym(key),
            )
        )
        return data
    observations: list[Entry] = []
    for record in ordered:
        resource = orjson.loads(record.body)
        rid = resource.get("id")
        ref = f"{record.kind}/{rid}" if isinstance(rid, str) and FHIR_ID.fullmatch(rid) else None
        entry = Entry(record.kind, resource, record.file, record.line, ref)
        if record.kind == "Patient":
            if data.patient is None:
                data.patient = entry
            else:
                data.errors.append(_duplicate(entry, data.patient, key, pseudonym))
        elif record.kind == "Observation":
            observations.append(entry)
        elif record.kind == "Specimen" and ref is not None:
            data.specimens.setdefault(ref, entry)
        elif record.kind == "Encounter" and ref is not None:
            data.encounters[ref] = _encounter_locations(resource)
    if data.patient is None:
        data.errors.append(
            ErrorRow(
                None,
                None,
                Stage.PATIENT,
                ErrorCode.PATIENT_NOT_EXPORTED,
                "information",
                "the export holds no Patient resource for this patient: age is not known",
                patient=pseudonym(key),
            )
        )
    intake = _read_all(data, observations, concept_map, pseudonym)
    if intake is not None:
        _describe(data, observations, intake, concept_map, pseudonym)
    return data


def _duplicate(entry: Entry, first: Entry, key: str, pseudonym: Pseudonymiser) -> ErrorRow:
    return ErrorRow(
        entry.file,
        entry.line,
        Stage.PATIENT,
        ErrorCode.DUPLICATE_RESOURCE,
        "warning",
        f"another Patient with this id was read first ({first.file}, line {first.line}): "
        "this one is not used",
        resource_type="Patient",
        resource_id=pseudonym(entry.ref),
        patient=pseudonym(key),
    )


def _encounter_locations(
    resource: dict[str, object],
) -> list[tuple[str, datetime | None, datetime | None]]:
    """(Location/id, period start, period end) of each ``Encounter.location``."""
    found: list[tuple[str, datetime | None, datetime | None]] = []
    items = resource.get("location")
    for item in items if isinstance(items, list) else []:
        if not isinstance(item, dict):
            continue
        where = item.get("location")
        reference = where.get("reference") if isinstance(where, dict) else None
        typed = type_and_id(reference) if isinstance(reference, str) else None
        if typed is None or not typed.startswith("Location/"):
            continue
        period = item.get("period")
        bounds = [
            _instant(period.get(b)) if isinstance(period, dict) else None for b in ("start", "end")
        ]
        found.append((typed, bounds[0], bounds[1]))
    return found


def _instant(text: object) -> datetime | None:
    if not isinstance(text, str):
        return None
    try:
        return parse_date_time(text).value
    except ValueError:
        return None


def _bundle(resources: Iterable[dict[str, object]]) -> dict[str, object]:
    return {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [{"resource": r} for r in resources],
    }


def _read_all(
    data: PatientData,
    observations: list[Entry],
    concept_map: LocalCodeMap | None,
    pseudonym: Pseudonymiser,
) -> Intake | None:
    """Read every resource of the patient at once; drop and report each refused one."""
    members: list[Entry] = [
        *([data.patient] if data.patient else []),
        *data.specimens.values(),
        *observations,
    ]
    while True:
        try:
            intake = read_bundle(_bundle(e.resource for e in members), concept_map=concept_map)
        except BundleError as exc:
            blamed: dict[int, list[Problem]] = {}
            for problem in exc.problems:
                match = _ENTRY.match(problem.expression)
                if match is None or int(match[1]) >= len(members):
                    data.errors.append(_patient_unreadable(data.key, problem, pseudonym))
                    return None
                blamed.setdefault(int(match[1]), []).append(problem)
            for index, problems in blamed.items():
                data.errors.append(_refused(members[index], problems, data.key, pseudonym))
            dropped = {id(members[i]) for i in blamed}
            members = [e for e in members if id(e) not in dropped]
            if data.patient is not None and id(data.patient) in dropped:
                data.patient = None
            data.specimens = {k: e for k, e in data.specimens.items() if id(e) not in dropped}
            observations[:] = [e for e in observations if id(e) not in dropped]
            continue
        data.entries = observations
        return intake


def _relative(expression: str, kind: str) -> str:
    """``Bundle.entry[4].resource.valueQuantity.code`` → ``Observation.valueQuantity.code``."""
    return _ENTRY.sub(kind, expression, count=1)


def _refused(entry: Entry, problems: list[Problem], key: str, pseudonym: Pseudonymiser) -> ErrorRow:
    first = problems[0]
    more = f" (and {len(problems) - 1} more problems)" if len(problems) > 1 else ""
    return ErrorRow(
        entry.file,
        entry.line,
        Stage.PATIENT,
        ErrorCode.UNREADABLE_RESOURCE,
        "error",
        f"{first.diagnostics}{more}; the resource is not used",
        resource_type=entry.kind,
        resource_id=pseudonym(entry.ref),
        patient=pseudonym(key),
        expression=_relative(first.expression, entry.kind),
    )


def _patient_unreadable(key: str, problem: Problem, pseudonym: Pseudonymiser) -> ErrorRow:
    return ErrorRow(
        None,
        None,
        Stage.PATIENT,
        ErrorCode.UNREADABLE_RESOURCE,
        "error",
        f"{problem.diagnostics}; this patient's data are not assessed",
        patient=pseudonym(key),
        expression=problem.expression,
    )


def _codings(resource: dict[str, object]) -> tuple[list[tuple[str, str]], list[str]]:
    """(system, code) pairs of ``Observation.code`` and ``meta.profile``, where well formed.

    Only to tell which kind of value an Observation the reader did not use (ignored status,
    impossible value) would have been, so that its finding lands in the right episode.
    """
    code = resource.get("code")
    items = code.get("coding") if isinstance(code, dict) else None
    pairs = [
        (c["system"], c["code"])
        for c in (items if isinstance(items, list) else [])
        if isinstance(c, dict)
        and isinstance(c.get("system"), str)
        and isinstance(c.get("code"), str)
    ]
    meta = resource.get("meta")
    listed = meta.get("profile") if isinstance(meta, dict) else None
    profiles = [p for p in listed if isinstance(p, str)] if isinstance(listed, list) else []
    return pairs, profiles


def _describe(
    data: PatientData,
    observations: list[Entry],
    intake: Intake,
    concept_map: LocalCodeMap | None,
    pseudonym: Pseudonymiser,
) -> None:
    """Give each Observation its time, its quantities and its role in episodes."""
    by_entry: dict[int, list[Measurement]] = {}
    offset = (1 if data.patient else 0) + len(data.specimens)
    for m in intake.measurements:
        match = _ENTRY.match(m.source.expression)
        if match is not None:
            by_entry.setdefault(int(match[1]) - offset, []).append(m)
    for index, entry in enumerate(observations):
        measurements = by_entry.get(index, [])
        entry.time = effective_time(entry.resource, "Observation", Collector())
        if measurements:
            entry.quantities = frozenset(m.quantity for m in measurements)
            entry.usable = all(
                m.specimen in (None, Specimen.ARTERIAL)
                for m in measurements
                if m.quantity in ARTERIAL
            )
        else:
            concept = identify(*_codings(entry.resource), concept_map)
            entry.quantities = frozenset() if concept is None else frozenset({concept.quantity})
        entry.pao2 = any(m.quantity is Quantity.ARTERIAL_PO2 for m in measurements)
        entry.role = _role(entry.quantities)
        if entry.pao2 and entry.time is None:
            data.errors.append(
                ErrorRow(
                    entry.file,
                    entry.line,
                    Stage.PATIENT,
                    ErrorCode.GAS_WITHOUT_TIME,
                    "warning",
                    "an arterial PO2 with no time cannot be placed in an episode: not assessed",
                    resource_type="Observation",
                    resource_id=pseudonym(entry.ref),
                    patient=pseudonym(data.key),
                    expression="Observation.effective",
                )
            )


def _role(quantities: frozenset[Quantity]) -> Role:
    if quantities & ARTERIAL:
        return Role.ARTERIAL
    if quantities & OTHER_SAMPLE:
        return Role.OTHER_SAMPLE
    if quantities and quantities <= PATIENT_LEVEL:
        return Role.PATIENT_LEVEL
    return Role.CONTEXT


class _Timeline:
    """Timed entries sorted by time, for range queries."""

    def __init__(self, entries: Iterable[Entry]) -> None:
        timed = sorted(((e.time, e) for e in entries if e.time is not None), key=lambda p: p[0])
        self.times: list[datetime] = [t for t, _ in timed]
        self.entries: list[Entry] = [e for _, e in timed]

    def between(self, start: datetime, end: datetime) -> list[Entry]:
        """Entries with start ≤ time ≤ end."""
        return self.entries[bisect_left(self.times, start) : bisect_right(self.times, end)]

    def last_until(self, end: datetime) -> Entry | None:
        """The latest entry with time ≤ end."""
        high = bisect_right(self.times, end)
        return self.entries[high - 1] if high else None


@dataclass(frozen=True, slots=True)
class _Timelines:
    """A patient's Observations by role, for cutting episodes."""

    samples: _Timeline
    context: _Timeline
    levels: tuple[_Timeline, ...]
    untimed: tuple[Entry, ...]


def cut_episodes(
    data: PatientData, *, windows: Windows, locations: dict[str, dict[str, object]]
) -> list[Episode]:
    """The patient's episodes, earliest gas first."""
    entries = data.entries
    lines = _Timelines(
        samples=_Timeline(e for e in entries if e.role in (Role.ARTERIAL, Role.OTHER_SAMPLE)),
        context=_Timeline(e for e in entries if e.role is Role.CONTEXT),
        levels=tuple(
            _Timeline(e for e in entries if e.role is Role.PATIENT_LEVEL and q in e.quantities)
            for q in sorted(PATIENT_LEVEL)
        ),
        untimed=tuple(e for e in entries if e.time is None and not e.pao2),
    )
    anchors = sorted({e.time for e in entries if e.pao2 and e.time is not None})
    return [_episode(data, t, windows, lines, locations) for t in anchors]


def _episode(
    data: PatientData,
    t: datetime,
    w: Windows,
    lines: _Timelines,
    locations: dict[str, dict[str, object]],
) -> Episode:
    gas = [e for e in lines.samples.between(t, t) if e.pao2]
    usable = any(e.usable for e in gas)
    samples = _samples(t, usable, w, lines.samples)
    gas_times = {e.time for e in samples if e.pao2 and e.usable and e.time is not None} | {t}
    chosen: dict[int, Entry] = {id(e): e for e in [*samples, *lines.untimed]}
    chosen.update((id(e), e) for e in _context(t, gas_times, w, lines.context))
    for timeline in lines.levels:
        latest = timeline.last_until(t + w.pairing)
        if latest is not None:
            chosen[id(latest)] = latest
    observations = sorted(chosen.values(), key=lambda e: (e.file, e.line))
    anchor = min(gas, key=lambda e: (e.file, e.line))
    location = _location(anchor, t, data.encounters)
    resources: list[dict[str, object]] = []
    if data.patient is not None:
        resources.append(data.patient.resource)
    if location is not None and location in locations:
        resources.append(locations[location])
    resources.extend(_specimens(observations, data.specimens))
    resources.extend(e.resource for e in observations)
    return Episode(
        time=t,
        observation=anchor.ref,
        location=location,
        earlier_gases=len(gas_times) - 1,
        bundle=_bundle(resources),
    )


def _samples(t: datetime, usable: bool, w: Windows, samples: _Timeline) -> list[Entry]:
    """The gas at ``t``, the blood samples beside it and, for a usable gas, earlier gases."""

    def beside(e: Entry) -> bool:
        # Never a later PO2; for a doubtful sample, no other arterial PO2 that would be
        # assessed in its place.
        assert e.time is not None
        if e.pao2 and e.time > t:
            return False
        return usable or not (e.pao2 and e.usable and e.time != t)

    found = [e for e in samples.between(t - w.pairing, t + w.pairing) if beside(e)]
    if usable:
        found += [
            e
            for e in samples.between(t - w.lookback, t - w.pairing)
            if e.role is Role.ARTERIAL and e.usable
        ]
    return found


def _context(t: datetime, gas_times: set[datetime], w: Windows, context: _Timeline) -> list[Entry]:
    """Context within the pairing window of any gas of the episode; for a kind of value with
    none within the window of ``t``, the nearest one within ``lookback``."""
    found: list[Entry] = []
    near_t: set[Quantity] = set()
    candidates = context.between(t - w.lookback - w.pairing, t + w.pairing)
    for e in candidates:
        assert e.time is not None
        if abs(e.time - t) <= w.pairing:
            found.append(e)
            near_t |= e.quantities
        elif any(abs(e.time - g) <= w.pairing for g in gas_times):
            found.append(e)
    nearest: dict[Quantity, tuple[timedelta, Entry]] = {}
    for e in candidates:
        assert e.time is not None
        distance = abs(e.time - t)
        if distance > w.lookback:
            continue
        for q in e.quantities - near_t:
            if q not in nearest or distance < nearest[q][0]:
                nearest[q] = (distance, e)
    return found + [e for _, e in nearest.values()]


def _specimens(observations: list[Entry], specimens: dict[str, Entry]) -> list[dict[str, object]]:
    """The Specimens the observations name, once each, in the order first named."""
    named: dict[str, dict[str, object]] = {}
    for e in observations:
        specimen = e.resource.get("specimen")
        reference = specimen.get("reference") if isinstance(specimen, dict) else None
        typed = type_and_id(reference) if isinstance(reference, str) else None
        if typed is not None and typed in specimens and typed not in named:
            named[typed] = specimens[typed].resource
    return list(named.values())


def _location(
    anchor: Entry,
    t: datetime,
    encounters: dict[str, list[tuple[str, datetime | None, datetime | None]]],
) -> str | None:
    """The Location of the gas's Encounter at ``t`` (else its last listed), if any."""
    encounter = anchor.resource.get("encounter")
    reference = encounter.get("reference") if isinstance(encounter, dict) else None
    typed = type_and_id(reference) if isinstance(reference, str) else None
    places = encounters.get(typed or "", [])
    during = [
        place
        for place, start, end in places
        if (start is None or start <= t) and (end is None or t <= end)
    ]
    if during:
        return during[-1]
    return places[-1][0] if places else None
