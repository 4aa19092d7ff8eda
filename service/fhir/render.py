"""Render an ``Assessment`` as the result Bundle (plain dicts, no models; README, What it answers).

Entries, in order: GuidanceResponse, Parameters (the machine-readable verdict, every finding
included), OperationOutcome (how the input was processed: what was not read, converted or
used, and the clinical caution), one DetectedIssue per data-quality finding (a problem with
the data sent), then derived Observations (among them the PaO2 deficit partition of the index
gas, one component per part, and the oxygen-response fit, ``oxygen_response``) and the
mechanism-assessment Observation (a component per mechanism, per clinical context finding and
for the gas-exchange status).

Entries have ``urn:uuid`` fullUrls and point at each other by them; input resources are pointed
at as ``service.fhir.addresses`` says (a literal reference only where the receiver can resolve
it). Built as dicts for speed; the tests validate every produced Bundle against the FHIR R4
JSON Schema and the R4 and R4B models (tests/conformance). Pressures leave in mm[Hg] unless
``pressure_unit`` is ``kPa``: the one place where canonical units are converted for display.
"""

from __future__ import annotations

import uuid
from collections.abc import Iterable, Mapping
from typing import Any
from urllib.parse import quote

from service.assess.derive import Derived, GasFacts
from service.assess.partition import GasPartitions, ShownPartition, assessment_partitions
from service.assess.presentation import QUANTITY_ORDER, PressureUnit, quantity, shown_quantity
from service.assess.result import CAUTION, Assessment, Finding, MechanismVerdict
from service.config import Settings
from service.engine import FindingCode
from service.fhir.addresses import of_reference
from service.fhir.oxygen_response import (
    oxygen_response_observation,
    oxygen_response_parameter,
    trend_parameter,
)
from service.physiology.deficit_steps import GAS_EXCHANGE, INSPIRED, UNATTRIBUTED, VENTILATION
from service.terminology.codes import ALTITUDE_RESIDENCE_CODES, UCUM
from service.terminology.codes import DERIVED_OBSERVATION_CODES as OBSERVATION_CODES

Json = dict[str, Any]


LOINC = "http://loinc.org"
BASE = "https://oxyrule.org/fhir/CodeSystem/"
FINDING_SYSTEM = BASE + "finding"
MECHANISM_SYSTEM = BASE + "hypoxaemia-mechanism"
GRADE_SYSTEM = BASE + "mechanism-grade"
PATTERN_SYSTEM = BASE + "hypoxaemia-pattern"
DERIVED_SYSTEM = BASE + "derived"
GAS_EXCHANGE_SYSTEM = BASE + "gas-exchange-status"
INTERPRETATION = "http://terminology.hl7.org/CodeSystem/v3-ObservationInterpretation"
CANONICAL = "https://oxyrule.org/fhir"

