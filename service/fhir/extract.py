"""A FHIR Bundle (parsed JSON) as an ``Intake``: the entry point of the FHIR adapter.

``read_bundle`` walks the dicts ``orjson`` produced, narrowly: it reads ``Patient`` (birthDate
and gender, never name or identifier), ``Observation``, ``Location`` (``position.altitude``)
and ``Specimen`` (for the type of "Bld" results); any other resource is reported as
``resource-ignored``. It accepts every Bundle type. fhir.resources is not used here
(R4B model validation costs 51–95× a JSON parse: README, Performance); the optional strict
check is ``service.fhir.models.validate_strict``.

Two kinds of trouble, kept apart:

* the input is not a usable Bundle (wrong JSON type, a required element missing, a unit the
  quantity cannot take, a bad dateTime): every such problem is collected, located by FHIRPath,
  and raised once as ``BundleError`` (HTTP 422);
* the Bundle is usable but something in it cannot be used (an entered-in-error Observation, an
  unknown code, an impossible value, an unknown specimen): an ``IntakeIssue`` is reported and
  reading goes on. An impossible value (``value-out-of-range``, severity error) is dropped, not
  the whole Bundle: the rest is still assessed, and the error finding tells the rules that the
  data cannot be fully trusted (docs/clinical-logic.md, "Trust the data first").

One reader, each reading rule written once. Each element is read where the reading order
puts it: first its usual shape is tested with ``type()`` and builds no FHIRPath, so a
well-formed Bundle costs only those tests; only when the test fails is the element read again
by the located readers (``service.fhir.shape``), which record what is wrong and where.
Nothing is recorded before that point, so problems and issues come in the same order whatever
the shape. Locations are built from the entry index and the element names only when something
is recorded (the entry's own ``Bundle.entry[i].resource`` excepted: every measurement keeps it
as its source). What is shared is written once: the codes (``observation.identify``), units
and values (``values``, ``intake.reading``), times (``dates``), references (``references``),
the finite-number rule (``shape.finite_float``) and the building of a measurement
(``ObservationReader._measured``). ``tests/fhir/test_usual_shape.py`` checks the outcome of
each departure from the usual shape.

Why not one typed decode (msgspec Structs) in place of the hand-written reader, measured on the demo
Bundle: converting the parsed Bundle into narrow Structs costs about 0.5× ``orjson.loads`` and
decoding its bytes into them 0.8–1.1×, but a Struct declares a shape unconditionally, and this
reader's errors are conditional: a ``valueQuantity`` is read, and its faults located, only when
the code is one the service reads (a wrong value under an unknown code is an ignored
Observation, not a refused Bundle), a ``referenceRange`` only for a DLCO, a ``specimen`` only for
a "Bld" code. A diagnosis derived from the Structs would refuse Bundles accepted today, so the
located reading stays hand-written. Per Observation, a Struct with the usual shape (other
elements forbidden) converts in 1.6–1.8 µs against 0.75 µs for the type tests of the usual
shape. Most of the reader's time is the work after the shape (codes, units, times, references)
and the records it returns; those records are msgspec Structs (``service.intake.model``).
"""

from __future__ import annotations

import msgspec

from service.fhir import addresses, codes
from service.fhir.dates import parse_date
from service.fhir.observation import ObservationReader
from service.fhir.outcome import NotABundleError, Problem, TooLargeError, error
from service.fhir.references import (
    FHIR_ID,
    BundleIndex,
    own_reference,
    resource_reference,
    type_and_id,
)
from service.fhir.shape import (
    Collector,
    JsonObject,
    as_object,
    finite_float,
    json_type,
    member_list,
    member_number,
    member_object,
    refuse_modifiers,
)
from service.fhir.shape import member_str as text
from service.intake.limits import DEFAULT_READ_LIMITS, ReadLimits
from service.intake.model import Intake, Measurement, Patient, Quantity, Severity, Source
from service.intake.plausibility import out_of_range
from service.terminology.local_codes import LocalCodeMap

_READ = frozenset({"Patient", "Observation", "Location", "Specimen"})
_REFUSE_MODIFIERS = frozenset({"Patient", "Location", "Specimen"})  # an Observation's: its reader
_REQUEST_WITHOUT_RESOURCE = frozenset({"GET", "HEAD", "DELETE"})


