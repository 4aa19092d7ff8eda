"""Prefetch values, and reads of what is missing, merged into one Bundle for the reader.

CDS Hooks 2.0 ("Prefetch Template") says how each key may arrive, and this module reads each
way accordingly:

* a resource (``patient``) or a searchset Bundle: used as sent; a Bundle with a ``next``
  link (the client paginated) is read on from ``fhirServer`` when the service may read it,
  else the first page is used and the card says more was not read;
* ``null``: the client has no data for the key. The specification requires the prefetched
  data to be what the service would get from the server itself, so it is not asked again;
* absent (the client chose not to satisfy the key, or could not): read from ``fhirServer``
  with the same query when allowed (``fetch.py``);
* an OperationOutcome instead of the data (the client's read failed): treated as absent;
  OperationOutcome *entries* of a searchset (warnings about the search) are left out.

When a required key can be had neither way the call is answered 412 Precondition Failed, as
the specification says. Every resource must be about ``context.patientId``: an Observation
whose subject, or a Patient whose id, names another patient refuses the call (422), so the
card can never describe someone else. Observations, the Patient, Locations and Specimens go
into the Bundle (once each, by type and id); the encounter only leads to its Location.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

from service.cds.errors import CdsError, Issue
from service.cds.fetch import FetchError, FhirReader, Search, next_link
from service.cds.request import HookRequest
from service.cds.services import CdsService, fill
from service.fhir.references import type_and_id

Json = dict[str, Any]
READ = frozenset({"Observation", "Patient", "Location", "Specimen"})
# What each key brings, in the words a card uses when it is missing or incomplete. The
# encounter's location matters only at altitude, where a missing pressure is a finding anyway.
LABELS = {
    "patient": "the patient's age and sex",
    "bloodGases": "blood gases",
    "oximetry": "pulse oximetry",
    "oxygenSettings": "oxygen settings",
    "otherInputs": "Hb, temperature, ambient pressure and lung-function tests",
}
MAX_LOCATIONS = 3


@dataclass(slots=True)
class Gathered:
    """The merged Bundle, where each entry came from, and what the card should mention."""

    bundle: Json
    origins: list[str]  # per entry: the path it came from (for located errors)
    notes: list[str] = field(default_factory=list)  # plain, no patient values
    fetched: list[str] = field(default_factory=list)  # keys read from fhirServer


@dataclass(slots=True)
class _Merge:
    request: HookRequest
    resources: list[tuple[Json, str]] = field(default_factory=list)
    encounters: list[Json] = field(default_factory=list)
    seen: set[tuple[str, str]] = field(default_factory=set)
    problems: list[Issue] = field(default_factory=list)

    def add(self, resource: Json, origin: str) -> None:
        kind, rid = resource.get("resourceType"), resource.get("id")
        if isinstance(rid, str) and isinstance(kind, str):
            if (kind, rid) in self.seen:
                return
            self.seen.add((kind, rid))
        if kind == "Encounter":
            self.encounters.append(resource)
            return
        if kind not in READ:
            return
        self._check_patient(resource, kind, origin)
        self.resources.append((resource, origin))

    def _check_patient(self, resource: Json, kind: object, origin: str) -> None:
        expected = f"Patient/{self.request.patient_id}"
        if kind == "Patient":
            if resource.get("id") not in (None, self.request.patient_id):
                self.problems.append(
                    Issue("invalid", "a Patient other than context.patientId", f"{origin}.id")
                )
            return
        subject = resource.get("subject")
        reference = subject.get("reference") if isinstance(subject, dict) else None
        typed = type_and_id(reference) if isinstance(reference, str) else None
        if typed is not None and typed.startswith("Patient/") and typed != expected:
            self.problems.append(
                Issue(
                    "invalid",
                    "a resource about another patient than context.patientId",
                    f"{origin}.subject.reference",
                )
            )

    def bundle(self) -> tuple[Json, list[str]]:
        entries = [{"resource": resource} for resource, _ in self.resources]
        origins = [origin for _, origin in self.resources]
        return {"resourceType": "Bundle", "type": "collection", "entry": entries}, origins


def _label(key: str) -> str:
    return LABELS.get(key, key)


def _entry_resources(bundle: Json) -> list[tuple[int, Json]]:
    found = []
    for i, entry in enumerate(bundle.get("entry") or ()):
        resource = entry.get("resource") if isinstance(entry, dict) else None
        if isinstance(resource, dict) and resource.get("resourceType") != "OperationOutcome":
            found.append((i, resource))
    return found


def _is_outcome(value: object) -> bool:
    return isinstance(value, dict) and value.get("resourceType") == "OperationOutcome"


class _Gatherer:
    def __init__(self, service: CdsService, request: HookRequest, reader: FhirReader | None):
        self.service, self.request, self.reader = service, request, reader
        self.merge = _Merge(request)
        self.out = Gathered({}, [])
        self.missing: list[Issue] = []

    async def sent(self, key: str, value: Json) -> None:
        """A key the client sent (a resource or a Bundle)."""
        at = f"prefetch.{key}"
        if value.get("resourceType") != "Bundle":
            self.merge.add(value, at)
            return
        for i, resource in _entry_resources(value):
            self.merge.add(resource, f"{at}.entry[{i}].resource")
        url = next_link(value)
        if url is None:
            return
        if self.reader is None:
            self.out.notes.append(
                f"{_label(key)}: the client sent one page; the rest could not be read"
            )
            return
        found = Search()
        try:
            await self.reader.more(url, found, pages_read=1)
        except FetchError as error:
            self.out.notes.append(
                f"{_label(key)}: further pages could not be read ({error.reason})"
            )
        self._take(key, found)

    def _take(self, key: str, found: Search) -> None:
        for n, resource in enumerate(found.resources):
            self.merge.add(resource, f"fhirServer.{key}[{n}]")
        if found.stopped is not None:
            self.out.notes.append(f"{_label(key)}: {found.stopped}")

    async def fetch(self, key: str, relative: str, required: bool, why_not: str) -> None:
        """A key the client did not satisfy: read it from fhirServer, or say why not."""
        if self.reader is None:
            if required:
                self.missing.append(
                    Issue(
                        "required", f"prefetch {key} was not sent and {why_not}", f"prefetch.{key}"
                    )
                )
            elif key in LABELS:
                self.out.notes.append(f"{_label(key)}: not available ({why_not})")
            return
        try:
            if "?" in relative:
                self._take(key, await self.reader.search(relative))
            else:
                resource = await self.reader.read(relative)
                if resource is not None:
                    self.merge.add(resource, f"fhirServer.{key}")
        except FetchError as error:
            if required:
                self.missing.append(
                    Issue(
                        "processing",
                        f"prefetch {key} could not be read: {error.reason}",
                        f"prefetch.{key}",
                    )
                )
            elif key in LABELS:
                self.out.notes.append(f"{_label(key)}: could not be read ({error.reason})")
            return
        self.out.fetched.append(key)

    async def locations(self) -> None:
        """The Locations of the encounter, when the client sent the encounter alone."""
        if self.reader is None or any(
            r.get("resourceType") == "Location" for r, _ in self.merge.resources
        ):
            return
        wanted: list[str] = []
        for encounter in self.merge.encounters:
            for place in encounter.get("location") or ():
                where = place.get("location") if isinstance(place, dict) else None
                ref = where.get("reference") if isinstance(where, dict) else None
                typed = type_and_id(ref) if isinstance(ref, str) else None
                if typed is not None and typed.startswith("Location/") and typed not in wanted:
                    wanted.append(typed)
        for n, typed in enumerate(wanted[:MAX_LOCATIONS]):
            try:
                resource = await self.reader.read(typed)
            except FetchError as error:
                self.out.notes.append(f"encounter location: could not be read ({error.reason})")
                return
            if resource is not None:
                self.merge.add(resource, f"fhirServer.encounterLocation[{n}]")


async def gather(
    service: CdsService, request: HookRequest, reader: FhirReader | None, why_not: str
) -> Gathered:
    """One Bundle of everything the hook call brings or the service could read.

    ``reader`` is None when the service may not read the client's FHIR server; ``why_not``
    then says why, for the 412 answer.

    Raises:
        CdsError: 412 when a required key can be had neither from prefetch nor from the
            server; 422 when a resource is about another patient.
    """
    work = _Gatherer(service, request, reader)
    sent = request.prefetch or {}
    for key, (template, required) in service.prefetch.items():
        relative = fill(template, request.tokens)
        if relative is None:
            continue  # a token without a value (no encounter in context): nothing to ask
        value = sent.get(key, _ABSENT)
        if value is None:
            continue  # the client has no data for this key
        if isinstance(value, dict) and not _is_outcome(value):
            await work.sent(key, value)
        else:
            await work.fetch(key, relative, required, why_not)
    await work.locations()
    if work.merge.problems:
        raise CdsError(422, work.merge.problems)
    if work.missing:
        raise CdsError(412, work.missing)
    work.out.bundle, work.out.origins = work.merge.bundle()
    return work.out


_ABSENT: Any = object()
_ENTRY = re.compile(r"^Bundle\.entry\[(\d+)\](\.resource)?")


def locate(expression: str, origins: list[str]) -> str:
    """A reader's ``Bundle.entry[i].resource...`` path, rewritten to where entry i came from
    (``prefetch.bloodGases.entry[3].resource...``)."""
    match = _ENTRY.match(expression)
    if match is None or int(match[1]) >= len(origins):
        return expression
    return origins[int(match[1])] + expression[match.end() :]