# Findings about processing the input (what was not read, converted or used): issues of the
# OperationOutcome, with the FHIRPath of the element in the input. The issue type says what
# happened to it (http://hl7.org/fhir/issue-type).
PROCESSING_ISSUE_TYPE = {
    "resource-ignored": "not-supported",
    "field-ignored": "not-supported",
    "observation-ignored": "not-supported",
    "unit-converted": "value",
    "unit-not-ucum": "value",
    "time-imprecise": "value",
    "value-outside-window": "informational",
}
# Clinical context findings: about the patient, not about the data; carried by the verdict
# (Parameters) and as components of the mechanism-assessment Observation.
CONTEXT_FINDINGS = frozenset(
    {
        FindingCode.HYPOXAEMIA_MILD,
        FindingCode.HYPOXAEMIA_MODERATE,
        FindingCode.HYPOXAEMIA_SEVERE,
        FindingCode.OXYGEN_MASKS_GAS_EXCHANGE_DEFECT,
        FindingCode.OXYGEN_MASKS_HYPERCAPNIA,
        FindingCode.HYPERCAPNIA,
        FindingCode.SPO2_ABOVE_TARGET_BAND,
        FindingCode.SPO2_BELOW_TARGET_BAND,
        FindingCode.EXERTIONAL_DESATURATION,
        FindingCode.METABOLIC_ALKALOSIS_COMPENSATION,
        FindingCode.RESPIRATORY_COMPENSATION_INADEQUATE,
        FindingCode.NORMAL_FOR_ALTITUDE,
        FindingCode.LOW_MIXED_VENOUS_OXYGEN,
        FindingCode.ACUTE_RESPIRATORY_ACIDOSIS,
        FindingCode.CHRONIC_RESPIRATORY_ACIDOSIS,
        FindingCode.FIO2_FOR_TARGET_PREDICTED,
        FindingCode.TARGET_BAND_UNREACHABLE,
    }
)
# DetectedIssue.severity (R4 detectedissue-severity) of a data-quality finding.
DETECTED_ISSUE_SEVERITY = {"error": "high", "warning": "moderate", "information": "low"}
# Derived values that take the FiO2: with an FiO2 estimated from the device and the flow, those
# Observations are among their sources too.
USES_FIO2 = frozenset(
    {
        "inspired-po2",
        "alveolar-po2",
        "aa-gradient",
        "pf-ratio",
        "sf-ratio",
        "a-a-ratio",
        "shunt-fraction",
    }
)

# The PaO2 deficit partition: the parts' names in the ``deficit`` parameter, and the codes (our
# CodeSystem .../derived, the names the derived values are filed under) and displays of the
# Observation and its components.
DEFICIT_PARTS = {
    INSPIRED: "inspired",
    VENTILATION: "ventilation",
    GAS_EXCHANGE: "gas-exchange",
    UNATTRIBUTED: "unattributed",
}
DEFICIT_OBSERVATION = ("pao2-deficit-partition", "PaO2 deficit partition")
DEFICIT_COMPONENTS = {
    "expected": ("pao2-expected", "PaO2 expected for age at sea level on air"),
    "fall": ("pao2-fall", "Fall of PaO2 below the expected value"),
    INSPIRED: ("deficit-inspired", "Part of the fall due to the inspired PO2 (altitude, FiO2)"),
    VENTILATION: ("deficit-ventilation", "Part of the fall due to the PaCO2 (ventilation)"),
    GAS_EXCHANGE: ("deficit-gas-exchange", "Part of the fall due to the A-a gradient"),
    UNATTRIBUTED: ("deficit-unattributed", "Part of the fall not attributed (no PaCO2)"),
}
RESIDENCE_COMPONENT = ("altitude-residence-assumed", "Residence at altitude assumed")


class _Links:
    """The fullUrls of the result's entries and the References to the input's resources."""

    def __init__(self, decision_id: str, addresses: Mapping[str, Json]) -> None:
        # Entry URLs derive from the decision id (its last 12 hex digits replaced by the
        # entry's number), so a result is reproducible apart from it and needs no hashing.
        self.prefix = str(uuid.UUID(decision_id))[:24]
        self.addresses = addresses
        self.urls: dict[str, str] = {}

    def entry(self, local_id: str) -> str:
        """The fullUrl of the result entry ``local_id`` (numbered in order of first use)."""
        url = self.urls.get(local_id)
        if url is None:
            url = self.urls[local_id] = f"urn:uuid:{self.prefix}{len(self.urls) + 1:012x}"
        return url

    def to_entry(self, local_id: str) -> Json:
        return {"reference": self.entry(local_id)}

    def to_input(self, reference: str) -> Json:
        """The Reference to an input resource, as ``service.fhir.addresses`` says."""
        found = self.addresses.get(reference)
        return dict(found) if found is not None else of_reference(reference, None)

    def to_source(self, reference: str) -> Json:
        """The Reference to a point's source as a module that does not know the result's
        addressing recorded it (the oxygen-response fit): an input's "Type/id" pointed at as
        ``service.fhir.addresses`` says; a urn or a contained "#id" as it is."""
        if reference.startswith(("urn:", "#")):
            return {"reference": reference}
        return self.to_input(reference)