class _Entry(msgspec.Struct, frozen=True, gc=False):
    """One entry read. A msgspec Struct: built in C, about 2.7× faster than a slotted
    dataclass (62 against 170 ns)."""

    index: int
    resource: JsonObject
    kind: str
    full_url: str | None
    reference: str  # resource_reference(resource, full_url)
    at: str  # Bundle.entry[index].resource


# ``Bundle.entry[i].resource`` of the first entries, and how the result names them, formed
# once per process (every entry's location is kept as the source of what it gives).
_ENTRY_AT = tuple(f"Bundle.entry[{i}].resource" for i in range(256))
_ENTRY_WORDS = tuple(f"entry {i} of the input Bundle" for i in range(256))  # for the result


def read_bundle(
    data: object,
    *,
    concept_map: LocalCodeMap | None = None,
    limits: ReadLimits = DEFAULT_READ_LIMITS,
) -> Intake:
    """Read one patient's Bundle into measurements in canonical units, with issues.

    Args:
        data: the parsed JSON body (``orjson.loads``).
        concept_map: the site's local-code map, if any.
        limits: the most entries read and issues listed (``service.intake.limits``).

    Raises:
        NotABundleError: ``data`` is not a FHIR Bundle at all (HTTP 400).
        TooLargeError: more entries than ``limits.max_entries`` (HTTP 413).
        BundleError: a Bundle the service cannot read; lists every problem (HTTP 422).
    """
    bundle = _bundle_object(data)
    _within_limits(bundle, limits.max_entries)
    out = Collector()
    # Bundle.type is 1..1 in FHIR: a Bundle without one is refused, not guessed at.
    refuse_modifiers(bundle, "Bundle", out, resource=True)
    kind = bundle.get("type")
    if type(kind) is not str or kind not in codes.BUNDLE_TYPES:  # not the usual shape
        kind = text(bundle, "type", "Bundle", out, required=True)
    if kind is not None and kind not in codes.BUNDLE_TYPES:
        out.problem("code-invalid", "not an R4 Bundle type", "Bundle.type")
    index = BundleIndex()
    entries = _entries(bundle, index, out)
    reader = ObservationReader(out, index, concept_map)
    subjects = _Subjects(index, out)
    patient: Patient | None = None
    measurements: list[Measurement] = []
    for entry in entries:
        if entry.kind == "Observation":
            measurements.extend(reader.read(entry.resource, entry.at, entry.reference))
            subjects.observation(entry)
        elif entry.kind == "Patient":
            patient = _patient(entry, patient, subjects, out)
        elif entry.kind == "Location":
            measurements.extend(_altitude(entry, out))
        elif entry.kind != "Specimen":
            # Named only when FHIR defines the type: the sender's text is never quoted.
            if entry.kind in codes.RESOURCE_TYPES:
                message = f"{entry.kind} resources are not read"
            else:
                message = "resources of a type FHIR R4B does not define are not read"
            out.issue("resource-ignored", Severity.INFORMATION, message, entry.at)
    if patient is None and subjects.first is not None and subjects.first.startswith("#"):
        patient = _contained_patient(entries, subjects.first, subjects, out)
    out.raise_problems(limits.max_issues)
    if patient is None and subjects.first is not None:
        patient = Patient(reference=subjects.first, birth_date=None, gender=None)
    issues = out.listed_issues(limits.max_issues)
    intake = Intake(patient=patient, measurements=measurements, issues=issues)
    intake.addresses = _addresses(entries, subjects)
    return intake


def _addresses(entries: list[_Entry], subjects: _Subjects) -> dict[str, dict[str, object]]:
    """How the result points at each resource read and each subject named
    (``service.fhir.addresses``); the first entry with a reference wins."""
    found: dict[str, dict[str, object]] = {}
    for entry in entries:
        if entry.reference and entry.reference not in found:
            i = entry.index
            where = _ENTRY_WORDS[i] if i < 256 else f"entry {i} of the input Bundle"
            found[entry.reference] = addresses.of_entry(
                entry.kind, entry.full_url, entry.resource, where
            )
    for reference, (holder, contained) in subjects.unresolved.items():
        if reference in found:
            continue
        if contained is not None:
            where = f"contained in entry {holder.index} of the input Bundle"
            found[reference] = addresses.of_entry("Patient", None, contained, where)
        else:
            found[reference] = addresses.of_reference(reference, holder.full_url, "Patient")
    return found


