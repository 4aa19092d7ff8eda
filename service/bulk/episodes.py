"""One patient's resources as gas episodes: one FHIR Bundle per arterial gas.

The service assesses "one patient's recent data": the latest arterial gas is the index gas,
each kind of value is paired with each gas within its own window (``service.assess.pairing``),
and every two gases within the oxygen-response window show the response to oxygen. A Bulk Data
export holds years of a patient's data, so the job cuts it into episodes, one per sampling time
``t`` of an arterial PO2, each an ordinary collection Bundle that the service's reader and
assessment take as they are.

**What an episode must give.** The episode of the gas at ``t`` is assessed exactly as
``oxyrule assess`` assesses *the history at that gas*: the patient's resources with these left
out (``tests/bulk/test_history.py`` builds it literally and compares the two):

* every arterial PO2 sampled after ``t`` (it would be the index gas), and one with no time;
* arterial gases sampled more than ``oxygen_response_window_hours`` before ``t``: a gas is
  compared with the gases of that window only, which are the episode's *earlier gases*;
* blood samples that are not arterial gases — venous, capillary and mixed-venous values, and
  arterial-coded values of doubtful specimen — unless taken within the pairing window of a gas
  of the episode: the service reads every such sample of a Bundle as sent beside its gas
  (``specimen-not-arterial``, ``specimen-unknown``);
* Observations the reader does not use (an ignored status, no value, an impossible value, a
  code it does not read) unless within the pairing window of a gas of the episode: their
  findings describe the moment they were taken;
* every Location but the gas's (``Observation.encounter`` → ``Encounter.location``, the one
  whose period holds ``t``, else the last listed), and every resource type the service does not
  read.

Values with no time, the Patient and the Specimens stay. A gas whose sample is of doubtful
specimen is not used as arterial by the service, which then anchors on the latest SpO2 (with
none, the latest value of each kind): such a gas is judged on its own, so its history also
leaves out every arterial gas known to be arterial, and ends at ``t`` plus the pairing window —
as a Bundle sent at that moment would.

**What an episode holds.** Not that whole history — years of values — but the part pairing
can use: every gas of the episode (the gas at ``t`` and its earlier gases), the samples and
unused Observations as above, the values with no time, and, for each gas and each kind of
value the service pairs, the nearest value of that kind before the gas and the nearest after it
(every value at those two instants). Pairing takes, for each kind, the nearest value within the
kind's window, the setting charted last before the gas (the setting in force), or reports the
nearest one outside the window (``value-outside-window``, ``fio2-time-mismatch``); for
altitude and residence, the latest. Each of those is the nearest before or after the gas, so
the episode holds it, and a value the episode holds that the history also holds can never
displace it: the service pairs the episode as it pairs the whole history. The windows are the
service's own (``service.assess.assess.windows``), never restated here. One difference is
kept on purpose: a finding the reader raises about a value it uses (a unit converted, a time
taken from ``issued``) comes with that value, so an episode reports it for the values it holds,
where the service given years of history would report every value's on every gas.

A later gas is never in an episode, so the index gas of every episode is its own gas. Before
episodes are cut, the patient's resources are read once, together, by the service's reader: a
resource the reader refuses (a bad dateTime, a unit a quantity cannot take) becomes an error
row with its file, line and the located problem, and the rest are read without it, so one bad
line never costs a patient's other gases.

**Budgets.** The patient read counts an Observation's components as entries, as the service
does, and holds at most ``OXYRULE_BULK_MAX_PATIENT_RESOURCES`` of them; each episode is read
with ``OXYRULE_BULK_MAX_EPISODE_ENTRIES`` (``read_limits``), not the service's request limit:
the job builds the episodes itself, and a long stay with frequent gases may need more than a
request would send. Over either budget the patient or the gas is an error row that says which
setting to raise, never a silent omission.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from datetime import datetime

import orjson

from service.assess.pairing import ARTERIAL, Windows
from service.fhir.dates import effective_time, parse_date_time
from service.fhir.extract import read_bundle
from service.fhir.outcome import BundleError, Problem, TooLargeError
from service.fhir.references import FHIR_ID, type_and_id
from service.fhir.shape import Collector
from service.intake.limits import DEFAULT_READ_LIMITS, ReadLimits
from service.intake.model import Intake, Measurement, Quantity, Specimen
from service.terminology.local_codes import LocalCodeMap

from .errors import ErrorCode, ErrorRow, Stage
from .pseudonym import Pseudonymiser
from .records import Record
from .timeline import (
    NOT_ARTERIAL_BLOOD,
    Entry,
    EpisodeWindows,
    Role,
    Timelines,
    in_order,
    timelines,
)
from .titration import TitrationReach

__all__ = [
    "Episode",
    "EpisodeWindows",
    "PatientData",
    "cut_episodes",
    "patient_data",
    "read_limits",
]

_ENTRY = re.compile(r"^Bundle\.entry\[(\d+)\](?:\.resource)?")


@dataclass(frozen=True, slots=True)
class Episode:
    """One gas's episode: the Bundle to assess and what the result row needs."""

    time: datetime
    observation: str | None  # the gas's PO2 Observation, Type/id
    location: str | None  # Location/id of the gas's Encounter
    specimen: str | None  # the specimen of the gas's PO2, where known
    earlier_gases: int
    bundle: dict[str, object]


