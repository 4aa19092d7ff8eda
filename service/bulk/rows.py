"""One assessed gas as one row of ``results/``: the only place that reads an ``Assessment`` for
the bulk job.

Everything the bulk job knows about the shape of an assessment is in this module: when the
assessment changes, this is the one module to adapt, and ``tests/bulk/test_rows.py`` says what
each column must hold.

Numbers carry their unit in the column name. Measured values are read from the index gas's
paired measurements (canonical units, ``service.intake.model.QUANTITY_UNITS``); derived values
from the assessment's derived quantities, the PaO2 deficit partition from
``service.assess.partition`` and the response to oxygen from the assessment's serial facts —
each one's unit is checked against the column's, so a change of unit upstream fails loudly
instead of writing wrong numbers.

**The deficit partition when it depends on the residence.** At altitude with the residence not
sent, the service gives two partitions, one if the patient lives there and one if they have
come from lower down (``assessment_partitions``). The PaCO2 expected there differs, so the
inspired part and the ventilation part differ (without a PaCO2, the inspired part and the
unattributed rest); the expected PaO2, its lower limit, the fall and the gas-exchange part do
not. A row then holds the parts that do not depend on the residence in the usual columns,
leaves ``deficit_inspired_mmhg``, ``deficit_ventilation_mmhg`` and
``deficit_unattributed_mmhg`` null, and gives both readings in
``deficit_{inspired,ventilation,unattributed}_{resident,visitor}_mmhg``, with
``deficit_partitions`` = 2. A column thus always means one thing: an average or a sum over
``deficit_ventilation_mmhg`` never mixes what the data say with what one assumption says, and
the two readings bound the part where the data leave it open. The parts that cannot differ are
checked (a row is never written from two partitions that disagree where they cannot).
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from enum import Enum

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.partition import GasPartitions, ShownPartition, assessment_partitions
from service.assess.result import Assessment
from service.assess.serial import SERIAL_FACTS
from service.config import Settings
from service.engine import Mechanism
from service.intake.model import QUANTITY_UNITS, Quantity
from service.physiology.reference import Residence
from service.physiology.units import percent_from_fraction

from .schema import Column, Kind

S, D, L, B, T, LIST = Kind.STRING, Kind.DOUBLE, Kind.LONG, Kind.BOOL, Kind.TIMESTAMP, Kind.STRINGS
MMHG = "mm[Hg]"

# The five mechanisms, in the contract's order, and the column that carries each grade.
GRADE_COLUMNS: dict[str, str] = {
    Mechanism.LOW_INSPIRED_OXYGEN.value: "grade_low_inspired_oxygen",
    Mechanism.HYPOVENTILATION.value: "grade_hypoventilation",
    Mechanism.DIFFUSION_LIMITATION.value: "grade_diffusion_limitation",
    Mechanism.VQ_MISMATCH.value: "grade_vq_mismatch",
    Mechanism.SHUNT.value: "grade_shunt",
}

# Measured values of the index gas: column, quantity, whether shown in percent.
MEASURED: tuple[tuple[str, Quantity, bool], ...] = (
    ("pao2_mmhg", Quantity.ARTERIAL_PO2, False),
    ("paco2_mmhg", Quantity.ARTERIAL_PCO2, False),
    ("ph", Quantity.ARTERIAL_PH, False),
    ("hco3_mmol_l", Quantity.ARTERIAL_HCO3, False),
    ("sao2_percent", Quantity.ARTERIAL_SO2, True),
    ("spo2_percent", Quantity.SPO2, True),
    ("haemoglobin_g_dl", Quantity.HAEMOGLOBIN, False),
)
# Derived values of the index gas: column, derived name, the unit the column is in.
DERIVED: tuple[tuple[str, str, str], ...] = (
    ("fio2_fraction", "fio2", "1"),
    ("barometric_pressure_mmhg", "barometric-pressure", MMHG),
    ("alveolar_po2_mmhg", "alveolar-po2", MMHG),
    ("aa_gradient_mmhg", "aa-gradient", MMHG),
    ("aa_gradient_limit_mmhg", "aa-gradient-upper-limit", MMHG),
    ("a_a_ratio", "a-a-ratio", "1"),
    ("pf_ratio_mmhg", "pf-ratio", MMHG),
    ("sf_ratio", "sf-ratio", "1"),
    ("paco2_limit_mmhg", "paco2-upper-limit", MMHG),
    ("room_air_pao2_mmhg", "room-air-pao2", MMHG),
    ("imputed_pao2_mmhg", "imputed-pao2", MMHG),
    ("venous_admixture_percent", "venous-admixture", "%"),
)
# The PaO2 deficit partition of the index gas: column, what it reads (a ``DeficitPartition``
# attribute, or ``lower_limit`` of the shown partition), and the rule-catalogue fact whose unit
# the value is in (checked to be mm[Hg]).
DEFICIT: tuple[tuple[str, str, str], ...] = (
    ("deficit_expected_pao2_mmhg", "expected_pao2", "pao2_expected"),
    ("deficit_pao2_lower_limit_mmhg", "lower_limit", "pao2_lower_limit"),
    ("deficit_fall_mmhg", "fall", "pao2_fall"),
    ("deficit_inspired_mmhg", "inspired", "deficit_inspired"),
    ("deficit_ventilation_mmhg", "ventilation", "deficit_ventilation"),
    ("deficit_gas_exchange_mmhg", "gas_exchange", "deficit_gas_exchange"),
    ("deficit_unattributed_mmhg", "unattributed", "deficit_unattributed"),
)
# The parts that depend on the residence at altitude: one column per residence assumed.
BY_RESIDENCE: tuple[str, ...] = ("inspired", "ventilation", "unattributed")
RESIDENCE_COLUMNS: tuple[tuple[str, str, Residence], ...] = tuple(
    (f"deficit_{part}_{residence.value}_mmhg", part, residence)
    for residence in Residence
    for part in BY_RESIDENCE
)
# Two partitions never differ by more than this where they must agree (mm[Hg]).
AGREE_MMHG = 1e-6
# The response to oxygen (``service.assess.serial``): column, fact, the unit the column is in.
SERIAL: tuple[tuple[str, str, str], ...] = (
    ("response_fio2_step_fraction", "fio2_step", "1"),
    ("response_pao2_change_mmhg", "pao2_change", MMHG),
    ("response_admixture_lower_fio2_percent", "admixture_at_lower_fio2", "%"),
    ("response_admixture_higher_fio2_percent", "admixture_at_higher_fio2", "%"),
    ("response_admixture_fall_least_percent", "admixture_fall_least", "%"),
    ("response_admixture_change_largest_percent", "admixture_change_largest", "%"),
)

RESULT_COLUMNS: tuple[Column, ...] = (
    Column("patient", S),
    Column("observation", S),
    Column("time", T),
    Column("location", S),
    Column("specimen", S),
    Column("earlier_gases", L),
    Column("pattern", S),
    Column("hypoxaemia", S),
    Column("gas_exchange", S),
    Column("status", S),
    *(Column(name, S) for name in GRADE_COLUMNS.values()),
    Column("findings", LIST),
    Column("data_requested", LIST),
    Column("inputs_uncertain", B),
    Column("uncertain_inputs", LIST),
    Column("age_years", D),
    *(Column(name, D) for name, _, _ in MEASURED),
    *(Column(name, D) for name, _, _ in DERIVED),
    Column("fio2_source", S),
    Column("pressure_source", S),
    Column("deficit_partitions", L),
    Column("deficit_pao2_imputed", B),
    Column("deficit_not_computed", S),
    *(Column(name, D) for name, _, _ in DEFICIT),
    *(Column(name, D) for name, _, _ in RESIDENCE_COLUMNS),
    *(Column(name, D) for name, _, _ in SERIAL),
    Column("ruleset", S),
    Column("ruleset_hash", S),
    Column("settings_hash", S),
)

_SEVERITY_ORDER = {"error": 0, "warning": 1, "information": 2}


def _check_units() -> None:
    """The deficit and response facts are in the units their columns name (import time)."""
    serial_units = {spec.name: spec.unit for spec in SERIAL_FACTS}
    for column, fact, unit in (
        *((c, f, MMHG) for c, _, f in DEFICIT),
        *SERIAL,
    ):
        found = DEFAULT_CATALOGUE[fact].unit if fact in DEFAULT_CATALOGUE else None
        found = serial_units.get(fact, found)
        if found != unit:
            raise ValueError(f"fact {fact} is in {found}, the column {column} in {unit}")


_check_units()


def code(value: object) -> str:
    """A grade, pattern, status or severity as its contract code (an enum's value or a str)."""
    return str(value.value) if isinstance(value, Enum) else str(value)


def result_row(
    assessment: Assessment,
    *,
    settings: Settings,
    patient: str,
    observation: str | None,
    time: datetime,
    location: str | None,
    specimen: str | None,
    earlier_gases: int,
    settings_hash: str,
) -> dict[str, object]:
    """The ``results/`` row of one assessed gas (``patient`` and ``observation`` already
    pseudonymised when asked; ``settings`` are the ones the assessment was made with, which
    its deficit partitions are read with)."""
    a = assessment
    grades = {GRADE_COLUMNS[code(m.code)]: code(m.grade) for m in a.mechanisms}
    findings = sorted(a.findings, key=lambda f: (_SEVERITY_ORDER[code(f.severity)], code(f.code)))
    row: dict[str, object] = {
        "patient": patient,
        "observation": observation,
        "time": time,
        "location": location,
        "specimen": specimen,
        "earlier_gases": earlier_gases,
        "pattern": code(a.pattern),
        "hypoxaemia": code(a.hypoxaemia),
        "gas_exchange": code(a.gas_exchange),
        "status": code(a.status),
        **{column: grades.get(column) for column in GRADE_COLUMNS.values()},
        "findings": list(dict.fromkeys(code(f.code) for f in findings)),
        "data_requested": list(a.data_requested),
        "inputs_uncertain": bool(a.uncertain_inputs),
        "uncertain_inputs": list(a.uncertain_inputs),
        "age_years": _number(a.index.facts.get("age")),
        **_measured(a),
        **_derived(a),
        "fio2_source": a.index.fio2_source,
        "pressure_source": a.index.barometric_source,
        **_deficit(_index_partitions(a, settings)),
        **_serial(a),
        "ruleset": a.ruleset_identity,
        "ruleset_hash": a.ruleset_hash,
        "settings_hash": settings_hash,
    }
    return row


def _number(value: object) -> float | None:
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) else None