def _contained_patient(
    entries: list[_Entry], reference: str, subjects: _Subjects, out: Collector
) -> Patient | None:
    """The Patient a ``#id`` subject names, read from the contained resources of the first
    Observation that holds it (FHIR: a contained resource is known only to its container)."""
    for entry in entries:
        if entry.kind != "Observation" or subject_reference(entry.resource) != reference:
            continue
        contained = entry.resource.get("contained")
        if not isinstance(contained, list):
            continue
        for j, item in enumerate(contained):
            if (
                isinstance(item, dict)
                and item.get("resourceType") == "Patient"
                and item.get("id") == reference[1:]
            ):
                at = f"{entry.at}.contained[{j}]"
                subjects.unresolved[reference] = (entry, item)
                inner = _Entry(entry.index, item, "Patient", None, reference, at)
                return _read_patient(inner, out)
    return None


def _within_limits(bundle: JsonObject, limit: int) -> None:
    """Refuse a Bundle with more than ``limit`` entries, an Observation's components counting
    as entries too (each is read as one more value: 20,000 components in one Observation took
    3 s and a 10 MB answer before they counted)."""
    entries = bundle.get("entry")
    if not isinstance(entries, list):
        return
    problem = None
    if len(entries) > limit:
        problem = f"the Bundle has more than {limit} entries", "Bundle.entry"
    else:
        count = len(entries)
        for i, item in enumerate(entries):
            resource = item.get("resource") if type(item) is dict else None
            if type(resource) is not dict or "component" not in resource:
                continue  # most entries: no components to count
            components = resource["component"]
            if isinstance(components, list):
                count += len(components)
                if count > limit:
                    where = f"Bundle.entry[{i}].resource.component"
                    problem = f"the Bundle has more than {limit} entries and components", where
                    break
    if problem is not None:
        message = (
            f"{problem[0]} (setting OXYRULE_MAX_BUNDLE_ENTRIES, components counted as "
            "entries); send one patient's recent data"
        )
        raise TooLargeError([Problem("error", "too-long", message, problem[1])])


def _bundle_object(data: object) -> JsonObject:
    where = ""  # no FHIRPath names anything in a body that is not a resource
    if not isinstance(data, dict):
        found = f"JSON {json_type(data)}"
    elif data.get("resourceType") == "Bundle":
        return data
    elif not isinstance(kind := data.get("resourceType"), str):
        found = "an object without a FHIR resourceType"
    elif kind in codes.RESOURCE_TYPES:  # named only when FHIR defines it: never the sender's text
        found = f"a {kind} resource"
        where = kind  # the resource sent, as FHIRPath
    else:
        found = "a resourceType FHIR R4B does not define"
    diagnostics = f"expected a FHIR Bundle resource (resourceType 'Bundle'), got {found}"
    raise NotABundleError([error("structure", diagnostics, where)])


def _entries(bundle: JsonObject, index: BundleIndex, out: Collector) -> list[_Entry]:
    """Check the entries' shape and index the resources read (references may point forward)."""
    items = member_list(bundle, "entry", "Bundle", out) or []
    found: list[_Entry] = []
    for i, item in enumerate(items):
        if type(item) is dict and "modifierExtension" in item:
            refuse_modifiers(item, f"Bundle.entry[{i}]", out)
            continue
        entry = _entry(i, item, index, out)
        if entry is not None:
            if entry.kind in _REFUSE_MODIFIERS and _has_modifier(entry.resource):
                refuse_modifiers(entry.resource, entry.at, out, resource=True)
            found.append(entry)
    return found


def _entry(i: int, item: object, index: BundleIndex, out: Collector) -> _Entry | None:
    """Any entry, indexed when its resource is read; None when there is no resource to read.

    The usual shape is tested first with ``type()`` and records nothing: a resource object,
    a fullUrl absent or not blank, a resourceType, and for a resource the service reads an id
    absent or a FHIR id. Anything else is read again below, every problem located.
    """
    if type(item) is dict:
        resource, full_url = item.get("resource"), item.get("fullUrl")
        if type(resource) is dict and (
            (type(full_url) is str and full_url.strip())
            or (full_url is None and "fullUrl" not in item)
        ):
            kind, rid = resource.get("resourceType"), resource.get("id")
            at = _ENTRY_AT[i] if i < 256 else f"Bundle.entry[{i}].resource"
            if type(kind) is not str:
                pass
            elif kind not in _READ:
                if kind.strip():
                    reference = resource_reference(resource, full_url)
                    return _Entry(i, resource, kind, full_url, reference, at)
            elif rid is None and "id" not in resource:
                index.add(i, resource, full_url)
                return _Entry(i, resource, kind, full_url, full_url or "", at)
            elif (own := own_reference(kind, rid)) is not None:
                index.add(i, resource, full_url, own)
                return _Entry(i, resource, kind, full_url, own, at)
    return _located_entry(i, item, index, out)


