"""``rows.result_row``: one assessment as one ``results/`` row, numbers in the unit their
column names."""

from __future__ import annotations

import dataclasses
import json
from datetime import UTC, datetime
from enum import Enum
from pathlib import Path
from typing import Any

import pytest

from service.assess.derive import Derived
from service.assess.partition import assessment_partitions
from service.assess.result import Assessment
from service.bulk.rows import (
    GRADE_COLUMNS,
    RESIDENCE_COLUMNS,
    RESULT_COLUMNS,
    _deficit,
    result_row,
)
from service.bulk.rows import SERIAL as SERIAL_COLUMNS
from service.config import Settings
from service.engine import Mechanism
from service.fhir.extract import read_bundle
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
KPA = ROOT / "fixtures" / "cases" / "input-forms" / "hypoventilation-acute-kpa.bundle.json"
SAO2 = ROOT / "fixtures" / "cases" / "data-quality" / "possible-venous-sample.bundle.json"
SPECIMEN_UNKNOWN = ROOT / "fixtures" / "cases" / "data-quality" / "specimen-unknown.bundle.json"
SERIAL = ROOT / "fixtures" / "cases" / "serial" / "falling-admixture-vq-mismatch.bundle.json"
ALTITUDE_UNKNOWN_RESIDENCE = (
    ROOT / "fixtures" / "cases" / "principles" / "p07-4000m-residence-unstated-same-gas.bundle.json"
)
# UCUM (the unit system FHIR quantities use) defines m[Hg] = 133.3220 kPa, so 1 mm[Hg] =
# 133.3220 Pa (The Unified Code for Units of Measure, table of derived units, "m[Hg]"); the
# conventional 133.322 387 415 Pa (NIST SP 811) differs by 1.3 ppm.
PA_PER_MMHG = 133.3220


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def assess(runtime: Runtime, path: Path) -> Assessment:
    data = json.loads(path.read_text(encoding="utf-8"))
    return runtime.assess_intake(read_bundle(data), now=datetime(2026, 12, 1, tzinfo=UTC))


def row(a: Assessment) -> dict[str, Any]:
    return result_row(
        a,
        settings=Settings(),
        patient="Patient/p",
        observation="Observation/o",
        time=datetime(2026, 4, 2, 3, 10, tzinfo=UTC),
        location=None,
        specimen="arterial",
        earlier_gases=0,
        settings_hash="s",
    )


def test_a_row_has_exactly_the_declared_columns(runtime: Runtime) -> None:
    assert list(row(assess(runtime, KPA))) == [c.name for c in RESULT_COLUMNS]
    assert list(GRADE_COLUMNS) == [m.value for m in Mechanism]  # every mechanism, in order


def test_pressures_sent_in_kpa_are_written_in_mmhg(runtime: Runtime) -> None:
    r = row(assess(runtime, KPA))
    assert r["pao2_mmhg"] == pytest.approx(7.73 * 1000 / PA_PER_MMHG, rel=1e-9)
    assert r["paco2_mmhg"] == pytest.approx(9.33 * 1000 / PA_PER_MMHG, rel=1e-9)
    assert r["ph"] == 7.2 and r["hco3_mmol_l"] == 26.5 and r["haemoglobin_g_dl"] == 14.2
    assert r["spo2_percent"] == pytest.approx(90.0)
    assert r["fio2_fraction"] == pytest.approx(0.21)


def test_grades_pattern_and_findings_are_the_assessments(runtime: Runtime) -> None:
    a = assess(runtime, SAO2)
    r = row(a)
    assert r["sao2_percent"] == pytest.approx(68.0)  # sent as 68 %, held as 0.68 inside
    assert {GRADE_COLUMNS[m.code]: m.grade for m in a.mechanisms} == {
        c: r[c] for c in GRADE_COLUMNS.values()
    }
    assert r["pattern"] == a.pattern and r["status"] == a.status
    assert set(r["findings"]) == {f.code for f in a.findings}
    errors_first = [f.code for f in a.findings if f.severity == "error"]
    assert r["findings"][: len(errors_first)] == sorted(set(errors_first))
    assert r["ruleset"] == a.ruleset_identity and r["ruleset_hash"] == a.ruleset_hash


def cerveri_expected_pao2_mmhg(age: float) -> float:
    """Mean PaO2 of healthy adults at sea level on air: 143.6 − 0.39 age − 0.56 BMI − 0.57
    PaCO2 below 75 years, 83.4 mmHg from 75 (Cerveri I et al., Am J Respir Crit Care Med
    1995;152:934), at BMI 25 and PaCO2 40 as the service takes them (docs/deficit-partition.md)."""
    return 83.4 if age >= 75 else 143.6 - 0.39 * age - 0.56 * 25 - 0.57 * 40