def read_limits(max_entries: int) -> ReadLimits:
    """The reader's budget for one episode: ``max_entries`` entries and components, and the
    issues listed as ``oxyrule assess`` lists them (so the findings are the same)."""
    return ReadLimits(max_entries=max_entries, max_issues=DEFAULT_READ_LIMITS.max_issues)


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


def _size(resource: dict[str, object]) -> int:
    """Entries the reader counts for a resource: one, and one per component."""
    components = resource.get("component")
    return 1 + (len(components) if isinstance(components, list) else 0)


def patient_data(
    key: str,
    records: Iterable[Record],
    *,
    concept_map: LocalCodeMap | None,
    pseudonym: Pseudonymiser,
    max_resources: int,
) -> PatientData:
    """Parse, sort and read a patient's records; what cannot be used becomes error rows.

    ``max_resources`` bounds the resources of the patient, an Observation's components counted
    as resources (as the service's reader counts them).
    """
    data = PatientData(key)
    ordered = sorted(records, key=lambda r: (r.file, r.line))
    observations: list[Entry] = []
    size = 0
    for record in ordered:
        resource = orjson.loads(record.body)
        size += _size(resource)
        if size > max_resources:
            data.errors = [_too_many(key, max_resources, pseudonym)]
            data.patient, data.specimens, data.encounters = None, {}, {}
            return data
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
    intake = _read_all(data, observations, concept_map, pseudonym, max_resources)
    if intake is not None:
        _describe(data, observations, intake, pseudonym)
    return data


def _too_many(key: str, limit: int, pseudonym: Pseudonymiser) -> ErrorRow:
    return ErrorRow(
        None,
        None,
        Stage.PATIENT,
        ErrorCode.TOO_MANY_RESOURCES,
        "error",
        f"more than {limit} resources and components for one patient "
        "(OXYRULE_BULK_MAX_PATIENT_RESOURCES): not assessed",
        patient=pseudonym(key),
    )


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
    budget: int,
) -> Intake | None:
    """Read every resource of the patient at once; drop and report each refused one.

    The reader lists the same problem three times and then counts the rest in one line, so
    when it refuses the whole, each resource is read alone to find every refused one with its
    own problem; the others are read together again (a problem only the whole shows, such as
    two patients in one group, falls back to dropping what the reader blames, round by round).
    """
    limits = ReadLimits(max_entries=budget, max_issues=max(budget, DEFAULT_READ_LIMITS.max_issues))
    members: list[Entry] = [
        *([data.patient] if data.patient else []),
        *data.specimens.values(),
        *observations,
    ]
    alone_done = False
    while True:
        try:
            intake = read_bundle(
                _bundle(e.resource for e in members), concept_map=concept_map, limits=limits
            )
        except TooLargeError:  # counted before reading: should not happen; never fatal
            data.errors.append(_too_many(data.key, budget, pseudonym))
            return None
        except BundleError as exc:
            blamed: dict[int, list[Problem]] = {}
            if not alone_done:
                alone_done = True
                blamed = _refused_alone(members, concept_map, limits)
            if not blamed:
                for problem in exc.problems:
                    match = _ENTRY.match(problem.expression)
                    if match is None or int(match[1]) >= len(members):
                        data.errors.append(_patient_unreadable(data.key, problem, pseudonym))
                        return None
                    blamed.setdefault(int(match[1]), []).append(problem)
            for index, problems in sorted(blamed.items()):
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


def _refused_alone(
    members: list[Entry], concept_map: LocalCodeMap | None, limits: ReadLimits
) -> dict[int, list[Problem]]:
    """The members the reader refuses when each is read alone, with their own problems
    (located in the whole Bundle). A reference to another resource that is not there is no
    problem to the reader (a specimen it cannot find is an issue), so reading alone refuses
    only what the resource itself gets wrong."""
    found: dict[int, list[Problem]] = {}
    for index, entry in enumerate(members):
        try:
            read_bundle(_bundle([entry.resource]), concept_map=concept_map, limits=limits)
        except BundleError as exc:
            found[index] = [
                Problem(
                    p.severity,
                    p.code,
                    p.diagnostics,
                    _ENTRY.sub(f"Bundle.entry[{index}].resource", p.expression, count=1),
                )
                for p in exc.problems
                if _ENTRY.match(p.expression)
            ]
            if not found[index]:
                del found[index]
    return found


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


