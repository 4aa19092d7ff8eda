"""One FHIR Observation (and its components) as intake measurements.

What is read: ``status``, ``code.coding`` (LOINC or the project input codes, then local codes
through the site ConceptMap), ``meta.profile`` (US Core pulse oximetry), ``effective[x]`` or
``issued``, ``valueQuantity`` / ``valueCodeableConcept``, ``dataAbsentReason``, ``specimen``
and ``component``. Each component with a known code becomes its own measurement, at the time
of its parent (US Core puts O2 flow 3151-8 and concentration 3150-0 there).

Status: ``final``, ``amended``, ``corrected`` and ``preliminary`` are used (blood-gas analysers
release results as preliminary routinely). ``entered-in-error``, ``cancelled`` and
``registered`` (no result yet) are ignored and said so; ``unknown`` is ignored with a warning,
because the sender cannot say whether the value stands. Any other status refuses the Bundle.
"""

from __future__ import annotations

from dataclasses import replace
from datetime import datetime

from service.fhir import codes as fhir_codes
from service.fhir.dates import effective_time, precise_time
from service.fhir.references import BundleIndex
from service.fhir.shape import (
    Collector,
    JsonObject,
    member_list,
    member_object,
    objects,
    refuse_modifiers,
    str_items,
)
from service.fhir.shape import member_str as text
from service.fhir.specimens import observation_specimen
from service.fhir.values import read_coded, read_quantity
from service.intake.model import CODED, Measurement, Quantity, Severity, Source, Specimen
from service.intake.reading import Reading
from service.terminology import codes
from service.terminology.codes import Concept
from service.terminology.local_codes import LocalCodeMap

# The elements of a usual Observation: everything the reader ignores, plus ``status``,
# ``code``, ``effectiveDateTime``, ``issued``, ``valueQuantity`` and ``specimen``. When an
# Observation has no others (one set comparison), the reader need not look for the unusual
# ones one by one: modifiers, components, another value[x] or effective[x], dataAbsentReason.
_USUAL_ELEMENTS = frozenset(
    {
        "resourceType", "id", "meta", "language", "text", "contained",
        "extension", "identifier", "basedOn", "partOf", "status",
        "category", "code", "subject", "focus", "encounter", "effectiveDateTime", "issued",
        "performer", "valueQuantity", "interpretation", "note", "bodySite", "method",
        "specimen", "device", "referenceRange", "hasMember", "derivedFrom",
    }
)  # fmt: skip
_USED = fhir_codes.OBSERVATION_STATUS_USED


