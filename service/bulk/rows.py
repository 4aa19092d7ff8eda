"""One assessed gas as one row of ``results/``: the only place that reads an ``Assessment`` for
the bulk job.

Everything the bulk job knows about the shape of an assessment is in this module: when the
assessment changes (enums for grades and patterns, a PaO2 deficit partition on every gas), this
is the one module to adapt, and ``tests/bulk/test_rows.py`` says what each column must hold.

Numbers carry their unit in the column name. Measured values are read from the index gas's
paired measurements (canonical units, ``service.intake.model.QUANTITY_UNITS``); derived values
from the assessment's derived quantities, whose unit is checked against the column's, so a
change of unit upstream fails loudly instead of writing wrong numbers.
"""

from __future__ import annotations

from datetime import datetime
from enum import Enum

from service.assess.result import Assessment
from service.intake.model import QUANTITY_UNITS, Quantity
from service.physiology.units import percent_from_fraction

from .schema import Column, Kind

S, D, L, T, LIST = Kind.STRING, Kind.DOUBLE, Kind.LONG, Kind.TIMESTAMP, Kind.STRINGS

# The five mechanisms, in the contract's order, and the column that carries each grade.
GRADE_COLUMNS: dict[str, str] = {
    "low-inspired-oxygen": "grade_low_inspired_oxygen",
    "hypoventilation": "grade_hypoventilation",
    "diffusion-limitation": "grade_diffusion_limitation",
    "vq-mismatch": "grade_vq_mismatch",
    "shunt": "grade_shunt",
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
    ("barometric_pressure_mmhg", "barometric-pressure", "mm[Hg]"),
    ("alveolar_po2_mmhg", "alveolar-po2", "mm[Hg]"),
    ("aa_gradient_mmhg", "aa-gradient", "mm[Hg]"),
    ("aa_gradient_limit_mmhg", "aa-gradient-upper-limit", "mm[Hg]"),
    ("pf_ratio_mmhg", "pf-ratio", "mm[Hg]"),
    ("sf_ratio", "sf-ratio", "1"),
    ("shunt_fraction_percent", "shunt-fraction", "%"),
)
# The PaO2 deficit partition of the index gas (expected PaO2 for age at sea level on air, the
# fall from it, and the shares of that fall). Null until the assessment carries it.
DEFICIT: tuple[tuple[str, str], ...] = (
    ("deficit_expected_pao2_mmhg", "expected_pao2_mmhg"),
    ("deficit_total_mmhg", "total_mmhg"),
    ("deficit_inspired_mmhg", "inspired_mmhg"),
    ("deficit_paco2_mmhg", "paco2_mmhg"),
    ("deficit_aa_gradient_mmhg", "aa_gradient_mmhg"),
    ("deficit_rest_mmhg", "rest_mmhg"),
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
    Column("status", S),
    *(Column(name, S) for name in GRADE_COLUMNS.values()),
    Column("findings", LIST),
    Column("data_requested", LIST),
    Column("age_years", D),
    *(Column(name, D) for name, _, _ in MEASURED),
    *(Column(name, D) for name, _, _ in DERIVED),
    Column("fio2_source", S),
    Column("pressure_source", S),
    *(Column(name, D) for name, _ in DEFICIT),
    Column("ruleset", S),
    Column("ruleset_hash", S),
    Column("settings_hash", S),
)

_SEVERITY_ORDER = {"error": 0, "warning": 1, "information": 2}


def code(value: object) -> str:
    """A grade, pattern, status or severity as its contract code (an enum's value or a str)."""
    return str(value.value) if isinstance(value, Enum) else str(value)


def result_row(
    assessment: Assessment,
    *,
    patient: str,
    observation: str | None,
    time: datetime,
    location: str | None,
    earlier_gases: int,
    settings_hash: str,
) -> dict[str, object]:
    """The ``results/`` row of one assessed gas (``patient`` and ``observation`` already
    pseudonymised when asked)."""
    a = assessment
    grades = {GRADE_COLUMNS[code(m.code)]: code(m.grade) for m in a.mechanisms}
    findings = sorted(a.findings, key=lambda f: (_SEVERITY_ORDER[code(f.severity)], code(f.code)))
    anchor = a.index.gas.anchor
    row: dict[str, object] = {
        "patient": patient,
        "observation": observation,
        "time": time,
        "location": location,
        "specimen": code(anchor.specimen) if anchor and anchor.specimen else None,
        "earlier_gases": earlier_gases,
        "pattern": code(a.pattern),
        "hypoxaemia": code(a.hypoxaemia),
        "status": code(a.status),
        **{column: grades.get(column) for column in GRADE_COLUMNS.values()},
        "findings": list(dict.fromkeys(code(f.code) for f in findings)),
        "data_requested": list(a.data_requested),
        "age_years": _number(a.index.facts.get("age")),
        **_measured(a),
        **_derived(a),
        "fio2_source": a.index.fio2_source,
        "pressure_source": a.index.barometric_source,
        **_deficit(a),
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


def _deficit(a: Assessment) -> dict[str, float | None]:
    """The deficit partition's columns; all null while the index gas has no ``deficit``."""
    partition = getattr(a.index, "deficit", None)
    return {
        column: None if partition is None else _number(getattr(partition, name, None))
        for column, name in DEFICIT
    }