def _finding_coding(f: Finding) -> Json:
    """A finding's code: from the rule set's own code system when it declared one."""
    return _coding(f.system or FINDING_SYSTEM, f.code, f.display)


def _coding(system: str, code: str, display: str | None = None) -> Json:
    coding: Json = {"system": system, "code": code}
    if display:
        coding["display"] = display
    return coding


def _mechanism_parameter(m: MechanismVerdict) -> Json:
    part: list[Json] = [
        {"name": "code", "valueCode": m.code},
        {"name": "grade", "valueCode": m.grade},
        {"name": "rationale", "valueString": m.rationale},
    ]
    part += [{"name": "rule", "valueString": rule} for rule in m.rules]
    if m.discriminator:
        part.append({"name": "discriminator", "valueString": m.discriminator})
    part += [{"name": "trace", "valueString": line} for line in m.trace]
    return {"name": "mechanism", "part": part}


def _finding_parameter(f: Finding, links: _Links) -> Json:
    part: list[Json] = [
        {"name": "code", "valueCode": f.code},
        {"name": "severity", "valueCode": f.severity},
        {"name": "message", "valueString": f.message},
    ]
    if f.subject is not None:
        part.append({"name": "subject", "valueReference": links.to_input(f.subject.reference)})
    if f.expression:
        part.append({"name": "expression", "valueString": f.expression})
    return {"name": "finding", "part": part}


class _Quantities:
    """Each derived value's Quantity, built once per render (the index gas's values appear both
    at the top level and in its ``gas`` parameter)."""

    def __init__(self, pressure_unit: PressureUnit) -> None:
        self.pressure_unit = pressure_unit
        self.built: dict[tuple[str, int], Json] = {}

    def of(self, name: str, d: Derived) -> Json:
        key = (name, id(d))
        found = self.built.get(key)
        if found is None:
            found = self.built[key] = shown_quantity(name, d, self.pressure_unit)
        return found

    def listed(self, derived: dict[str, Derived]) -> list[Json]:
        return [
            {"name": name, "valueQuantity": self.of(name, d)}
            for name in QUANTITY_ORDER
            if (d := derived.get(name)) is not None
        ]


def _gas_parameter(gas: GasFacts, index: bool, quantities: _Quantities, links: _Links) -> Json:
    part: list[Json] = []
    if gas.gas.anchor is not None:
        reference = links.to_input(gas.gas.anchor.source.reference)
        part.append({"name": "observation", "valueReference": reference})
    part.append({"name": "index", "valueBoolean": index})
    part += quantities.listed(gas.derived)
    part += _paired(gas, links)
    return {"name": "gas", "part": part}


def _paired(gas: GasFacts, links: _Links) -> list[Json]:
    """Each value paired with the gas and how long before it (negative: after) it was taken,
    so a reader can judge whether an Hb of yesterday or a DLCO of last spring still holds."""
    out: list[Json] = []
    anchor = gas.gas.anchor
    for quantity_, m in gas.gas.values.items():
        if m is anchor:
            continue
        offset = gas.gas.offset(quantity_)
        item: list[Json] = [
            {"name": "quantity", "valueCode": quantity_.value},
            {"name": "observation", "valueReference": links.to_input(m.source.reference)},
        ]
        if offset is not None:
            minutes = round(offset.total_seconds() / 60.0, 1)
            item.append(
                {
                    "name": "taken-before-gas",
                    "valueQuantity": {
                        "value": minutes,
                        "unit": "min",
                        "system": UCUM,
                        "code": "min",
                    },
                }
            )
        out.append({"name": "paired", "part": item})
    return out


def _pressure(name: str, value_mmhg: float, quantities: _Quantities) -> Json:
    return quantity(name, value_mmhg, "mm[Hg]", quantities.pressure_unit)