class ObservationReader:
    """Reads Observations of one Bundle; shares the Bundle index and the issue collector.

    One reader, every problem located. Each element is read where the reading order puts it:
    first the usual shape is tested with ``type()`` and builds no FHIRPath (the cost of
    reading a well-formed Observation); only when the test fails is the element read again by
    the located readers of ``service.fhir.shape``, which record what is wrong and where.
    Nothing is recorded before that point, so the problems and issues come in the same order
    whatever the shape. (Why hand-written rather than msgspec Structs: the module docstring
    of ``service.fhir.extract``.)
    """

    __slots__ = ("_specimens", "_times", "concept_map", "index", "out")

    def __init__(
        self, out: Collector, index: BundleIndex, concept_map: LocalCodeMap | None = None
    ) -> None:
        # A plain __init__: one reader is made per Bundle, and a dataclass's default
        # factories cost about twice as much.
        self.out, self.index, self.concept_map = out, index, concept_map
        self._specimens: dict[str, tuple[Specimen, bool]] = {}
        self._times: dict[str, datetime] = {}

    def read(self, resource: JsonObject, at: str, reference: str) -> list[Measurement]:
        """The measurements of the Observation at ``at`` (``Bundle.entry[i].resource``)."""
        out = self.out
        usual = _USUAL_ELEMENTS.issuperset(resource)  # (faster than keys() <=)
        if not usual and refuse_modifiers(resource, at, out, resource=True):
            return []
        status = resource.get("status")
        if (type(status) is not str or status not in _USED) and not self._status_allows_use(
            resource, at
        ):
            return []
        codings = _code(resource, at, out)
        if codings is None:
            return []
        concept = identify(codings, _profiles(resource, at, out), self.concept_map)
        if concept is None and (usual or "component" not in resource):
            self._ignore_unknown(codings, at)
            return []
        # The time: a usual effectiveDateTime seen before in this Bundle is taken as parsed
        # then (``_time``, which parses and keeps it, or reads any other shape located).
        sent = resource.get("effectiveDateTime")
        time = self._times.get(sent) if usual and type(sent) is str else None
        if time is None:
            time = self._time(resource, at, usual)
        if not usual or concept is None:  # (usual, an unknown code was ignored above)
            return self._values(resource, at, concept, codings, time, reference)
        # The value of a usual Observation: no component, and valueQuantity the only value[x]
        # it can have (read directly when it is an object and the quantity is not coded).
        q = resource.get("valueQuantity")
        if type(q) is dict and concept.quantity not in CODED:
            reading = read_quantity(q, at, concept, out, key="valueQuantity")
        elif "valueQuantity" in resource:
            reading = _value(resource, at, concept, out)
        else:
            out.issue("observation-ignored", Severity.INFORMATION, "no value sent", at)
            return []
        return self._measured(reading, resource, at, at, concept, time, reference)

    def _values(
        self,
        resource: JsonObject,
        at: str,
        concept: Concept | None,
        codings: list[tuple[str, str]],
        time: datetime | None,
        reference: str,
    ) -> list[Measurement]:
        """The values of any Observation: its value[x] and its components."""
        out = self.out
        measurements: list[Measurement] = []
        used = False
        if concept is not None:
            used = True
            if _has_value(resource):
                reading = _value(resource, at, concept, out)
                measurements += self._measured(reading, resource, at, at, concept, time, reference)
            elif "component" not in resource:
                out.issue("observation-ignored", Severity.INFORMATION, "no value sent", at)
        unknown: list[str] = []
        if self._components(measurements, resource, at, time, reference, unknown):
            used = True
        if used:
            for comp_code_at in unknown:
                message = "component: no code the service reads"
                out.issue("observation-ignored", Severity.INFORMATION, message, comp_code_at)
        else:
            self._ignore_unknown(codings, at)
        return measurements

    def _time(self, resource: JsonObject, at: str, usual: bool) -> datetime | None:
        """When the Observation was made (``dates.effective_time``). The usual
        ``effectiveDateTime`` with a time and a zone is parsed once per Bundle and records
        nothing; anything else is read by ``effective_time``, which says what is wrong."""
        sent = resource.get("effectiveDateTime")
        if usual and type(sent) is str:  # usual: no other effective[x] beside it
            time = self._times.get(sent)
            if time is None:
                time = precise_time(sent)
                if time is not None:
                    self._times[sent] = time
            if time is not None:
                return time
        return effective_time(resource, at, self.out)

    def _components(
        self,
        measurements: list[Measurement],
        resource: JsonObject,
        at: str,
        time: datetime | None,
        reference: str,
        unknown: list[str],
    ) -> bool:
        """Read each component; whether one was used (the codes of the others in ``unknown``)."""
        out, used = self.out, False
        components = member_list(resource, "component", at, out) or []
        for component, comp_at in objects(components, f"{at}.component", out):
            if refuse_modifiers(component, comp_at, out):
                continue
            if self._component(measurements, resource, at, component, comp_at, time, reference):
                used = True
            else:
                unknown.append(f"{comp_at}.code")
        return used

    def _ignore_unknown(self, codings: list[tuple[str, str]], at: str) -> None:
        # The codes sent are not quoted (an error names the element, never what it holds).
        count = len(codings)
        named = "no coding" if not count else f"{count} coding{'s' if count > 1 else ''} sent"
        message = f"no code the service reads ({named})"
        self.out.issue("observation-ignored", Severity.INFORMATION, message, f"{at}.code")

    def _status_allows_use(self, resource: JsonObject, at: str) -> bool:
        """Whether a status other than the usual ones (``OBSERVATION_STATUS_USED``) lets the
        Observation be used: never, and the reader says why."""
        status = text(resource, "status", at, self.out, required=True)
        if status is None:
            return False
        if status not in fhir_codes.OBSERVATION_STATUSES:
            self.out.problem("code-invalid", "not an R4 Observation status", f"{at}.status")
            return False
        if status in fhir_codes.OBSERVATION_STATUS_IGNORED:
            severity = Severity.WARNING if status == "unknown" else Severity.INFORMATION
            message = f"status '{status}': the Observation is not used"
            self.out.issue("observation-ignored", severity, message, f"{at}.status")
            return False
        return True

    def _component(
        self,
        found: list[Measurement],
        parent: JsonObject,
        parent_at: str,
        component: JsonObject,
        at: str,
        time: datetime | None,
        reference: str,
    ) -> bool:
        codings = _code(component, at, self.out)
        if codings is None:
            return False
        concept = identify(codings, [], self.concept_map)
        if concept is None:
            return False
        if not _has_value(component):
            self.out.issue("observation-ignored", Severity.INFORMATION, "no value sent", at)
            return True
        reading = _value(component, at, concept, self.out)
        found += self._measured(reading, component, at, parent_at, concept, time, reference, parent)
        return True

    def _measured(
        self,
        reading: Reading | None,
        holder: JsonObject,
        at: str,
        observation_at: str,
        concept: Concept,
        time: datetime | None,
        reference: str,
        observation: JsonObject | None = None,
    ) -> list[Measurement]:
        """The measurements of the value read at ``at`` (none when it could not be used):
        the value, and the lower limit of normal of a DLCO."""
        if reading is None:
            return []
        # The quantity of a "Bld" code follows the specimen of the Observation.
        quantity, specimen = concept.quantity, concept.specimen
        if concept.by_specimen is not None:
            specimen, known = self._specimen(observation or holder, observation_at)
            if known:
                quantity = concept.by_specimen.get(specimen, quantity)
        found = [
            Measurement(
                quantity,
                reading.value,
                time,
                Source(reference, at),
                specimen,
                reading.sent_value,
                reading.sent_unit,
                concept.fio2_source,
            )
        ]
        if concept.lower_limit is not None:
            self._lower_limit(found, holder, at, concept, time, reference)
        return found

    def _lower_limit(
        self,
        found: list[Measurement],
        holder: JsonObject,
        at: str,
        concept: Concept,
        time: datetime | None,
        reference: str,
    ) -> None:
        """The lower limit of normal of a value (``referenceRange[0].low``), as its own quantity."""
        assert concept.lower_limit is not None
        ranges = member_list(holder, "referenceRange", at, self.out) or []
        for item, item_at in objects(ranges, f"{at}.referenceRange", self.out):
            if refuse_modifiers(item, item_at, self.out):
                return
            low = member_object(item, "low", item_at, self.out)
            if low is not None:
                limit = replace(concept, quantity=concept.lower_limit, lower_limit=None)
                reading = read_quantity(low[0], low[1], limit, self.out)
                if reading is not None:
                    found.append(
                        Measurement(
                            concept.lower_limit,
                            reading.value,
                            time,
                            Source(reference, low[1]),
                            sent_value=reading.sent_value,
                            sent_unit=reading.sent_unit,
                        )
                    )
            return  # the first range is the normal range (FHIR: several are alternatives)

    def _specimen(self, observation: JsonObject, at: str) -> tuple[Specimen, bool]:
        """The Observation's specimen (resolved once per Observation) and whether it is known."""
        if at not in self._specimens:
            finding = observation_specimen(observation, at, self.index, self.out)
            known = finding.specimen is not Specimen.UNKNOWN
            if not known:
                self.out.issue(
                    "specimen-unknown",
                    Severity.WARNING,
                    f"blood sample of unstated type: {finding.reason}; not taken as arterial",
                    finding.expression,
                )
            self._specimens[at] = (finding.specimen, known)
        return self._specimens[at]


