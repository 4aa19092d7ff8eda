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
from service.assess.result import Assessment
from service.bulk.rows import DEFICIT, GRADE_COLUMNS, RESULT_COLUMNS, result_row
from service.fhir.extract import read_bundle
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
KPA = ROOT / "fixtures" / "cases" / "input-forms" / "hypoventilation-acute-kpa.bundle.json"
SAO2 = ROOT / "fixtures" / "cases" / "data-quality" / "possible-venous-sample.bundle.json"
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
        patient="Patient/p",
        observation="Observation/o",
        time=datetime(2026, 4, 2, 3, 10, tzinfo=UTC),
        location=None,
        earlier_gases=0,
        settings_hash="s",
    )


def test_a_row_has_exactly_the_declared_columns(runtime: Runtime) -> None:
    assert list(row(assess(runtime, KPA))) == [c.name for c in RESULT_COLUMNS]


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


def test_the_deficit_partition_is_null_until_the_assessment_carries_it(runtime: Runtime) -> None:
    a = assess(runtime, KPA)
    assert all(row(a)[column] is None for column, _ in DEFICIT)

    @dataclasses.dataclass
    class Partition:
        expected_pao2_mmhg: float = 95.0
        total_mmhg: float = 37.0
        inspired_mmhg: float = 0.0
        paco2_mmhg: float = 30.0
        aa_gradient_mmhg: float = 5.0
        rest_mmhg: float = 2.0

    @dataclasses.dataclass
    class IndexWithDeficit:
        gas: Any
        facts: Any
        derived: Any
        fio2_source: Any
        barometric_source: Any
        deficit: Partition

    i = a.index
    a.index = IndexWithDeficit(  # type: ignore[assignment]
        i.gas, i.facts, i.derived, i.fio2_source, i.barometric_source, Partition()
    )
    filled = row(a)
    assert [filled[column] for column, _ in DEFICIT] == [95.0, 37.0, 0.0, 30.0, 5.0, 2.0]


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