def _deficit_parameter(
    gas: GasPartitions, shown: ShownPartition | None, q: _Quantities, links: _Links
) -> Json:
    """One gas's partition (``shown``), or why it has none: parts in the requested pressure
    unit, positive where they lower the PaO2; absent parts are absent."""
    part: list[Json] = []
    if gas.reference is not None:
        part.append({"name": "observation", "valueReference": links.to_input(gas.reference)})
    part.append({"name": "index", "valueBoolean": gas.index})
    if shown is None:
        part.append({"name": "not-computed", "valueString": gas.absent or "not computable"})
        return {"name": "deficit", "part": part}
    if shown.residence is not None:
        part.append({"name": "altitude-residence", "valueCode": shown.residence})
        part.append({"name": "assumption", "valueString": shown.assumption})
    d = shown.partition
    basis = "imputed-from-spo2" if shown.imputed else "measured"
    part += [
        {"name": "pao2", "valueQuantity": _pressure("pao2", d.arterial_po2, q)},
        {"name": "pao2-basis", "valueCode": basis},
        {"name": "expected-pao2", "valueQuantity": _pressure("pao2-expected", d.expected_pao2, q)},
        {"name": "fall", "valueQuantity": _pressure("pao2-fall", d.fall, q)},
    ]
    part += [
        {"name": DEFICIT_PARTS[key], "valueQuantity": _pressure(f"deficit-{key}", value, q)}
        for key, value in shown.parts
    ]
    part.append({"name": "method", "valueString": shown.method})
    return {"name": "deficit", "part": part}


def _deficit_parameters(
    partitions: tuple[GasPartitions, ...], q: _Quantities, links: _Links
) -> list[Json]:
    out: list[Json] = []
    for gas in partitions:
        shown: tuple[ShownPartition | None, ...] = gas.shown or (None,)
        out += [_deficit_parameter(gas, s, q, links) for s in shown]
    return out


def _parameters(
    a: Assessment,
    quantities: _Quantities,
    settings_hash: str,
    partitions: tuple[GasPartitions, ...],
    links: _Links,
    site: str | None = None,
) -> Json:
    params: list[Json] = [
        {"name": "ruleset", "valueString": a.ruleset_identity},
        {"name": "ruleset-hash", "valueString": a.ruleset_hash},
    ]
    if settings_hash:
        params.append({"name": "settings-hash", "valueString": settings_hash})
    if site:
        params.append({"name": "site", "valueString": site})
    params.append({"name": "pattern", "valueCode": a.pattern})
    params.append({"name": "gas-exchange", "valueCode": a.gas_exchange})
    params += [_mechanism_parameter(m) for m in a.mechanisms]
    params += [_finding_parameter(f, links) for f in a.findings]
    params += [{"name": "uncertain-input", "valueString": what} for what in a.uncertain_inputs]
    params += [_gas_parameter(g.facts, g.index, quantities, links) for g in a.gases]
    params += _deficit_parameters(partitions, quantities, links)
    for extra in (
        oxygen_response_parameter(a, quantities.pressure_unit, links.to_source),
        trend_parameter(a.trend),
    ):
        if extra is not None:
            params.append(extra)
    index = a.index
    params += quantities.listed(index.derived)
    if index.barometric_source:
        params.append({"name": "barometric-pressure-source", "valueCode": index.barometric_source})
    if index.fio2_source:
        params.append({"name": "fio2-source", "valueCode": index.fio2_source})
    return {"resourceType": "Parameters", "id": "result", "parameter": params}


def is_processing(f: Finding) -> bool:
    """Whether a finding is about processing the input (an OperationOutcome issue)."""
    return f.code in PROCESSING_ISSUE_TYPE


def is_context(f: Finding) -> bool:
    """Whether a finding is clinical context (not about the data's quality)."""
    if f.about_data is not None:  # a code the rule set declares says what it is about
        return not f.about_data
    return f.code in CONTEXT_FINDINGS