_DIRECT = codes.CONCEPTS_BY_SYSTEM
_SPO2 = codes.LOINC_CONCEPTS[codes.SPO2_LOINC]
_ARTERIAL_SO2 = Quantity.ARTERIAL_SO2  # an Enum member looked up once: 60 ns a look-up


def identify(
    codings: list[tuple[str, str]], profiles: list[str], concept_map: LocalCodeMap | None
) -> Concept | None:
    """The first known coding wins; local codes only when no coding is known directly."""
    concept = None
    for system, code in codings:
        table = _DIRECT.get(system)
        if table is not None:
            concept = table.get(code)
            if concept is not None:
                break
    if concept is None and concept_map is not None:
        mapped = (concept_map.loinc_for(s, k) for s, k in codings)
        loinc = next((m for m in mapped if m is not None), None)
        concept = None if loinc is None else codes.LOINC_CONCEPTS[loinc]
    if (
        concept is not None
        and concept.quantity is _ARTERIAL_SO2
        and _says_pulse_oximetry(codings, profiles)
    ):
        concept = _SPO2
    return concept


def _code(holder: JsonObject, at: str, out: Collector) -> list[tuple[str, str]] | None:
    """The (system, code) pairs of the ``code`` of an Observation or a component at ``at``;
    codings without both are skipped. None when there is no usable ``code`` (recorded)."""
    code = holder.get("code")
    if type(code) is dict:
        items = code.get("coding")
        if type(items) is list:
            # The usual shape: every coding an object with a system and a code.
            pairs: list[tuple[str, str]] = []
            for coding in items:
                if type(coding) is not dict:
                    break
                system, value = coding.get("system"), coding.get("code")
                if type(system) is not str or type(value) is not str:
                    break
                if not system.strip() or not value.strip():
                    break
                pairs.append((system, value))
            else:
                return pairs
    found = member_object(holder, "code", at, out, required=True)
    if found is None:
        return None
    code_obj, code_at = found
    pairs = []
    items = member_list(code_obj, "coding", code_at, out) or []
    for coding, coding_at in objects(items, f"{code_at}.coding", out):
        system = text(coding, "system", coding_at, out)
        value = text(coding, "code", coding_at, out)
        if system is not None and value is not None:
            pairs.append((system, value))
    return pairs


