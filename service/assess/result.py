"""The FHIR-agnostic result of one assessment: what renderers (FHIR, HL7 v2, text) show."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from enum import StrEnum

from service.engine import (
    Evaluation,
    GasExchangeStatus,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    Pattern,
    Severity,
)
from service.intake.model import Patient, Source
from service.physiology.oxygenation_trend import OxygenationTrend

from .derive import GasFacts
from .titration import Titration

CAUTION = (
    "Decision support for qualified clinicians, not a diagnosis. The result depends on the "
    "correctness and completeness of the data sent; it defers to clinical judgement, local "
    "protocols, applicable codes and licensed practice."
)


class ResultStatus(StrEnum):
    """How complete the answer is (``GuidanceResponse.status``)."""

    SUCCESS = "success"
    DATA_REQUESTED = "data-requested"  # graded, and named data would settle open questions
    DATA_REQUIRED = "data-required"  # not classifiable until trusted data are sent


@dataclass(frozen=True, slots=True)
class Finding:
    """A data-quality or context finding: a finding code with its severity."""

    code: str  # a finding code of the result (rules and intake share the code system)
    severity: Severity
    message: str
    subject: Source | None = None
    expression: str | None = None  # where in the input, for intake findings
    rule: str | None = None  # id@version of the rule that raised it
    system: str | None = None
    """The code system of a code the rule set declares (None: the project's built-in codes)."""
    display: str | None = None
    """The declared code's display (built-in codes have none)."""
    about_data: bool | None = None
    """For a declared code, whether it is about the data's quality (True) or the patient
    (False); None for built-in codes, whose kind the renderers know."""


@dataclass(frozen=True, slots=True)
class MechanismVerdict:
    """One of the five mechanisms, graded, with the numbers and the rules behind the grade."""

    code: Mechanism
    grade: Grade
    rationale: str
    rules: tuple[str, ...]
    discriminator: str | None = None
    trace: tuple[str, ...] = ()  # each condition of the deciding rules, with its value


@dataclass(frozen=True, slots=True)
class GasResult:
    """One assessed gas: its facts and derived values; ``index`` marks the latest gas."""

    facts: GasFacts
    index: bool


@dataclass(slots=True)
class Assessment:
    """Everything a renderer needs; nothing here knows FHIR."""

    decision_id: str
    timestamp: datetime
    ruleset_identity: str  # "id|version"
    ruleset_hash: str
    patient: Patient | None
    pattern: Pattern
    hypoxaemia: HypoxaemiaStatus
    mechanisms: list[MechanismVerdict]
    findings: list[Finding]
    index: GasFacts  # the index gas (or, with no gas, the latest oximetry) and its context
    gases: list[GasResult]  # one per arterial gas, index first
    data_requested: list[str]  # fact names that would settle open questions
    status: ResultStatus
    evaluation: Evaluation  # the engine's full evaluation (every rule's trace), for explain
    uncertain_inputs: tuple[str, ...] = ()
    """Inputs known only as a range and assessed at its ends, in words (empty: none)."""
    gas_exchange: GasExchangeStatus = GasExchangeStatus.UNKNOWN
    serial: Mapping[str, float] = field(default_factory=dict)
    """The response to oxygen over the gases (``service.assess.serial``), in catalogue units:
    the FiO2 step, the PaO2 change, the venous admixture at each FiO2; empty with one gas."""
    titration: Titration | None = None
    """The oxygen titration around the index gas, fitted (None: no points on two FiO2s)."""
    trend: OxygenationTrend | None = None
    """The course over three or more arterial gases (None with fewer)."""