def _issue(f: Finding) -> Json:
    kind = "informational" if f.severity == "information" else PROCESSING_ISSUE_TYPE[f.code]
    issue: Json = {
        "severity": f.severity,
        "code": kind,
        "details": {"coding": [_finding_coding(f)], "text": f.message},
        "diagnostics": f.message + (f" (rule {f.rule})" if f.rule else ""),
    }
    if f.expression:
        issue["expression"] = [f.expression]
    return issue


def _operation_outcome(a: Assessment) -> Json:
    """How the input was processed, and the caution: never a clinical finding."""
    issues = [_issue(f) for f in a.findings if is_processing(f)]
    issues.append({"severity": "information", "code": "informational", "diagnostics": CAUTION})
    return {"resourceType": "OperationOutcome", "id": "processing", "issue": issues}


def _implicated(f: Finding, a: Assessment, links: _Links) -> list[Json]:
    """The input resources a data-quality finding is about: its subject, else the resource of
    the entry its expression locates, else the index gas."""
    if f.subject is not None:
        return [links.to_input(f.subject.reference)]
    anchor = a.index.gas.anchor
    if f.expression is None and anchor is not None:
        return [links.to_input(anchor.source.reference)]
    return []


def _detected_issue(f: Finding, n: int, a: Assessment, links: _Links) -> Json:
    """A data-quality finding as a DetectedIssue: a problem with the data sent."""
    issue: Json = {
        "resourceType": "DetectedIssue",
        "id": f"data-quality-{n}",
        "status": "final",
        "code": {"coding": [_finding_coding(f)], "text": f.message},
        "severity": DETECTED_ISSUE_SEVERITY[f.severity],
        "identifiedDateTime": a.timestamp.isoformat(),
        "detail": f.message + (f" (in the input at {f.expression})" if f.expression else ""),
    }
    if (subject := _subject(a, links)) is not None:
        issue["patient"] = subject
    implicated = _implicated(f, a, links)
    if implicated:
        issue["implicated"] = implicated
    if f.rule:
        issue["reference"] = f"{CANONICAL}/rule/{quote(f.rule, safe='')}"
    return issue


def _data_requirements(codes: Iterable[tuple[str, str]]) -> list[Json]:
    return [
        {
            "type": "Observation",
            "codeFilter": [{"path": "code", "code": [_coding(system, code)]}],
        }
        for system, code in codes
    ]


def _subject(a: Assessment, links: _Links) -> Json | None:
    if a.patient is not None and a.patient.reference:
        return links.to_input(a.patient.reference)
    return None


def _about(a: Assessment, links: _Links) -> Json:
    """The subject and effective time every derived Observation shares."""
    about: Json = {}
    if (subject := _subject(a, links)) is not None:
        about["subject"] = subject
    time = a.index.gas.time
    if time is not None:
        about["effectiveDateTime"] = time.isoformat()
    return about


def _derived_from(name: str, d: Derived, gas: GasFacts) -> list[str]:
    """The input references behind a derived value: its own inputs, and with an FiO2
    estimated from the device and the flow, the Observations of those."""
    refs = [s.reference for s in d.inputs]
    if name in USES_FIO2 and gas.fio2_source == "device-estimate":
        for fact in ("fio2", "oxygen_device", "oxygen_flow"):
            refs += [s.reference for s in gas.sources.get(fact, ())]
    return [r for r in dict.fromkeys(refs) if r]


