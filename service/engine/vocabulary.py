"""Closed vocabularies shared by rule files, the engine and its callers.

Every word a rule file may use for an outcome is listed here, so a typo in a rule is a
load error rather than a silently new category. The values are the wire spellings
(kebab-case); the member names are their Python spellings. Extending these vocabularies is a
code change on purpose: downstream consumers switch on these values.

Finding codes are the exception: ``FindingCode`` lists the built-in ones (the service's own
intake raises some of them), and a rule set adds its own as data, under ``findings:`` in its
``ruleset.yaml``, each with a display and a description (``loader``). A rule may use either.
"""

from enum import StrEnum

__all__ = [
    "FindingCode",
    "GasExchangeStatus",
    "Grade",
    "HypoxaemiaStatus",
    "Mechanism",
    "Pattern",
    "RuleStatus",
    "Severity",
]


class Mechanism(StrEnum):
    """Physiological mechanisms of hypoxaemia the rule set grades, in reporting order."""

    LOW_INSPIRED_OXYGEN = "low-inspired-oxygen"
    HYPOVENTILATION = "hypoventilation"
    DIFFUSION_LIMITATION = "diffusion-limitation"
    VQ_MISMATCH = "vq-mismatch"
    SHUNT = "shunt"


class Grade(StrEnum):
    """How strongly the data support one mechanism.

    A rule may emit any of them; `not-assessable` from a rule says why the data cannot speak
    (its rationale). A mechanism no rule decided is also `not-assessable`, naming what was
    missing.
    """

    LIKELY = "likely"
    POSSIBLE = "possible"
    UNLIKELY = "unlikely"
    NOT_ASSESSABLE = "not-assessable"


class Severity(StrEnum):
    """Severity of a finding; any fired `error` finding makes the gas not classifiable."""

    ERROR = "error"
    WARNING = "warning"
    INFORMATION = "information"


class Pattern(StrEnum):
    """Overall shape of the verdict across the five mechanisms."""

    NO_HYPOXAEMIA = "no-hypoxaemia"
    SINGLE = "single"
    MIXED = "mixed"
    INDETERMINATE = "indeterminate"
    NOT_CLASSIFIABLE = "not-classifiable"


class HypoxaemiaStatus(StrEnum):
    """Whether hypoxaemia is present; rules may assert `present` or `absent` only."""

    PRESENT = "present"
    ABSENT = "absent"
    UNKNOWN = "unknown"


class GasExchangeStatus(StrEnum):
    """Whether gas exchange is abnormal for age; rules may assert `defect` or `normal` only."""

    DEFECT = "defect"
    NORMAL = "normal"
    UNKNOWN = "unknown"


class RuleStatus(StrEnum):
    """Lifecycle of a rule file: draft → testing → active → retired.

    Only `active` rules shape the verdict. `testing` rules are evaluated in the shadow:
    their results are reported next to the active ones but never change a grade, a
    finding, the hypoxaemia status or the pattern. `draft` rules are validated at load
    time and not evaluated; `retired` rules are read (they count for id uniqueness and
    the content hash) and neither checked against the catalogue nor evaluated.
    """

    DRAFT = "draft"
    TESTING = "testing"
    ACTIVE = "active"
    RETIRED = "retired"


class FindingCode(StrEnum):
    """Built-in codes of findings: data-quality remarks and clinical context beside the
    grades. A rule set declares any others in its manifest (``findings:``)."""

    # Data quality and plausibility.
    PAO2_EXCEEDS_ALVEOLAR = "pao2-exceeds-alveolar"
    POSSIBLE_VENOUS_SAMPLE = "possible-venous-sample"
    SPECIMEN_NOT_ARTERIAL = "specimen-not-arterial"
    SPECIMEN_UNKNOWN = "specimen-unknown"
    SPO2_SAO2_DISCORDANT = "spo2-sao2-discordant"
    OCCULT_HYPOXAEMIA = "occult-hypoxaemia"
    DYSHAEMOGLOBIN = "dyshaemoglobin"
    ACID_BASE_INCONSISTENT = "acid-base-inconsistent"
    ACID_BASE_IMPOSSIBLE = "acid-base-impossible"
    PROBABLE_UNIT_SLIP = "probable-unit-slip"
    FIO2_ESTIMATE_RAISED_BY_PAO2 = "fio2-estimate-raised-by-pao2"
    FIO2_MISSING = "fio2-missing"
    FIO2_ESTIMATED_FROM_FLOW = "fio2-estimated-from-flow"
    FIO2_TIME_MISMATCH = "fio2-time-mismatch"
    PB_ESTIMATED_FROM_ALTITUDE = "pb-estimated-from-altitude"
    PB_ASSUMED_SEA_LEVEL = "pb-assumed-sea-level"
    NO_ARTERIAL_GAS = "no-arterial-gas"
    PACO2_MISSING = "paco2-missing"
    VALUE_OUT_OF_RANGE = "value-out-of-range"
    UNIT_CONVERTED = "unit-converted"
    OBSERVATION_IGNORED = "observation-ignored"
    VALUE_OUTSIDE_WINDOW = "value-outside-window"
    # Clinical context.
    HYPOXAEMIA_MILD = "hypoxaemia-mild"
    HYPOXAEMIA_MODERATE = "hypoxaemia-moderate"
    HYPOXAEMIA_SEVERE = "hypoxaemia-severe"
    OXYGEN_MASKS_GAS_EXCHANGE_DEFECT = "oxygen-masks-gas-exchange-defect"
    OXYGEN_MASKS_HYPERCAPNIA = "oxygen-masks-hypercapnia"
    HYPERCAPNIA = "hypercapnia"
    SPO2_ABOVE_TARGET_BAND = "spo2-above-target-band"
    SPO2_BELOW_TARGET_BAND = "spo2-below-target-band"
    FIO2_FOR_TARGET_PREDICTED = "fio2-for-target-predicted"
    TARGET_BAND_UNREACHABLE = "target-band-unreachable"
    EXERTIONAL_DESATURATION = "exertional-desaturation"
    METABOLIC_ALKALOSIS_COMPENSATION = "metabolic-alkalosis-compensation"
    RESPIRATORY_COMPENSATION_INADEQUATE = "respiratory-compensation-inadequate"
    NORMAL_FOR_ALTITUDE = "normal-for-altitude"
    LOW_MIXED_VENOUS_OXYGEN = "low-mixed-venous-oxygen"
    ACUTE_RESPIRATORY_ACIDOSIS = "acute-respiratory-acidosis"
    CHRONIC_RESPIRATORY_ACIDOSIS = "chronic-respiratory-acidosis"