def _describe(
    data: PatientData,
    observations: list[Entry],
    intake: Intake,
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
        timed = [m.time for m in measurements if m.time is not None]
        entry.time = (
            timed[0] if timed else effective_time(entry.resource, "Observation", Collector())
        )
        entry.quantities = frozenset(m.quantity for m in measurements)
        entry.measurements = tuple(measurements)
        entry.usable = all(
            m.specimen in (None, Specimen.ARTERIAL) for m in measurements if m.quantity in ARTERIAL
        )
        entry.role = _role(entry)
        entry.specimen = next(
            (
                m.specimen.value
                for m in measurements
                if m.quantity is Quantity.ARTERIAL_PO2 and m.specimen is not None
            ),
            None,
        )
        if entry.role is Role.GAS and entry.time is None:
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


def _role(entry: Entry) -> Role:
    q = entry.quantities
    if not q:
        return Role.UNUSED
    if Quantity.ARTERIAL_PO2 in q:
        return Role.GAS
    if q & NOT_ARTERIAL_BLOOD or (q & ARTERIAL and not entry.usable):
        return Role.SAMPLE
    return Role.CONTEXT


def cut_episodes(
    data: PatientData, *, windows: EpisodeWindows, locations: dict[str, dict[str, object]]
) -> Iterator[Episode]:
    """The patient's episodes, earliest gas first (built one at a time)."""
    lines = timelines(data.entries)
    reach = TitrationReach(lines, windows)
    for t in sorted(set(lines.gases.times)):
        yield _episode(data, t, windows, lines, reach, locations)


def _episode(
    data: PatientData,
    t: datetime,
    w: EpisodeWindows,
    lines: Timelines,
    reach: TitrationReach,
    locations: dict[str, dict[str, object]],
) -> Episode:
    at_t = lines.gases.between(t, t)
    usable_at_t = [e for e in at_t if e.usable]
    chosen: dict[int, Entry] = {id(e): e for e in lines.untimed}
    end: datetime | None
    index_time: datetime | None
    if usable_at_t:
        gases = [e for e in lines.gases.between(t - w.response, t) if e.usable]
        scope = sorted({e.time for e in gases if e.time is not None})
        anchors: list[datetime | None] = list(scope)
        end, index_time = None, t
    else:
        # Judged on its own: the service anchors on the latest SpO2 by the end of the moment.
        gases = at_t
        scope = [t]
        end = t + w.beside
        spo2 = lines.kinds.get(Quantity.SPO2)
        latest = spo2.at_or_before(end) if spo2 else []
        chosen.update((id(e), e) for e in latest)
        anchors = [latest[0].time if latest else None]
        index_time = anchors[0]
    chosen.update((id(e), e) for e in gases)
    for g in scope:
        for e in lines.beside.between(g - w.beside, g + w.beside):
            if not (e.role is Role.GAS and e.time is not None and e.time > t):
                chosen[id(e)] = e
        chosen.update((id(e), e) for e in lines.unused.between(g - w.beside, g + w.beside))
    for anchor in anchors:
        chosen.update((id(e), e) for e in _paired_candidates(anchor, end, w.pairing, lines))
    titration = reach.entries(
        chosen.values(),
        index_time=index_time,
        end=end,
        gas_times=scope if usable_at_t else [],
    )
    observations = in_order([*chosen.values(), *titration])
    anchor_entry = min(usable_at_t or at_t, key=lambda e: (e.file, e.line))
    location = _location(anchor_entry, t, data.encounters)
    resources: list[dict[str, object]] = []
    if data.patient is not None:
        resources.append(data.patient.resource)
    if location is not None and location in locations:
        resources.append(locations[location])
    resources.extend(_specimens(observations, data.specimens))
    resources.extend(e.resource for e in observations)
    return Episode(
        time=t,
        observation=anchor_entry.ref,
        location=location,
        specimen=anchor_entry.specimen,
        earlier_gases=len(scope) - 1 if usable_at_t else 0,
        bundle=_bundle(resources),
    )


def _paired_candidates(
    anchor: datetime | None, end: datetime | None, w: Windows, lines: Timelines
) -> Iterator[Entry]:
    """For each kind the service pairs: every value pairing could take or report for a gas
    at ``anchor`` — the nearest before it and the nearest after it (no later than ``end``);
    with no anchor time, or for a kind paired at any time, the latest."""
    for quantity, line in lines.kinds.items():
        if anchor is None or w.limit(quantity) is None:
            yield from (
                line.at_or_before(end)
                if end is not None
                else line.between(line.times[-1], line.times[-1])
            )
            continue
        yield from line.at_or_before(anchor)
        yield from line.after(anchor, end)


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