def _observation(
    name: str,
    d: Derived,
    about: Json,
    aa_limit: Derived | None,
    quantities: _Quantities,
    links: _Links,
    gas: GasFacts,
) -> Json:
    loinc, display = OBSERVATION_CODES[name]
    code = _coding(LOINC, loinc, display) if loinc else _coding(DERIVED_SYSTEM, name, display)
    # No category: observation-category has none for a value computed from others (laboratory
    # would say a laboratory measured it).
    obs: Json = {
        "resourceType": "Observation",
        "id": name,
        "status": "final",
        "code": {"coding": [code], "text": display},
        "valueQuantity": quantities.of(name, d),
        "method": {"text": d.method},
        **about,
    }
    if name == "aa-gradient" and aa_limit is not None:
        raised = d.value > aa_limit.value
        obs["interpretation"] = [{"coding": [_coding(INTERPRETATION, "H" if raised else "N")]}]
        limit = quantities.of("aa-gradient-upper-limit", aa_limit)
        obs["referenceRange"] = [{"high": limit, "text": "room-air limit for age"}]
    refs = _derived_from(name, d, gas)
    if refs:
        obs["derivedFrom"] = [links.to_input(r) for r in refs]
    return obs


def _component(code: tuple[str, str], value: Json) -> Json:
    return {"code": {"coding": [_coding(DERIVED_SYSTEM, *code)], "text": code[1]}, **value}


def _deficit_observation(shown: ShownPartition, about: Json, q: _Quantities, links: _Links) -> Json:
    """The index gas's partition as an Observation: one component per part, in the requested
    pressure unit; ``derivedFrom`` the inputs; the method names the partition and sources."""
    code, display = DEFICIT_OBSERVATION
    identifier = code if shown.residence is None else f"{code}-{shown.residence}"
    d = shown.partition
    values = [("expected", d.expected_pao2), ("fall", d.fall), *shown.parts]
    components = [
        _component(
            DEFICIT_COMPONENTS[key],
            {"valueQuantity": _pressure(DEFICIT_COMPONENTS[key][0], value, q)},
        )
        for key, value in values
    ]
    if shown.residence is not None:
        residence = _coding(ALTITUDE_RESIDENCE_CODES, shown.residence)
        components.append(
            _component(RESIDENCE_COMPONENT, {"valueCodeableConcept": {"coding": [residence]}})
        )
    text = f"{display}: the fall of the {shown.pao2_label} below the PaO2 expected for age"
    obs: Json = {
        "resourceType": "Observation",
        "id": identifier,
        "status": "final",
        "code": {"coding": [_coding(DERIVED_SYSTEM, code, display)], "text": text},
        "method": {"text": shown.method},
        **about,
        "component": components,
    }
    if shown.assumption is not None:
        obs["note"] = [{"text": f"Residence not sent: computed {shown.assumption}."}]
    refs = [r for r in dict.fromkeys(s.reference for s in shown.inputs) if r]
    if refs:
        obs["derivedFrom"] = [links.to_input(r) for r in refs]
    return obs


def _context_components(a: Assessment) -> list[Json]:
    """One component per clinical context finding: the finding, present."""
    return [
        {
            "code": {"coding": [_finding_coding(f)], "text": f.message},
            "valueBoolean": True,
        }
        for f in {f.code: f for f in a.findings if is_context(f)}.values()
    ]


def _mechanism_observation(
    a: Assessment, about: Json, derived_ids: list[str], links: _Links
) -> Json:
    obs: Json = {
        "resourceType": "Observation",
        "id": "mechanism-assessment",
        "status": "final",
        "code": {
            "coding": [_coding(DERIVED_SYSTEM, "hypoxaemia-mechanism-assessment")],
            "text": "Likely mechanism of hypoxaemia (decision support, not a diagnosis)",
        },
        "valueCodeableConcept": {"coding": [_coding(PATTERN_SYSTEM, a.pattern)]},
        "note": [{"text": CAUTION}],
        "component": [
            {
                "code": {"coding": [_coding(MECHANISM_SYSTEM, m.code)]},
                "valueCodeableConcept": {"coding": [_coding(GRADE_SYSTEM, m.grade)]},
            }
            for m in a.mechanisms
        ]
        + [
            _component(
                ("gas-exchange-status", "Gas exchange for age"),
                {
                    "valueCodeableConcept": {
                        "coding": [_coding(GAS_EXCHANGE_SYSTEM, a.gas_exchange)]
                    }
                },
            )
        ]
        + _context_components(a),
        **about,
    }
    if derived_ids:
        obs["derivedFrom"] = [links.to_entry(i) for i in derived_ids]
    return obs


