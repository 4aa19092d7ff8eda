"""The ONE module of the CDS adapter that reads an ``Assessment``.

Cards need the verdict pattern, the five grades with their rationale and discriminator, the
findings, a few deciding numbers of the index gas and the data that would settle an open
question. ``view`` copies exactly those into an ``AssessmentView`` of plain strings and floats
in canonical units, each finding with the words a card uses for it and the roles it plays
(``FINDING_TAGS``: a warning, worth a card without hypoxaemia, hypercapnia, ...); ``cards.py``
and ``hooks.py`` read nothing else and name no finding code. When the assessment's internals
change (enums for its free strings, derived values moved, new finding codes), this module is
where the adapter is brought up to date, and ``tests/cds/test_view.py`` says whether it still
reads what the cards need.

Strings are read through ``_text``, so an ``Enum`` member (a ``StrEnum`` or a plain one) and a
plain string both become the code the contract publishes.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from enum import Enum
from types import MappingProxyType

from service.assess.result import Assessment
from service.intake.model import Quantity

# --- The finding codes of the rule set, as the cards need them -------------------------------
# Words for each code (a code not listed reads as its words: "fio2-missing" -> "fio2 missing"),
# and the roles a finding plays on a card (``tags``). New finding codes belong here.
SAFETY = "safety"  # the oxygen reading itself may mislead: the card is a warning
NOTABLE = "notable"  # worth a card even without hypoxaemia
HYPERCAPNIA = "hypercapnia"  # the PaCO2 is raised: more oxygen may hide its rise
HIDDEN_DEFECT = "hidden-defect"  # a gas-exchange defect that oxygen hides
SEVERE = "severe-hypoxaemia"  # the rule set's severe band: critical on trusted data

FINDING_LABELS = {
    "possible-venous-sample": "the sample may be venous",
    "pao2-exceeds-alveolar": "PaO2 is above the alveolar PO2",
    "specimen-not-arterial": "the gas is not from an arterial sample",
    "specimen-unknown": "the sample type is not stated",
    "value-out-of-range": "a value is impossible",
    "acid-base-inconsistent": "pH, PaCO2 and HCO3 do not agree",
    "dyshaemoglobin": "carboxy- or methaemoglobin is raised",
    "occult-hypoxaemia": "SpO2 may overestimate the arterial saturation",
    "spo2-sao2-discordant": "SpO2 and SaO2 disagree",
    "fio2-missing": "FiO2 not recorded",
    "fio2-time-mismatch": "FiO2 not recorded near the time of the gas",
    "fio2-estimated-from-flow": "FiO2 estimated from device and flow",
    "paco2-missing": "PaCO2 missing",
    "no-arterial-gas": "no arterial gas",
    "pb-assumed-sea-level": "barometric pressure assumed at sea level",
    "pb-estimated-from-altitude": "barometric pressure estimated from altitude",
    "hypoxaemia-mild": "mild hypoxaemia",
    "hypoxaemia-moderate": "moderate hypoxaemia",
    "hypoxaemia-severe": "severe hypoxaemia",
    "acute-respiratory-acidosis": "acute respiratory acidosis",
    "chronic-respiratory-acidosis": "chronic (compensated) respiratory acidosis",
    "oxygen-masks-gas-exchange-defect": "a gas-exchange defect hidden by oxygen",
    "oxygen-masks-hypercapnia": "hypercapnia hidden by oxygen",
    "hypercapnia": "the PaCO2 is raised",
    "acid-base-impossible": "pH, PaCO2 and HCO3 cannot come from one sample",
    "probable-unit-slip": "values look like kPa sent as mmHg",
    "fio2-estimate-raised-by-pao2": "the PaO2 needs more oxygen than the device estimate",
    "spo2-above-target-band": "SpO2 above its target band",
    "spo2-below-target-band": "SpO2 below its target band",
    "exertional-desaturation": "desaturation on exertion",
    "metabolic-alkalosis-compensation": "PaCO2 raised to compensate a metabolic alkalosis",
    "respiratory-compensation-inadequate": "ventilation not compensating a metabolic acidosis",
    "value-outside-window": "a value was taken too long before the gas to use",
    "fio2-for-target-predicted": "the FiO2 for the target band, predicted from the fitted curve",
    "target-band-unreachable": "the target band is out of reach even on FiO2 1.0",
    "low-mixed-venous-oxygen": "low mixed venous oxygen",
    "normal-for-altitude": "normal for the altitude",
    "unit-converted": "a unit was converted",
    "observation-ignored": "an observation was not used",
    "resource-ignored": "a resource was not read",
    "time-zone-assumed": "a time without a zone was read as UTC",
    "time-imprecise": "a date without a day",
}
FINDING_TAGS: dict[str, frozenset[str]] = {
    "occult-hypoxaemia": frozenset({SAFETY, NOTABLE}),
    "spo2-sao2-discordant": frozenset({SAFETY, NOTABLE}),
    "dyshaemoglobin": frozenset({SAFETY, NOTABLE}),
    "acid-base-inconsistent": frozenset({SAFETY, NOTABLE}),
    "acute-respiratory-acidosis": frozenset({SAFETY, NOTABLE, HYPERCAPNIA}),
    "chronic-respiratory-acidosis": frozenset({NOTABLE, HYPERCAPNIA}),
    "oxygen-masks-gas-exchange-defect": frozenset({NOTABLE, HIDDEN_DEFECT}),
    "oxygen-masks-hypercapnia": frozenset({SAFETY, NOTABLE, HYPERCAPNIA}),
    "hypercapnia": frozenset({NOTABLE, HYPERCAPNIA}),
    "acid-base-impossible": frozenset({SAFETY, NOTABLE}),
    "probable-unit-slip": frozenset({SAFETY, NOTABLE}),
    "respiratory-compensation-inadequate": frozenset({SAFETY, NOTABLE}),
    "spo2-above-target-band": frozenset({NOTABLE}),
    "target-band-unreachable": frozenset({SAFETY, NOTABLE}),
    "low-mixed-venous-oxygen": frozenset({NOTABLE}),
    "hypoxaemia-severe": frozenset({SEVERE}),
}

# View name -> measured quantity of the index gas (value in the quantity's canonical unit).
_MEASURED: dict[str, Quantity] = {
    "pao2": Quantity.ARTERIAL_PO2,
    "paco2": Quantity.ARTERIAL_PCO2,
    "ph": Quantity.ARTERIAL_PH,
    "spo2": Quantity.SPO2,
    "sao2": Quantity.ARTERIAL_SO2,
    "haemoglobin": Quantity.HAEMOGLOBIN,
    "oxygen_flow": Quantity.OXYGEN_FLOW,
}
# View name -> derived value of the index gas (the result's Parameters names).
_DERIVED: dict[str, str] = {
    "fio2": "fio2",
    "barometric_pressure": "barometric-pressure",
    "inspired_po2": "inspired-po2",
    "alveolar_po2": "alveolar-po2",
    "aa_gradient": "aa-gradient",
    "aa_limit": "aa-gradient-upper-limit",
    "a_a_ratio": "a-a-ratio",
    "pf_ratio": "pf-ratio",
    "sf_ratio": "sf-ratio",
    "shunt_fraction": "shunt-fraction",
    "venous_admixture": "venous-admixture",
    "shunt_at_least": "shunt-dissolved-bound",
    "imputed_pao2": "imputed-pao2",
    "pao2_expected": "pao2-expected",
    "paco2_limit": "paco2-upper-limit",
}
# View name -> (rule fact of the index gas comparing it with an earlier gas, its unit).
_SERIAL: dict[str, tuple[str, str]] = {
    "fio2_step": ("fio2_step", "1"),
    "pao2_change": ("pao2_change", "mm[Hg]"),
}


@dataclass(frozen=True, slots=True)
class Number:
    """A value in its canonical UCUM unit (``mm[Hg]``, ``1`` for fractions, ``%``, ...)."""

    value: float
    unit: str


@dataclass(frozen=True, slots=True)
class MechanismLine:
    """One mechanism: its code, grade, the reason with its numbers, what would settle it."""

    code: str
    grade: str
    rationale: str
    discriminator: str | None


@dataclass(frozen=True, slots=True)
class FindingLine:
    """One finding: its code, severity (error, warning, information), message, the words a
    card uses for it and the roles it plays (``FINDING_TAGS``)."""

    code: str
    severity: str
    message: str
    label: str = ""
    tags: frozenset[str] = frozenset()

    @classmethod
    def of(cls, code: str, severity: str, message: str) -> FindingLine:
        label = FINDING_LABELS.get(code, code.replace("-", " "))
        return cls(code, severity, message, label, FINDING_TAGS.get(code, frozenset()))


@dataclass(frozen=True, slots=True)
class AssessmentView:
    """What the cards may know of an assessment."""

    decision_id: str
    ruleset: str  # "id|version"
    pattern: str  # no-hypoxaemia | single | mixed | indeterminate | not-classifiable
    hypoxaemia: str  # present | absent | unknown
    status: str  # success | data-requested | data-required
    mechanisms: tuple[MechanismLine, ...]
    findings: tuple[FindingLine, ...]
    numbers: Mapping[str, Number]
    fio2_source: str | None
    device: str | None  # the oxygen-device code paired with the index gas
    sample_time: datetime | None  # the index gas (or oximetry) time
    oxygenation_measured: bool  # an arterial PO2 or an SpO2 reached the rules
    data_requested: tuple[str, ...]  # rule fact names
    gas_exchange: str = "unknown"  # defect | normal | unknown: abnormal for age or not
    uncertain_inputs: tuple[str, ...] = ()  # inputs known only as a range, in words

    def grade(self, mechanism: str) -> str | None:
        return next((m.grade for m in self.mechanisms if m.code == mechanism), None)

    def has(self, code: str) -> bool:
        return any(f.code == code for f in self.findings)

    def number(self, name: str) -> Number | None:
        return self.numbers.get(name)


def _text(value: object) -> str:
    return str(value.value) if isinstance(value, Enum) else str(value)


def _numbers(a: Assessment) -> dict[str, Number]:
    gas, derived = a.index.gas, a.index.derived
    found: dict[str, Number] = {}
    for name, quantity in _MEASURED.items():
        m = gas.get(quantity)
        if m is not None and isinstance(m.value, float):
            found[name] = Number(m.value, m.unit)
    for name, key in _DERIVED.items():
        d = derived.get(key)
        if d is not None:
            found[name] = Number(d.value, d.unit)
    for name, (fact, unit) in _SERIAL.items():
        value = a.serial.get(fact)
        if isinstance(value, float):
            found[name] = Number(value, unit)
    return found


def view(a: Assessment) -> AssessmentView:
    """The cards' view of ``a``."""
    gas = a.index.gas
    device = gas.get(Quantity.OXYGEN_DEVICE)
    return AssessmentView(
        decision_id=a.decision_id,
        ruleset=a.ruleset_identity,
        pattern=_text(a.pattern),
        hypoxaemia=_text(a.hypoxaemia),
        status=_text(a.status),
        mechanisms=tuple(
            MechanismLine(_text(m.code), _text(m.grade), m.rationale, m.discriminator)
            for m in a.mechanisms
        ),
        findings=tuple(
            FindingLine.of(_text(f.code), _text(f.severity), f.message) for f in a.findings
        ),
        numbers=MappingProxyType(_numbers(a)),
        fio2_source=None if a.index.fio2_source is None else _text(a.index.fio2_source),
        device=device.value if device is not None and isinstance(device.value, str) else None,
        sample_time=gas.time,
        oxygenation_measured=Quantity.ARTERIAL_PO2 in gas.values or Quantity.SPO2 in gas.values,
        data_requested=tuple(_text(f) for f in a.data_requested),
        gas_exchange=_text(a.gas_exchange),
        uncertain_inputs=tuple(a.uncertain_inputs),
    )