def _located_entry(i: int, item: object, index: BundleIndex, out: Collector) -> _Entry | None:
    """``_entry`` for any shape: every problem recorded where it is."""
    at = f"Bundle.entry[{i}]"
    entry = as_object(item, at, out)
    if entry is None:
        return None
    full_url = text(entry, "fullUrl", at, out)
    if "resource" not in entry and _request_only(entry):
        message = "a request without a resource: nothing to read"
        out.issue("resource-ignored", Severity.INFORMATION, message, at)
        return None
    res = member_object(entry, "resource", at, out, required=True)
    if res is None:
        return None
    resource, res_at = res
    kind = text(resource, "resourceType", res_at, out, required=True)
    if kind is None:
        return None
    if kind in _READ:
        rid = text(resource, "id", res_at, out)
        if rid is not None and not FHIR_ID.fullmatch(rid):
            out.problem("value", "not a FHIR id (1-64 of A-Z a-z 0-9 - .)", f"{res_at}.id")
        index.add(i, resource, full_url)
    reference = resource_reference(resource, full_url)
    return _Entry(i, resource, kind, full_url, reference, res_at)


def _has_modifier(resource: JsonObject) -> bool:
    return "modifierExtension" in resource or "implicitRules" in resource


def _request_only(entry: JsonObject) -> bool:
    request = entry.get("request")
    if not isinstance(request, dict):
        return False
    method = request.get("method")
    return isinstance(method, str) and method in _REQUEST_WITHOUT_RESOURCE


_NOT_READ = object()  # a subject reference that says nothing about the patient


class _Subjects:
    """Checks that every Observation is about the same patient (one patient per Bundle)."""

    def __init__(self, index: BundleIndex, out: Collector) -> None:
        self.index, self.out = index, out
        self.first: str | None = None  # the first subject reference seen, for Intake.patient
        # Subject references that name no entry: the entry holding each (the first seen) and,
        # for a ``#id`` reference, the contained Patient once found.
        self.unresolved: dict[str, tuple[_Entry, JsonObject | None]] = {}
        self._key: object = None
        # Subject reference -> what it points at; a Bundle repeats one reference many times.
        self._keys: dict[str, object] = {}

    def _agree(self, key: object, entry: _Entry, path: str) -> None:
        if self._key is None:
            self._key = key
        elif key != self._key:
            self.out.problem(
                "invalid",
                "this resource is about another patient than the rest of the Bundle; "
                "send one patient's data per Bundle",
                entry.at + path,
            )

    def patient(self, entry: _Entry) -> None:
        reference = entry.reference
        if not reference:
            return  # neither id nor fullUrl: nothing can point at it, nothing to compare
        self._agree(("entry", self.index.resolve(reference)), entry, "")

    def observation(self, entry: _Entry) -> None:
        # ``subject_reference``, written out (once per Observation): the usual shape first.
        subject = entry.resource.get("subject")
        reference = subject.get("reference") if type(subject) is dict else None
        if type(reference) is not str or not reference.strip():
            reference = self._located_reference(entry)
            if reference is None:
                return
        key = self._keys.get(reference)
        if key is None:
            key = self._keys[reference] = self._key_of(reference)
            if isinstance(key, tuple) and key[0] == "reference":
                self.unresolved.setdefault(reference, (entry, None))
        if key is _NOT_READ:
            return
        if self.first is None:
            self.first = reference
        if key is not self._key:  # the same reference gives the same key object
            self._agree(key, entry, ".subject.reference")

    def _located_reference(self, entry: _Entry) -> str | None:
        """``subject.reference`` of any shape, its faults recorded where they are (after
        ``subject_reference`` found no usable one: another JSON type, a blank string)."""
        found = member_object(entry.resource, "subject", entry.at, self.out)
        return None if found is None else text(found[0], "reference", found[1], self.out)

    def _key_of(self, reference: str) -> object:
        """The patient a subject reference names, or ``_NOT_READ`` for another subject."""
        target = self.index.resolve(reference)
        if target is None and "?" in reference:
            target = self._conditional_target(reference)
        if target is not None:
            if self.index.resources[target].get("resourceType") != "Patient":
                return _NOT_READ  # a Group, Device or Location subject says nothing about it
            return ("entry", target)
        if "?" in reference and not reference.startswith("Patient?"):
            return _NOT_READ
        typed = type_and_id(reference)
        if typed is not None and not typed.startswith("Patient/"):
            return _NOT_READ
        return ("reference", typed or reference)

    def _conditional_target(self, reference: str) -> int | None:
        """The entry a conditional reference (``Patient?identifier=system|value``, legal in a
        transaction) names: the Patient of the Bundle with that identifier, as a server would
        resolve it when processing the transaction; None when no entry has it."""
        named = addresses.of_reference(reference, None)
        identifier = named.get("identifier")
        if named.get("type") != "Patient" or not isinstance(identifier, dict):
            return None
        for entry, resource in self.index.resources.items():
            if resource.get("resourceType") != "Patient":
                continue
            identifiers = resource.get("identifier")
            for item in identifiers if isinstance(identifiers, list) else ():
                if (
                    isinstance(item, dict)
                    and item.get("value") == identifier.get("value")
                    and item.get("system") == identifier.get("system")
                ):
                    return entry
        return None