def render_bundle(
    a: Assessment,
    *,
    data_requirements: Iterable[tuple[str, str]] = (),
    settings: Settings,
    pressure_unit: PressureUnit = "mm[Hg]",
    settings_hash: str = "",
    addresses: Mapping[str, Json] | None = None,
    site: str | None = None,
) -> Json:
    """The result Bundle for ``a``. ``data_requirements`` are (system, code) pairs;
    ``settings`` are those ``a`` was assessed with (a partition that depends on an unknown
    residence is shown for each residence, derived again with them); ``settings_hash`` names
    them; ``addresses`` say how to point at each input resource (``Intake.addresses``); ``site``
    is the label of the site file they came from (None: none)."""
    links = _Links(a.decision_id, addresses or {})
    for first in ("guidance", "result", "processing"):  # numbered in entry order
        links.entry(first)
    requirements = _data_requirements(data_requirements)
    # More data was asked for only if some of it can be named as a FHIR data requirement.
    status = "success" if a.status == "data-requested" and not requirements else a.status
    quantities = _Quantities(pressure_unit)
    partitions = assessment_partitions(a, settings)
    parameters = _parameters(a, quantities, settings_hash, partitions, links, site)
    outcome = _operation_outcome(a)
    identity, _, version = a.ruleset_identity.partition("|")
    guidance: Json = {
        "resourceType": "GuidanceResponse",
        "id": "guidance",
        "identifier": [{"system": "urn:ietf:rfc:3986", "value": f"urn:uuid:{a.decision_id}"}],
        # The rule set as a URL: id and version as path segments, the content hash as the
        # fragment (also the ``ruleset-hash`` parameter).
        "moduleUri": f"{CANONICAL}/ruleset/{quote(identity, safe='')}/{quote(version, safe='')}"
        f"#sha256:{a.ruleset_hash}",
        "status": status,
        "occurrenceDateTime": a.timestamp.isoformat(),
        "outputParameters": links.to_entry(parameters["id"]),
        "evaluationMessage": [links.to_entry(outcome["id"])],
        "note": [{"text": CAUTION}],
    }
    if (subject := _subject(a, links)) is not None:
        guidance["subject"] = subject
    if requirements:
        guidance["dataRequirement"] = requirements
    resources: list[Json] = [guidance, parameters, outcome]
    resources += [
        _detected_issue(f, n, a, links)
        for n, f in enumerate(
            (f for f in a.findings if not is_processing(f) and not is_context(f)), start=1
        )
    ]
    derived = a.index.derived
    about = _about(a, links)
    limit = derived.get("aa-gradient-upper-limit")
    derived_ids: list[str] = []
    for name in OBSERVATION_CODES:
        if (d := derived.get(name)) is not None:
            resources.append(_observation(name, d, about, limit, quantities, links, a.index))
            derived_ids.append(name)
    index = next((g for g in partitions if g.index), None)
    for shown in index.shown if index is not None else ():
        observation = _deficit_observation(shown, about, quantities, links)
        resources.append(observation)
        derived_ids.append(observation["id"])
    response = oxygen_response_observation(a, about, pressure_unit, links.to_source)
    if response is not None:
        resources.append(response)
        derived_ids.append(response["id"])
    resources.append(_mechanism_observation(a, about, derived_ids, links))
    return {
        "resourceType": "Bundle",
        "type": "collection",
        "identifier": {"system": "urn:ietf:rfc:3986", "value": f"urn:uuid:{a.decision_id}"},
        "timestamp": a.timestamp.isoformat(),
        "entry": [{"fullUrl": links.entry(r["id"]), "resource": r} for r in resources],
    }