def _measured(a: Assessment) -> dict[str, float | None]:
    values = a.index.gas.values
    out: dict[str, float | None] = {}
    for column, quantity, as_percent in MEASURED:
        m = values.get(quantity)
        number = _number(m.value) if m is not None else None
        if number is not None and as_percent:
            assert QUANTITY_UNITS[quantity] == "1"
            number = percent_from_fraction(number)
        out[column] = number
    return out


def _derived(a: Assessment) -> dict[str, float | None]:
    out: dict[str, float | None] = {}
    for column, name, unit in DERIVED:
        d = a.index.derived.get(name)
        if d is not None and d.unit != unit:
            raise ValueError(f"derived {name} is in {d.unit}, the column {column} in {unit}")
        out[column] = None if d is None else d.value
    return out


def _index_partitions(a: Assessment, settings: Settings) -> GasPartitions:
    """The index gas's partitions (always first: ``assessment_partitions``)."""
    first = assessment_partitions(a, settings)[0]
    assert first.index
    return first


def _part(shown: ShownPartition, part: str) -> float | None:
    if part == "lower_limit":
        return shown.lower_limit_mmhg
    value = getattr(shown.partition, part)
    return None if value is None else float(value)


def _agreed(shown: Sequence[ShownPartition], column: str, part: str) -> float | None:
    """A part no residence changes, as every partition gives it; ValueError if they differ."""
    values = [_part(s, part) for s in shown]
    first = values[0]
    for v in values[1:]:
        if (v is None) != (first is None) or (
            v is not None and first is not None and abs(v - first) > AGREE_MMHG
        ):
            raise ValueError(f"the partitions of one gas differ in {column}")
    return first


def _deficit(partitions: GasPartitions) -> dict[str, object]:
    """The deficit columns of the index gas (module docstring: two partitions)."""
    shown = partitions.shown
    out: dict[str, object] = {
        "deficit_partitions": len(shown),
        "deficit_pao2_imputed": shown[0].imputed if shown else None,
        "deficit_not_computed": partitions.absent,
    }
    for column, part, _ in DEFICIT:
        if not shown or (part in BY_RESIDENCE and len(shown) > 1):
            out[column] = None  # in the columns of each residence instead
        else:
            out[column] = _agreed(shown, column, part)
    by_residence = {s.residence: s for s in shown} if len(shown) > 1 else {}
    for column, part, residence in RESIDENCE_COLUMNS:
        assumed = by_residence.get(residence.value)
        out[column] = None if assumed is None else _part(assumed, part)
    if len(shown) > 1 and set(by_residence) != {r.value for r in Residence}:
        raise ValueError("two deficit partitions that are not one per residence")
    return out


def _serial(a: Assessment) -> dict[str, float | None]:
    return {column: _number(a.serial.get(fact)) for column, fact, _ in SERIAL}