def subject_reference(resource: JsonObject) -> str | None:
    """``subject.reference`` of an Observation when it is a usable string, else None; records
    nothing (``_Subjects._located_reference`` says what is wrong with any other)."""
    subject = resource.get("subject")
    if type(subject) is not dict:
        return None
    reference = subject.get("reference")
    return reference if type(reference) is str and reference.strip() else None


def _patient(
    entry: _Entry, previous: Patient | None, subjects: _Subjects, out: Collector
) -> Patient | None:
    subjects.patient(entry)
    if previous is not None:
        return previous  # a second, different Patient was reported by _Subjects
    return _read_patient(entry, out)


def _read_patient(entry: _Entry, out: Collector) -> Patient:
    """birthDate and gender of a Patient (never its name or identifiers)."""
    at, resource = entry.at, entry.resource
    birth_date = None
    born = resource.get("birthDate")
    if type(born) is not str or not born.strip():  # not the usual shape: read it located
        born = text(resource, "birthDate", at, out)
    if born is not None:
        try:
            birth_date, full = parse_date(born)
        except ValueError as exc:
            out.problem("value", str(exc), f"{at}.birthDate")
        else:
            if not full:
                out.issue(
                    "time-imprecise",
                    Severity.WARNING,
                    "birthDate without a day: age is counted from the first day of the period",
                    f"{at}.birthDate",
                )
    gender = resource.get("gender")
    if type(gender) is not str or gender not in codes.ADMINISTRATIVE_GENDERS:
        gender = text(resource, "gender", at, out)
        if gender is not None and gender not in codes.ADMINISTRATIVE_GENDERS:
            out.problem("code-invalid", "not an R4 administrative gender", f"{at}.gender")
            gender = None
    return Patient(reference=entry.reference, birth_date=birth_date, gender=gender)


def _altitude(entry: _Entry, out: Collector) -> list[Measurement]:
    """``Location.position.altitude`` (metres, per R4) as an ALTITUDE measurement."""
    position = entry.resource.get("position")
    altitude = None
    if type(position) is dict and "modifierExtension" not in position:  # the usual shape
        sent = position.get("altitude")
        if type(sent) is int or type(sent) is float:
            altitude = finite_float(sent)
    if altitude is None:  # anything else is read again, located
        found = member_object(entry.resource, "position", entry.at, out)
        if found is None or refuse_modifiers(found[0], found[1], out):
            return []
        altitude = member_number(found[0], "altitude", found[1], out)
        if altitude is None:
            return []
    reason = out_of_range(Quantity.ALTITUDE, altitude)
    if reason is not None:
        at = f"{entry.at}.position.altitude"
        message = f"altitude is impossible: {reason}; the value is not used"
        out.issue("value-out-of-range", Severity.ERROR, message, at)
        return []
    at = f"{entry.at}.position.altitude"
    return [Measurement(Quantity.ALTITUDE, altitude, None, Source(entry.reference, at))]