def _profiles(resource: JsonObject, at: str, out: Collector) -> list[str]:
    """``meta.profile`` of the Observation at ``at``; items that are not strings recorded."""
    meta = resource.get("meta")
    if type(meta) is dict:
        listed = meta.get("profile")
        if listed is None and "profile" not in meta:
            return []
        if type(listed) is list and all(type(item) is str for item in listed):
            return listed
    elif meta is None and "meta" not in resource:
        return []
    found = member_object(resource, "meta", at, out)
    return [] if found is None else str_items(found[0], "profile", found[1], out)


def _says_pulse_oximetry(codings: list[tuple[str, str]], profiles: list[str]) -> bool:
    """2708-6 is SpO2 when beside a pulse-oximetry code or in a US Core pulse-oximetry profile."""
    for system, code in codings:
        if system == codes.LOINC and code in codes.PULSE_OXIMETRY_LOINC:
            return True
        if system == codes.IEEE_11073 and code == codes.IEEE_PULSE_OXIMETRY:
            return True
    return any(p.split("|", 1)[0] == fhir_codes.US_CORE_PULSE_OXIMETRY for p in profiles)


def _value_keys(holder: JsonObject) -> list[str]:
    return [k for k in holder if k.startswith("value") and k[5:6].isupper()]


def _has_value(holder: JsonObject) -> bool:
    return bool(_value_keys(holder)) or "dataAbsentReason" in holder


def _value(holder: JsonObject, at: str, concept: Concept, out: Collector) -> Reading | None:
    """Read value[x] for ``concept``; report a dataAbsentReason or a value of the wrong type."""
    keys = _value_keys(holder)
    if len(keys) > 1:
        out.problem("structure", f"only one value[x] is allowed, got {', '.join(keys)}", at)
        return None
    if not keys:
        found = member_object(holder, "dataAbsentReason", at, out)
        if found is not None:
            out.issue(
                "observation-ignored",
                Severity.INFORMATION,
                "no value: the sender gave a dataAbsentReason",
                f"{at}.dataAbsentReason",
            )
        return None
    key = keys[0]
    expected = "valueCodeableConcept" if concept.quantity in CODED else "valueQuantity"
    if key != expected:
        out.issue(
            "observation-ignored",
            Severity.WARNING,
            f"{concept.quantity.value} is read from {expected}, not {key}",
            f"{at}.{key}",
        )
        return None
    value = holder[key]
    if type(value) is not dict:  # not the usual shape: a located reading says what it is
        found = member_object(holder, key, at, out)
        if found is None:
            return None
        value = found[0]
    if key == "valueCodeableConcept":
        return read_coded(value, f"{at}.{key}", concept.quantity, out)
    return read_quantity(value, at, concept, out, key=key)
