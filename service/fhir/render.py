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

Speed: the parts that do not depend on the input (codings, code texts, the mechanism and
status components, the caution) are built once, at import, and every result holds the same
objects; so do the parts that depend only on a code, a rule id or an offset (a mechanism's
code and grade, a rule, a finding's code and severity, a paired value's ``taken-before-gas``:
kept, within ``_KEPT`` each). Each number is rounded once per render, its Quantity copied from
a template per kind of value and shared wherever it appears (a partition's parameter parts
and Observation components are built in one pass); the References to the input are the
input's own (``Intake.addresses``). A result is therefore read-only: serialise it (orjson
does not change it) or ``copy.deepcopy`` it before editing. ``tests/fhir/test_render_kept.py``
checks the written-out steps against the general ones.
"""

from __future__ import annotations

import re
import uuid
from collections.abc import Iterable, Mapping
from datetime import timedelta
from functools import lru_cache
from typing import Any
from urllib.parse import quote

from service.assess.derive import Derived, GasFacts
from service.assess.partition import GasPartitions, ShownPartition, assessment_partitions
from service.assess.presentation import (
    QUANTITY_ORDER,
    PressureUnit,
    QuantityShape,
    derived_shape,
    display_round,
    quantity_shape,
    shaped,
)
from service.assess.result import CAUTION, Assessment, Finding, MechanismVerdict
from service.config import Settings
from service.engine import FindingCode, GasExchangeStatus, Grade, Mechanism, Pattern, Severity
from service.fhir.addresses import of_reference
from service.fhir.oxygen_response import (
    oxygen_response_observation,
    oxygen_response_parameter,
    trend_parameter,
)
from service.intake.model import Quantity
from service.physiology.deficit_steps import GAS_EXCHANGE, INSPIRED, UNATTRIBUTED, VENTILATION
from service.physiology.units import kpa_from_mmhg
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
URI_SYSTEM = "urn:ietf:rfc:3986"
# The last 12 hex digits of an entry's fullUrl: its number, written once for the usual counts.
_ENTRY_NUMBERS = [f"{n:012x}" for n in range(64)]
# The entries every result opens with, numbered in entry order before any other.
_FIRST_ENTRIES = ("guidance", "result", "processing")
_CANONICAL_UUID = re.compile(r"[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}")

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
# The facts whose Observations an FiO2 estimated from the device and the flow came from.
_FIO2_ESTIMATE_FACTS = ("fio2", "oxygen_device", "oxygen_flow")

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


def _coding(system: str, code: str, display: str | None = None) -> Json:
    coding: Json = {"system": system, "code": code}
    if display:
        coding["display"] = display
    return coding


def _concept(system: str, code: str, display: str) -> Json:
    """A CodeableConcept of one coding, its display also the text."""
    return {"coding": [_coding(system, code, display)], "text": display}


# --- Skeletons: the fixed parts of every result, built once and shared ----------------------

_CAUTION_NOTE = [{"text": CAUTION}]
_CAUTION_ISSUE = {"severity": "information", "code": "informational", "diagnostics": CAUTION}
_INDEX_PART = {
    True: {"name": "index", "valueBoolean": True},
    False: {"name": "index", "valueBoolean": False},
}
_BASIS_PART = {
    True: {"name": "pao2-basis", "valueCode": "imputed-from-spo2"},
    False: {"name": "pao2-basis", "valueCode": "measured"},
}
# Each derived Observation's code: LOINC where there is a term, else our CodeSystem.
_OBSERVATION_CODE = {
    name: _concept(LOINC, loinc, display) if loinc else _concept(DERIVED_SYSTEM, name, display)
    for name, (loinc, display) in OBSERVATION_CODES.items()
}
_INTERPRETATION = {
    raised: [{"coding": [_coding(INTERPRETATION, "H" if raised else "N")]}]
    for raised in (True, False)
}
_DEFICIT_CODE = {key: _concept(DERIVED_SYSTEM, *code) for key, code in DEFICIT_COMPONENTS.items()}
_DEFICIT_OBSERVATION_CODING = [_coding(DERIVED_SYSTEM, *DEFICIT_OBSERVATION)]
# The names a part's Quantity is shown under (its decimals and unit).
_DEFICIT_NAMES = {key: f"deficit-{key}" for key in DEFICIT_PARTS}
_RESIDENCE_CODE = _concept(DERIVED_SYSTEM, *RESIDENCE_COMPONENT)
_PAIRED_QUANTITY = {q: {"name": "quantity", "valueCode": q.value} for q in Quantity}
_MECHANISM_ASSESSMENT_CODE = {
    "coding": [_coding(DERIVED_SYSTEM, "hypoxaemia-mechanism-assessment")],
    "text": "Likely mechanism of hypoxaemia (decision support, not a diagnosis)",
}


def _mechanism_component(code: str, grade: str) -> Json:
    return {
        "code": {"coding": [_coding(MECHANISM_SYSTEM, code)]},
        "valueCodeableConcept": {"coding": [_coding(GRADE_SYSTEM, grade)]},
    }


def _gas_exchange_component(status: str) -> Json:
    return {
        "code": _concept(DERIVED_SYSTEM, "gas-exchange-status", "Gas exchange for age"),
        "valueCodeableConcept": {"coding": [_coding(GAS_EXCHANGE_SYSTEM, status)]},
    }


def _pattern_value(pattern: str) -> Json:
    return {"coding": [_coding(PATTERN_SYSTEM, pattern)]}


_MECHANISM_COMPONENT = {(m, g): _mechanism_component(m, g) for m in Mechanism for g in Grade}
_GAS_EXCHANGE_COMPONENT = {s: _gas_exchange_component(s) for s in GasExchangeStatus}
_PATTERN_VALUE = {p: _pattern_value(p) for p in Pattern}
_KEPT = 4096
"""The most codings and data requirements kept by their code (the rule set's and the intake's
codes are a few hundred; past the limit the table starts again)."""
_FINDING_CODINGS: dict[tuple[str | None, str, str | None], Json] = {}
_REQUIREMENTS: dict[tuple[str, str], Json] = {}
# A mechanism parameter's code and grade parts, and each rule's part (by its id@version).
_MECHANISM_CODE_PART = {m: {"name": "code", "valueCode": m} for m in Mechanism}
_GRADE_PART = {g: {"name": "grade", "valueCode": g} for g in Grade}
_RULE_PARTS: dict[str, Json] = {}
# A finding parameter's code part (by code) and severity part.
_FINDING_CODE_PARTS: dict[str, Json] = {}
_SEVERITY_PART = {s: {"name": "severity", "valueCode": s} for s in Severity}
# The ``taken-before-gas`` part of a paired value, by its offset from the gas (the values of
# one panel share 0, and most offsets are a few whole minutes).
_TAKEN_BEFORE: dict[timedelta, Json] = {}
_PRESSURE_UNITS: tuple[PressureUnit, ...] = ("mm[Hg]", "kPa")
# How a value of one name is shown, with the unit it was for (the catalogue's, one per name):
# (unit, display decimals, 10 to their power, whether a mm[Hg] value is converted to kPa, the
# Quantity with everything but its number, copied for each value).
_Shape = tuple[str, int, float, bool, Json]
_SHAPES: dict[str, dict[str, _Shape]] = {u: {} for u in _PRESSURE_UNITS}


def _template(shape: QuantityShape) -> tuple[int, float, bool, Json]:
    """A shape's decimals (and ``display_round``'s scale), conversion and Quantity template
    (its ``value`` set per number)."""
    decimals, unit, convert = shape
    template = {"value": 0.0, "unit": unit, "system": UCUM, "code": unit}
    return decimals, 10.0**decimals, convert, template


def _shape(pressure_unit: PressureUnit, name: str, unit: str) -> _Shape:
    """``derived_shape`` of ``name`` in ``unit``, kept by name for ``pressure_unit``."""
    shape = (unit, *_template(derived_shape(name, unit, pressure_unit)))
    _SHAPES[pressure_unit][name] = shape
    return shape


# The shapes of a partition's pressures (all mm[Hg]): the PaO2, the expected PaO2 and the fall,
# then each part by its key (``pao2-expected``, ``pao2-fall`` and ``deficit-…`` are also the
# Observation's component codes, so the two show one Quantity).
_PARTITION_SHAPES = {
    u: tuple(
        _template(quantity_shape(n, "mm[Hg]", u)) for n in ("pao2", "pao2-expected", "pao2-fall")
    )
    for u in _PRESSURE_UNITS
}
_PART_SHAPES = {
    u: {
        k: (*_template(quantity_shape(n, "mm[Hg]", u)), DEFICIT_PARTS[k], _DEFICIT_CODE[k])
        for k, n in _DEFICIT_NAMES.items()
    }
    for u in _PRESSURE_UNITS
}


def _kept(table: dict[Any, Json], key: Any, build: Json) -> Json:
    if len(table) >= _KEPT:
        table.clear()
    table[key] = build
    return build


def _finding_coding(f: Finding) -> Json:
    """A finding's code: from the rule set's own code system when it declared one."""
    key = (f.system, f.code, f.display)
    found = _FINDING_CODINGS.get(key)
    if found is None:
        found = _kept(_FINDING_CODINGS, key, _coding(f.system or FINDING_SYSTEM, f.code, f.display))
    return found


def _data_requirements(codes: Iterable[tuple[str, str]]) -> list[Json]:
    out = []
    for system, code in codes:
        found = _REQUIREMENTS.get((system, code))
        if found is None:
            built = {
                "type": "Observation",
                "codeFilter": [{"path": "code", "code": [_coding(system, code)]}],
            }
            found = _kept(_REQUIREMENTS, (system, code), built)
        out.append(found)
    return out


@lru_cache(maxsize=64)
def _module_uri(identity: str, ruleset_hash: str) -> str:
    """The rule set as a URL: id and version as path segments, the content hash as the
    fragment (also the ``ruleset-hash`` parameter)."""
    name, _, version = identity.partition("|")
    path = f"{quote(name, safe='')}/{quote(version, safe='')}"
    return f"{CANONICAL}/ruleset/{path}#sha256:{ruleset_hash}"


@lru_cache(maxsize=1024)
def _rule_url(rule: str) -> str:
    return f"{CANONICAL}/rule/{quote(rule, safe='')}"


# --- One render -----------------------------------------------------------------------------


class _Links:
    """The fullUrls of the result's entries and the References to the input's resources."""

    __slots__ = ("addresses", "base", "described", "urls")

    def __init__(
        self, decision_id: str, addresses: Mapping[str, Json], first: tuple[str, ...] = ()
    ) -> None:
        """``first``: entries numbered from 1 at once, in order (distinct ids)."""
        # Entry URLs derive from the decision id (its last 12 hex digits replaced by the
        # entry's number), so a result is reproducible apart from it and needs no hashing.
        # A decision id in the canonical form (the service's own) is its own spelling;
        # any other goes through ``uuid`` (which refuses what is no UUID).
        canonical = _CANONICAL_UUID.fullmatch(decision_id) is not None
        prefix = (decision_id if canonical else str(uuid.UUID(decision_id)))[:24]
        base = self.base = f"urn:uuid:{prefix}"
        self.addresses = addresses
        self.urls: dict[str, str] = {
            local_id: base + _ENTRY_NUMBERS[n] for n, local_id in enumerate(first, start=1)
        }
        self.described: dict[str, Json] = {}

    def entry(self, local_id: str) -> str:
        """The fullUrl of the result entry ``local_id`` (numbered in order of first use)."""
        url = self.urls.get(local_id)
        if url is None:
            n = len(self.urls) + 1
            number = _ENTRY_NUMBERS[n] if n < len(_ENTRY_NUMBERS) else f"{n:012x}"
            url = self.urls[local_id] = self.base + number
        return url

    def to_inputs(self, references: Iterable[str]) -> list[Json]:
        """``to_input`` of each reference."""
        get, to_input = self.addresses.get, self.to_input
        return [get(r) or to_input(r) for r in references]

    def to_entry(self, local_id: str) -> Json:
        return {"reference": self.entry(local_id)}

    def to_input(self, reference: str) -> Json:
        """The Reference to an input resource, as ``service.fhir.addresses`` says (the
        input's own, shared: a result is read-only)."""
        found = self.addresses.get(reference)
        if found is None:
            found = self.described.get(reference)
            if found is None:
                found = self.described[reference] = of_reference(reference, None)
        return found

    def to_source(self, reference: str) -> Json:
        """The Reference to a point's source as a module that does not know the result's
        addressing recorded it (the oxygen-response fit): an input's "Type/id" pointed at as
        ``service.fhir.addresses`` says; a urn or a contained "#id" as it is."""
        if reference.startswith(("urn:", "#")):
            return {"reference": reference}
        return self.to_input(reference)


class _Quantities:
    """The Quantities of one render: each derived value's rounded once, whatever the number
    of places it appears in (the index gas's values at the top level, in its ``gas``
    parameter and in its Observations; a partition's in its parameter and Observation)."""

    __slots__ = ("listed_by", "partition", "pressure_unit", "shapes")

    def __init__(self, pressure_unit: PressureUnit) -> None:
        self.pressure_unit = pressure_unit
        self.shapes = _SHAPES[pressure_unit]
        # By the identity of the derived-values mapping (alive while rendering): its listed
        # parts, and each value's Quantity by name.
        self.listed_by: dict[int, tuple[list[Json], dict[str, Json]]] = {}
        # By the identity of a shown partition: its parts and components.
        self.partition: dict[int, tuple[list[Json], list[Json]]] = {}

    def listed(self, derived: dict[str, Derived]) -> tuple[list[Json], dict[str, Json]]:
        """The ``name``/``valueQuantity`` parts of ``derived`` in ``QUANTITY_ORDER``, and
        each value's Quantity by name."""
        key = id(derived)
        found = self.listed_by.get(key)
        if found is not None:
            return found
        shapes, get = self.shapes, derived.get
        parts: list[Json] = []
        by_name: dict[str, Json] = {}
        for name in QUANTITY_ORDER:
            d = get(name)
            if d is None:
                continue
            unit = d.unit
            known = shapes.get(name)
            if known is None or known[0] != unit:
                known = _shape(self.pressure_unit, name, unit)
            # As ``presentation.shaped``, written out: this loop runs for every value shown.
            _, decimals, scale, convert, template = known
            value = kpa_from_mmhg(d.value) if convert else d.value
            q = by_name[name] = template.copy()
            q["value"] = display_round(value, decimals, scale)
            parts.append({"name": name, "valueQuantity": q})
        found = self.listed_by[key] = (parts, by_name)
        return found

    def pressures(self, shown: ShownPartition) -> tuple[list[Json], list[Json]]:
        """What a partition shows, each pressure rounded once: the ``deficit`` parameter's
        parts from the assumed residence to the method, and the Observation's components
        (the same Quantities)."""
        key = id(shown)
        found = self.partition.get(key)
        if found is not None:
            return found
        d = shown.partition
        fixed: list[Json] = []
        for (decimals, scale, convert, template), mmhg in zip(
            _PARTITION_SHAPES[self.pressure_unit],
            (d.arterial_po2, d.expected_pao2, d.fall),
            strict=True,
        ):
            # As ``presentation.shaped``, written out.
            value = kpa_from_mmhg(mmhg) if convert else mmhg
            q = template.copy()
            q["value"] = display_round(value, decimals, scale)
            fixed.append(q)
        pao2, expected, fall = fixed
        assumed = None if shown.residence is None else _assumed(shown.residence, shown.assumption)
        parts: list[Json] = [] if assumed is None else list(assumed.parts)
        parts += [
            {"name": "pao2", "valueQuantity": pao2},
            _BASIS_PART[shown.imputed],
            {"name": "expected-pao2", "valueQuantity": expected},
            {"name": "fall", "valueQuantity": fall},
        ]
        components = [
            {"code": _DEFICIT_CODE["expected"], "valueQuantity": expected},
            {"code": _DEFICIT_CODE["fall"], "valueQuantity": fall},
        ]
        shapes = _PART_SHAPES[self.pressure_unit]
        for part, mmhg in shown.parts:
            decimals, scale, convert, template, name, code = shapes[part]
            value = kpa_from_mmhg(mmhg) if convert else mmhg
            q = template.copy()
            q["value"] = display_round(value, decimals, scale)
            parts.append({"name": name, "valueQuantity": q})
            components.append({"code": code, "valueQuantity": q})
        parts.append({"name": "method", "valueString": shown.method})
        if assumed is not None:
            components.append(assumed.component)
        found = self.partition[key] = (parts, components)
        return found


def _mechanism_parameter(m: MechanismVerdict) -> Json:
    code, grade = m.code, m.grade
    part: list[Json] = [
        _MECHANISM_CODE_PART.get(code) or {"name": "code", "valueCode": code},
        _GRADE_PART.get(grade) or {"name": "grade", "valueCode": grade},
        {"name": "rationale", "valueString": m.rationale},
    ]
    for rule in m.rules:
        found = _RULE_PARTS.get(rule)
        if found is None:
            found = _kept(_RULE_PARTS, rule, {"name": "rule", "valueString": rule})
        part.append(found)
    if m.discriminator:
        part.append({"name": "discriminator", "valueString": m.discriminator})
    part += [{"name": "trace", "valueString": line} for line in m.trace]
    return {"name": "mechanism", "part": part}


def _finding_parameter(f: Finding, links: _Links) -> Json:
    code, severity = f.code, f.severity
    found = _FINDING_CODE_PARTS.get(code)
    if found is None:
        found = _kept(_FINDING_CODE_PARTS, code, {"name": "code", "valueCode": code})
    part: list[Json] = [
        found,
        _SEVERITY_PART.get(severity) or {"name": "severity", "valueCode": severity},
        {"name": "message", "valueString": f.message},
    ]
    if f.subject is not None:
        part.append({"name": "subject", "valueReference": links.to_input(f.subject.reference)})
    if f.expression:
        part.append({"name": "expression", "valueString": f.expression})
    return {"name": "finding", "part": part}


def _gas_parameter(gas: GasFacts, index: bool, quantities: _Quantities, links: _Links) -> Json:
    part: list[Json] = []
    anchor = gas.gas.anchor
    if anchor is not None:
        reference = links.to_input(anchor.source.reference)
        part.append({"name": "observation", "valueReference": reference})
    part.append(_INDEX_PART[index])
    part += quantities.listed(gas.derived)[0]
    part += _paired(gas, links)
    return {"name": "gas", "part": part}


def _paired(gas: GasFacts, links: _Links) -> list[Json]:
    """Each value paired with the gas and how long before it (negative: after) it was taken,
    so a reader can judge whether an Hb of yesterday or a DLCO of last spring still holds."""
    out: list[Json] = []
    paired = gas.gas
    anchor = paired.anchor
    at = anchor.time if anchor is not None else None
    addresses, to_input = links.addresses, links.to_input
    for quantity, m in paired.values.items():
        if m is anchor:
            continue
        reference = m.source.reference
        item: list[Json] = [
            _PAIRED_QUANTITY[quantity],
            {
                "name": "observation",
                "valueReference": addresses.get(reference) or to_input(reference),
            },
        ]
        if at is not None and (taken := m.time) is not None:
            offset = at - taken
            item.append(_TAKEN_BEFORE.get(offset) or _taken_before(offset))
        out.append({"name": "paired", "part": item})
    return out


def _taken_before(offset: timedelta) -> Json:
    """The ``taken-before-gas`` part of a value taken ``offset`` before the gas (kept)."""
    found = _TAKEN_BEFORE.get(offset)
    if found is None:
        before = {"value": minutes_before(offset), "unit": "min", "system": UCUM, "code": "min"}
        found = _kept(_TAKEN_BEFORE, offset, {"name": "taken-before-gas", "valueQuantity": before})
    return found


def minutes_before(offset: timedelta) -> float:
    """``offset`` in minutes to one decimal, as ``round(offset.total_seconds() / 60.0, 1)``.

    Written out because most offsets are whole minutes (values of one panel: none at all):
    a whole number of minutes, give or take less than a second (under a tenth of a minute
    either way), is its own rounding, exact as a float, without the costlier decimal step."""
    seconds = offset.seconds  # timedelta keeps 0 <= seconds < 86400, the sign in days
    if not seconds % 60:
        return float(offset.days * 1440 + seconds // 60)
    return round(offset.total_seconds() / 60.0, 1)


def _deficit_parameter(
    gas: GasPartitions, shown: ShownPartition | None, q: _Quantities, links: _Links
) -> Json:
    """One gas's partition (``shown``), or why it has none: parts in the requested pressure
    unit, positive where they lower the PaO2; absent parts are absent."""
    part: list[Json] = []
    if gas.reference is not None:
        part.append({"name": "observation", "valueReference": links.to_input(gas.reference)})
    part.append(_INDEX_PART[gas.index])
    if shown is None:
        part.append({"name": "not-computed", "valueString": gas.absent or "not computable"})
    else:
        part += q.pressures(shown)[0]
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
    params += quantities.listed(index.derived)[0]
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


def _operation_outcome(processing: list[Finding]) -> Json:
    """How the input was processed, and the caution: never a clinical finding."""
    issues = [_issue(f) for f in processing]
    issues.append(_CAUTION_ISSUE)
    return {"resourceType": "OperationOutcome", "id": "processing", "issue": issues}


def _detected_issue(
    f: Finding, n: int, a: Assessment, when: str, subject: Json | None, links: _Links
) -> Json:
    """A data-quality finding as a DetectedIssue: a problem with the data sent."""
    issue: Json = {
        "resourceType": "DetectedIssue",
        "id": f"data-quality-{n}",
        "status": "final",
        "code": {"coding": [_finding_coding(f)], "text": f.message},
        "severity": DETECTED_ISSUE_SEVERITY[f.severity],
        "identifiedDateTime": when,
        "detail": f.message + (f" (in the input at {f.expression})" if f.expression else ""),
    }
    if subject is not None:
        issue["patient"] = subject
    # The input resources it is about: its subject, else the resource of the entry its
    # expression locates, else the index gas.
    if f.subject is not None:
        issue["implicated"] = [links.to_input(f.subject.reference)]
    elif f.expression is None and (anchor := a.index.gas.anchor) is not None:
        issue["implicated"] = [links.to_input(anchor.source.reference)]
    if f.rule:
        issue["reference"] = _rule_url(f.rule)
    return issue


def _fio2_estimate_references(gas: GasFacts) -> list[str]:
    """With an FiO2 estimated from the device and the flow, the references of the
    Observations it came from (else none)."""
    if gas.fio2_source != "device-estimate":
        return []
    sources = gas.sources
    return [s.reference for fact in _FIO2_ESTIMATE_FACTS for s in sources.get(fact, ())]


def _derived_from(name: str, d: Derived, fio2_refs: list[str], links: _Links) -> list[Json]:
    """The References to the inputs behind a derived value, each once: its own inputs, and
    for a value that takes the FiO2, ``fio2_refs`` (``_fio2_estimate_references``)."""
    refs = [s.reference for s in d.inputs]
    if fio2_refs and name in USES_FIO2:
        refs += fio2_refs
    get, to_input = links.addresses.get, links.to_input
    return [get(r) or to_input(r) for r in dict.fromkeys(refs) if r]


# Each derived Observation's opening, copied for each value: the ``valueQuantity`` and
# ``method`` keep their places and are set per value.
_OBSERVATION_OPENING = {
    name: {
        "resourceType": "Observation",
        "id": name,
        "status": "final",
        "code": code,
        "valueQuantity": None,
        "method": None,
    }
    for name, code in _OBSERVATION_CODE.items()
}


def _observation(
    name: str,
    d: Derived,
    value: Json,
    about: Json,
    limit: tuple[Derived, Json] | None,
    links: _Links,
    fio2_refs: list[str],
) -> Json:
    """A derived value as an Observation; ``limit`` is the room-air A-a gradient limit for age
    and its Quantity (the A-a gradient is interpreted against it); ``fio2_refs`` as
    ``_derived_from`` takes them."""
    # No category: observation-category has none for a value computed from others (laboratory
    # would say a laboratory measured it).
    obs: Json = _OBSERVATION_OPENING[name].copy()
    obs["valueQuantity"] = value
    obs["method"] = {"text": d.method}
    obs.update(about)
    if name == "aa-gradient" and limit is not None:
        obs["interpretation"] = _INTERPRETATION[d.value > limit[0].value]
        obs["referenceRange"] = [{"high": limit[1], "text": "room-air limit for age"}]
    refs = _derived_from(name, d, fio2_refs, links)
    if refs:
        obs["derivedFrom"] = refs
    return obs


class _Assumed:
    """What a partition computed for an assumed residence shows of it: the ``deficit``
    parameter's parts, the Observation's component and note (one per residence, shared)."""

    __slots__ = ("component", "note", "parts")

    def __init__(self, residence: str, assumption: str | None) -> None:
        self.parts: list[Json] = [
            {"name": "altitude-residence", "valueCode": residence},
            {"name": "assumption", "valueString": assumption},
        ]
        coding = _coding(ALTITUDE_RESIDENCE_CODES, residence)
        self.component: Json = {
            "code": _RESIDENCE_CODE,
            "valueCodeableConcept": {"coding": [coding]},
        }
        self.note: list[Json] = [{"text": f"Residence not sent: computed {assumption}."}]


_ASSUMED: dict[tuple[str, str | None], _Assumed] = {}
# The partition Observation's code, by the PaO2 it partitions (measured or imputed).
_DEFICIT_CONCEPTS: dict[str, Json] = {}


def _assumed(residence: str, assumption: str | None) -> _Assumed:
    key = (residence, assumption)
    found = _ASSUMED.get(key)
    if found is None:
        if len(_ASSUMED) >= _KEPT:
            _ASSUMED.clear()
        found = _ASSUMED[key] = _Assumed(residence, assumption)
    return found


def _deficit_observation(shown: ShownPartition, about: Json, q: _Quantities, links: _Links) -> Json:
    """The index gas's partition as an Observation: one component per part, in the requested
    pressure unit; ``derivedFrom`` the inputs; the method names the partition and sources."""
    code, display = DEFICIT_OBSERVATION
    residence = shown.residence
    label = shown.pao2_label
    concept = _DEFICIT_CONCEPTS.get(label)
    if concept is None:
        text = f"{display}: the fall of the {label} below the PaO2 expected for age"
        concept = _DEFICIT_CONCEPTS[label] = {"coding": _DEFICIT_OBSERVATION_CODING, "text": text}
    obs: Json = {
        "resourceType": "Observation",
        "id": code if residence is None else f"{code}-{residence}",
        "status": "final",
        "code": concept,
        "method": {"text": shown.method},
        **about,
        # The same Quantities as the ``deficit`` parameter's: shown under the same decimals.
        "component": q.pressures(shown)[1],
    }
    if residence is not None:
        obs["note"] = _assumed(residence, shown.assumption).note
    refs = [r for r in dict.fromkeys([s.reference for s in shown.inputs]) if r]
    if refs:
        obs["derivedFrom"] = links.to_inputs(refs)
    return obs


def _context_components(context: Iterable[Finding]) -> list[Json]:
    """One component per clinical context finding: the finding, present."""
    return [
        {
            "code": {"coding": [_finding_coding(f)], "text": f.message},
            "valueBoolean": True,
        }
        for f in {f.code: f for f in context}.values()
    ]


def _mechanism_observation(
    a: Assessment, context: list[Finding], about: Json, derived_ids: list[str], links: _Links
) -> Json:
    components = [
        _MECHANISM_COMPONENT.get((m.code, m.grade)) or _mechanism_component(m.code, m.grade)
        for m in a.mechanisms
    ]
    status = a.gas_exchange
    components.append(_GAS_EXCHANGE_COMPONENT.get(status) or _gas_exchange_component(status))
    components += _context_components(context)
    obs: Json = {
        "resourceType": "Observation",
        "id": "mechanism-assessment",
        "status": "final",
        "code": _MECHANISM_ASSESSMENT_CODE,
        "valueCodeableConcept": _PATTERN_VALUE.get(a.pattern) or _pattern_value(a.pattern),
        "note": _CAUTION_NOTE,
        "component": components,
        **about,
    }
    if derived_ids:
        urls, entry = links.urls, links.entry
        obs["derivedFrom"] = [{"reference": urls.get(i) or entry(i)} for i in derived_ids]
    return obs


def _sorted_findings(
    findings: Iterable[Finding],
) -> tuple[list[Finding], list[Finding], list[Finding]]:
    """The findings about processing (OperationOutcome issues), clinical context (components
    of the mechanism Observation) and data quality (DetectedIssues), each in order, sorted
    in one pass."""
    processing: list[Finding] = []
    context: list[Finding] = []
    data_quality: list[Finding] = []
    for f in findings:
        about_patient = is_context(f)
        if about_patient:
            context.append(f)
        if is_processing(f):
            processing.append(f)
        elif not about_patient:
            data_quality.append(f)
    return processing, context, data_quality


def _derived_observations(
    a: Assessment,
    partitions: tuple[GasPartitions, ...],
    about: Json,
    quantities: _Quantities,
    links: _Links,
) -> list[Json]:
    """The index gas's derived values and partitions as Observations, and its oxygen-response
    fit, in that order."""
    index_gas = a.index
    derived = index_gas.derived
    shown_by_name = quantities.listed(derived)[1]
    limit_value = derived.get("aa-gradient-upper-limit")
    limit = None
    if limit_value is not None:
        limit = (limit_value, shown_by_name["aa-gradient-upper-limit"])
    out: list[Json] = []
    fio2_refs = _fio2_estimate_references(index_gas)
    for name in OBSERVATION_CODES:
        if (d := derived.get(name)) is not None:
            value = shown_by_name.get(name) or shaped(
                d.value, derived_shape(name, d.unit, quantities.pressure_unit)
            )
            out.append(_observation(name, d, value, about, limit, links, fio2_refs))
    index = next((g for g in partitions if g.index), None)
    for shown in index.shown if index is not None else ():
        out.append(_deficit_observation(shown, about, quantities, links))
    response = oxygen_response_observation(a, about, quantities.pressure_unit, links.to_source)
    if response is not None:
        out.append(response)
    return out


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
    """The result Bundle for ``a`` (read-only: it shares its fixed parts with every other
    result, and its References with ``addresses``). ``data_requirements`` are (system, code)
    pairs; ``settings`` are those ``a`` was assessed with (a partition that depends on an
    unknown residence is shown for each residence, derived again with them);
    ``settings_hash`` names them; ``addresses`` say how to point at each input resource
    (``Intake.addresses``); ``site`` is the label of the site file they came from (None:
    none)."""
    links = _Links(a.decision_id, addresses or {}, _FIRST_ENTRIES)
    requirements = _data_requirements(data_requirements)
    # More data was asked for only if some of it can be named as a FHIR data requirement.
    status = "success" if a.status == "data-requested" and not requirements else a.status
    quantities = _Quantities(pressure_unit)
    partitions = assessment_partitions(a, settings)
    parameters = _parameters(a, quantities, settings_hash, partitions, links, site)
    processing, context, data_quality = _sorted_findings(a.findings)
    outcome = _operation_outcome(processing)
    when = a.timestamp.isoformat()
    identifier = {"system": URI_SYSTEM, "value": f"urn:uuid:{a.decision_id}"}
    patient = a.patient
    subject = (
        links.to_input(patient.reference) if patient is not None and patient.reference else None
    )
    guidance: Json = {
        "resourceType": "GuidanceResponse",
        "id": "guidance",
        "identifier": [identifier],
        "moduleUri": _module_uri(a.ruleset_identity, a.ruleset_hash),
        "status": status,
        "occurrenceDateTime": when,
        "outputParameters": links.to_entry(parameters["id"]),
        "evaluationMessage": [links.to_entry(outcome["id"])],
        "note": _CAUTION_NOTE,
    }
    if subject is not None:
        guidance["subject"] = subject
    if requirements:
        guidance["dataRequirement"] = requirements
    resources: list[Json] = [guidance, parameters, outcome]
    resources += [
        _detected_issue(f, n, a, when, subject, links) for n, f in enumerate(data_quality, start=1)
    ]
    about: Json = {}
    if subject is not None:
        about["subject"] = subject
    time = a.index.gas.time
    if time is not None:
        about["effectiveDateTime"] = time.isoformat()
    derived = _derived_observations(a, partitions, about, quantities, links)
    resources += derived
    derived_ids = [r["id"] for r in derived]
    resources.append(_mechanism_observation(a, context, about, derived_ids, links))
    urls, entry = links.urls, links.entry
    return {
        "resourceType": "Bundle",
        "type": "collection",
        "identifier": identifier,
        "timestamp": when,
        "entry": [
            {"fullUrl": urls.get(i := r["id"]) or entry(i), "resource": r} for r in resources
        ],
    }