def test_the_deficit_partition_is_the_index_gass_in_mmhg(runtime: Runtime) -> None:
    r = row(assess(runtime, KPA))
    assert r["deficit_partitions"] == 1 and r["deficit_pao2_imputed"] is False
    assert r["deficit_not_computed"] is None
    age = r["age_years"]
    assert r["deficit_expected_pao2_mmhg"] == pytest.approx(cerveri_expected_pao2_mmhg(age))
    # Sent in kPa: the fall is from the PaO2 in mm[Hg] (UCUM m[Hg], see PA_PER_MMHG).
    pao2 = 7.73 * 1000 / PA_PER_MMHG
    assert r["deficit_fall_mmhg"] == pytest.approx(r["deficit_expected_pao2_mmhg"] - pao2)
    parts = [r[f"deficit_{p}_mmhg"] for p in ("inspired", "ventilation", "gas_exchange")]
    parts.append(r["deficit_unattributed_mmhg"])
    assert sum(parts) == pytest.approx(r["deficit_fall_mmhg"], abs=1e-9)
    assert r["deficit_ventilation_mmhg"] > 0  # PaCO2 9.33 kPa (70 mmHg): hypoventilation
    assert all(r[column] is None for column, _, _ in RESIDENCE_COLUMNS)


def test_two_partitions_fill_the_columns_of_each_residence(runtime: Runtime) -> None:
    a = assess(runtime, ALTITUDE_UNKNOWN_RESIDENCE)
    (index, *_) = assessment_partitions(a, Settings())
    by_residence = {s.residence: s.partition for s in index.shown}
    r = row(a)
    assert r["deficit_partitions"] == 2 == len(by_residence)
    for part in ("inspired", "ventilation", "unattributed"):
        assert r[f"deficit_{part}_mmhg"] is None
        for residence, partition in by_residence.items():
            assert r[f"deficit_{part}_{residence}_mmhg"] == getattr(partition, part)
    for residence in by_residence:
        parts = [r[f"deficit_{p}_{residence}_mmhg"] for p in ("inspired", "ventilation")]
        total = sum(parts) + r["deficit_gas_exchange_mmhg"]
        total += r[f"deficit_unattributed_{residence}_mmhg"]
        assert total == pytest.approx(r["deficit_fall_mmhg"], abs=1e-9)
    assert r["deficit_inspired_resident_mmhg"] != r["deficit_inspired_visitor_mmhg"]
    assert r["inputs_uncertain"] and any("altitude" in u for u in r["uncertain_inputs"])


def test_partitions_that_disagree_where_no_residence_can_stop_the_row(runtime: Runtime) -> None:
    a = assess(runtime, ALTITUDE_UNKNOWN_RESIDENCE)
    (index, *_) = assessment_partitions(a, Settings())
    first, second = index.shown
    assert second.partition.gas_exchange is not None
    moved = dataclasses.replace(second.partition, gas_exchange=second.partition.gas_exchange + 1)
    broken = dataclasses.replace(second, partition=moved)
    with pytest.raises(ValueError, match="deficit_gas_exchange_mmhg"):
        _deficit(dataclasses.replace(index, shown=(first, broken)))


def test_a_gas_not_used_as_arterial_has_its_partition_imputed(runtime: Runtime) -> None:
    r = row(assess(runtime, SPECIMEN_UNKNOWN))
    assert r["pao2_mmhg"] is None and r["imputed_pao2_mmhg"] is not None
    assert r["deficit_pao2_imputed"] is True
    assert r["deficit_ventilation_mmhg"] is None and r["deficit_unattributed_mmhg"] is not None


def test_the_response_to_oxygen_is_the_assessments(runtime: Runtime) -> None:
    """The fixture's two gases: PaO2 55 on FiO2 0.21, then 150 on 0.40."""
    a = assess(runtime, SERIAL)
    r = row(a)
    assert r["response_fio2_step_fraction"] == pytest.approx(0.40 - 0.21)
    assert r["response_pao2_change_mmhg"] == pytest.approx(150 - 55)
    for column, fact, _ in SERIAL_COLUMNS:
        assert r[column] == a.serial[fact]
    assert r["gas_exchange"] == "defect" and r["pattern"] == a.pattern
    assert all(row(assess(runtime, KPA))[c] is None for c, _, _ in SERIAL_COLUMNS)


def test_grades_given_as_enums_are_written_as_their_codes(runtime: Runtime) -> None:
    class Grade(Enum):
        LIKELY = "likely"

    a = assess(runtime, KPA)
    a.mechanisms = [dataclasses.replace(m, grade=Grade.LIKELY) for m in a.mechanisms]  # type: ignore[arg-type]
    assert {row(a)[c] for c in GRADE_COLUMNS.values()} == {"likely"}


def test_a_derived_value_in_another_unit_stops_the_row(runtime: Runtime) -> None:
    a = assess(runtime, KPA)
    pf = a.index.derived["pf-ratio"]
    a.index.derived["pf-ratio"] = Derived(pf.value * 0.133322, "kPa", pf.method, pf.inputs)
    with pytest.raises(ValueError, match="pf-ratio is in kPa"):
        row(a)


def test_a_fact_in_another_unit_than_its_column_stops_the_job(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    from service.bulk import rows

    rows._check_units()  # the shipped catalogue: every column in its fact's unit
    wrong = (("response_pao2_change_kpa", "pao2_change", "kPa"),)
    monkeypatch.setattr(rows, "SERIAL", wrong)
    with pytest.raises(ValueError, match="pao2_change is in mm\\[Hg\\]"):
        rows._check_units()
    monkeypatch.setattr(rows, "SERIAL", ())
    monkeypatch.setattr(rows, "DEFICIT", (("deficit_fall_kpa", "fall", "fio2"),))
    with pytest.raises(ValueError, match="fact fio2 is in 1"):
        rows._check_units()
