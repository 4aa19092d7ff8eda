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

from dataclasses import dataclass, field
from datetime import datetime

from service.fhir import codes
from service.fhir.codes import Concept
from service.fhir.concept_map import LocalCodeMap
from service.fhir.dates import effective_time
from service.fhir.references import BundleIndex
from service.fhir.shape import (
    Collector,
    JsonObject,
    member_list,
    member_object,
    objects,
    str_items,
)
from service.fhir.shape import member_str as text
from service.fhir.specimens import observation_specimen
from service.fhir.values import Reading, read_device, read_quantity
from service.intake.model import Measurement, Quantity, Severity, Source, Specimen


@dataclass(slots=True)
class ObservationReader:
    """Reads Observations of one Bundle; shares the Bundle index and the issue collector."""

    out: Collector
    index: BundleIndex
    concept_map: LocalCodeMap | None = None
    _specimens: dict[str, tuple[Specimen, bool]] = field(default_factory=dict)

    def read(self, resource: JsonObject, at: str, reference: str) -> list[Measurement]:
        """The measurements of the Observation at ``at`` (``Bundle.entry[i].resource``)."""
        out = self.out
        if not self._status_allows_use(resource, at):
            return []
        code_found = member_object(resource, "code", at, out, required=True)
        if code_found is None:
            return []
        code_obj, code_at = code_found
        codings = _codings(code_obj, code_at, out)
        meta = member_object(resource, "meta", at, out)
        profiles = str_items(meta[0], "profile", meta[1], out) if meta else []
        concept = self._identify(codings, profiles)
        if concept is None and "component" not in resource:
            self._ignore_unknown(codings, at)
            return []
        time = effective_time(resource, at, out)
        measurements: list[Measurement] = []
        used = False
        if concept is not None:
            used = True
            if _has_value(resource):
                self._add(measurements, resource, at, at, concept, time, reference)
            elif "component" not in resource:
                out.issue("observation-ignored", Severity.INFORMATION, "no value sent", at)
        components = member_list(resource, "component", at, out) or []
        unknown: list[str] = []
        for component, comp_at in objects(components, f"{at}.component", out):
            if self._component(measurements, resource, at, component, comp_at, time, reference):
                used = True
            else:
                unknown.append(f"{comp_at}.code")
        if used:
            for comp_code_at in unknown:
                message = "component: no code the service reads"
                out.issue("observation-ignored", Severity.INFORMATION, message, comp_code_at)
        else:
            self._ignore_unknown(codings, at)
        return measurements

    def _ignore_unknown(self, codings: list[tuple[str, str]], at: str) -> None:
        named = ", ".join(f"{s}|{c}" for s, c in codings[:3]) or "no coding"
        message = f"no code the service reads ({named})"
        self.out.issue("observation-ignored", Severity.INFORMATION, message, f"{at}.code")

    def _status_allows_use(self, resource: JsonObject, at: str) -> bool:
        status = text(resource, "status", at, self.out, required=True)
        if status is None:
            return False
        if status not in codes.OBSERVATION_STATUSES:
            self.out.problem("code-invalid", "not an R4 Observation status", f"{at}.status")
            return False
        if status in codes.OBSERVATION_STATUS_IGNORED:
            severity = Severity.WARNING if status == "unknown" else Severity.INFORMATION
            message = f"status '{status}': the Observation is not used"
            self.out.issue("observation-ignored", severity, message, f"{at}.status")
            return False
        return True

    def _identify(
        self, codings: list[tuple[str, str]], profiles: list[str] | None = None
    ) -> Concept | None:
        """The first known coding wins; local codes only when no coding is known directly."""
        concept = next(
            (c for c in (codes.concept_for(s, k) for s, k in codings) if c is not None), None
        )
        if concept is None and self.concept_map is not None:
            mapped = (self.concept_map.loinc_for(s, k) for s, k in codings)
            loinc = next((m for m in mapped if m is not None), None)
            concept = None if loinc is None else codes.LOINC_CONCEPTS[loinc]
        if (
            concept is not None
            and concept.quantity is Quantity.ARTERIAL_SO2
            and _says_pulse_oximetry(codings, profiles or [])
        ):
            concept = codes.LOINC_CONCEPTS[codes.SPO2_LOINC]
        return concept

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
        code_found = member_object(component, "code", at, self.out, required=True)
        if code_found is None:
            return False
        concept = self._identify(_codings(code_found[0], code_found[1], self.out))
        if concept is None:
            return False
        if not _has_value(component):
            self.out.issue("observation-ignored", Severity.INFORMATION, "no value sent", at)
            return True
        self._add(found, component, at, parent_at, concept, time, reference, parent)
        return True

    def _add(
        self,
        found: list[Measurement],
        holder: JsonObject,
        at: str,
        observation_at: str,
        concept: Concept,
        time: datetime | None,
        reference: str,
        observation: JsonObject | None = None,
    ) -> None:
        reading = _value(holder, at, concept, self.out)
        if reading is None:
            return
        quantity, specimen = concept.quantity, concept.specimen
        if concept.by_specimen is not None:
            specimen, known = self._specimen(observation or holder, observation_at)
            if known:
                quantity = concept.by_specimen.get(specimen, quantity)
        found.append(
            Measurement(
                quantity=quantity,
                value=reading.value,
                time=time,
                source=Source(reference, at),
                specimen=specimen,
                sent_value=reading.sent_value,
                sent_unit=reading.sent_unit,
                fio2_source=concept.fio2_source,
            )
        )

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


def _codings(code_obj: JsonObject, at: str, out: Collector) -> list[tuple[str, str]]:
    """The (system, code) pairs of a CodeableConcept; codings without both are skipped."""
    pairs: list[tuple[str, str]] = []
    items = member_list(code_obj, "coding", at, out) or []
    for coding, coding_at in objects(items, f"{at}.coding", out):
        system = text(coding, "system", coding_at, out)
        code = text(coding, "code", coding_at, out)
        if system is not None and code is not None:
            pairs.append((system, code))
    return pairs


def _says_pulse_oximetry(codings: list[tuple[str, str]], profiles: list[str]) -> bool:
    """2708-6 is SpO2 when beside a pulse-oximetry code or in a US Core pulse-oximetry profile."""
    for system, code in codings:
        if system == codes.LOINC and code in codes.PULSE_OXIMETRY_LOINC:
            return True
        if system == codes.IEEE_11073 and code == codes.IEEE_PULSE_OXIMETRY:
            return True
    return any(p.split("|", 1)[0] == codes.US_CORE_PULSE_OXIMETRY for p in profiles)


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
    expected = (
        "valueCodeableConcept" if concept.quantity is Quantity.OXYGEN_DEVICE else "valueQuantity"
    )
    if key != expected:
        out.issue(
            "observation-ignored",
            Severity.WARNING,
            f"{concept.quantity.value} is read from {expected}, not {key}",
            f"{at}.{key}",
        )
        return None
    found = member_object(holder, key, at, out)
    if found is None:
        return None
    if key == "valueCodeableConcept":
        return read_device(found[0], found[1], out)
    return read_quantity(found[0], found[1], concept, out)
