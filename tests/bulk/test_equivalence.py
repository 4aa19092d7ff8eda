"""The same patient data give the same verdict through ``oxyrule bulk`` as through
``oxyrule assess`` on a Bundle of that patient's resources: every fixture, re-exported as
Bulk Data files.

The single-bundle side is the real command line (``oxyrule assess`` on NDJSON of Bundles, one
subprocess): its result Bundles' ``Parameters`` give the pattern, the five grades, the finding
codes, the rule set, its hash and the settings hash. The bulk side is the ``results/`` rows.
The latest gas of each fixture is compared with the fixture's Bundle as it is; an earlier gas
with the history at that gas (``tests/bulk/history.py``: the fixture with its later PO2 left
out, as ``service/bulk/episodes.py`` promises). Long histories: ``test_history.py``.
"""

from __future__ import annotations

import json
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from service.bulk.job import JobReport
from service.bulk.rows import GRADE_COLUMNS, RESULT_COLUMNS
from service.config import Settings
from tests.bulk.conftest import read_table
from tests.bulk.fixture_export import Exported, fixture_bundles
from tests.bulk.history import classify, history_at


def assess_cli(bundles: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """``oxyrule assess`` on NDJSON of the Bundles: each one's verdict, in order."""
    ndjson = "".join(json.dumps(b) + "\n" for b in bundles).encode()
    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "assess", "--ndjson", "-"],
        input=ndjson,
        capture_output=True,
        check=False,
    )
    assert done.returncode == 0, done.stderr.decode()
    return [_verdict(json.loads(line)) for line in done.stdout.splitlines()]


def _verdict(result: dict[str, Any]) -> dict[str, Any]:
    params = next(
        e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "Parameters"
    )
    out: dict[str, Any] = {"grades": {}, "findings": set()}
    for p in params["parameter"]:
        parts = {q["name"]: q for q in p.get("part", [])}
        if p["name"] == "mechanism":
            out["grades"][parts["code"]["valueCode"]] = parts["grade"]["valueCode"]
        elif p["name"] == "finding":
            out["findings"].add(parts["code"]["valueCode"])
        elif p["name"] in ("pattern",):
            out["pattern"] = p["valueCode"]
        elif p["name"] in ("ruleset", "ruleset-hash", "settings-hash"):
            out[p["name"]] = p["valueString"]
    return out


def _row_verdict(row: dict[str, Any]) -> dict[str, Any]:
    return {
        "pattern": row["pattern"],
        "grades": {m: row[c] for m, c in GRADE_COLUMNS.items()},
        "findings": set(row["findings"]),
        "ruleset": row["ruleset"],
        "ruleset-hash": row["ruleset_hash"],
        "settings-hash": row["settings_hash"],
    }


@pytest.fixture(scope="module")
def bulk_rows(
    fixture_export: tuple[Path, Exported],
    local_run: Callable[[Path, int], tuple[Path, JobReport]],
) -> dict[str, list[dict[str, Any]]]:
    """The local engine's rows of each patient, earliest gas first."""
    folder, _ = fixture_export
    out, _ = local_run(folder, 1)
    by_patient: dict[str, list[dict[str, Any]]] = {}
    for row in read_table(out / "results"):
        by_patient.setdefault(row["patient"], []).append(row)
    return {k: sorted(v, key=lambda r: r["time"]) for k, v in by_patient.items()}


def test_every_fixture_gets_the_verdict_of_oxyrule_assess_on_its_bundle(
    fixture_export: tuple[Path, Exported], bulk_rows: dict[str, list[dict[str, Any]]]
) -> None:
    _, exported = fixture_export
    paths = fixture_bundles()
    assert len(paths) == len(exported.patients) >= 40
    bundles = [json.loads(p.read_text(encoding="utf-8")) for p in paths]
    expected = assess_cli(bundles)
    compared = without_gas = 0
    for path, verdict in zip(paths, expected, strict=True):
        rows = bulk_rows.get(exported.patients[path], [])
        if not rows:
            # No arterial gas: nothing for bulk to assess, and the service says so too.
            assert "no-arterial-gas" in verdict["findings"], path.name
            without_gas += 1
            continue
        assert _row_verdict(rows[-1]) == verdict, path.name
        compared += 1
    # Without a gas: SpO2 alone (two of them titrations), a venous gas alone.
    assert compared >= 80 and without_gas <= 6


def test_an_earlier_gas_gets_the_verdict_of_its_own_moment(
    fixture_export: tuple[Path, Exported], bulk_rows: dict[str, list[dict[str, Any]]]
) -> None:
    _, exported = fixture_export
    cases: list[tuple[str, dict[str, Any]]] = []
    cut: list[dict[str, Any]] = []
    for path in fixture_bundles():
        rows = bulk_rows.get(exported.patients[path], [])
        bundle = json.loads(path.read_text(encoding="utf-8"))
        classified = classify([e["resource"] for e in bundle["entry"]])
        for row in rows[:-1]:
            cases.append((path.name, row))
            cut.append(history_at(classified, row["time"], Settings()))
    assert len(cases) >= 5  # the serial fixtures, the two-FiO2 demo, titrations with gases
    for (name, row), verdict in zip(cases, assess_cli(cut), strict=True):
        assert _row_verdict(row) == verdict, name


def test_a_later_gas_sees_the_earlier_ones(
    bulk_rows: dict[str, list[dict[str, Any]]],
) -> None:
    """A fixture's gases are hours apart at most: each sees every one before it."""
    serial = [rows for rows in bulk_rows.values() if len(rows) >= 2]
    assert len(serial) >= 5 and any(len(rows) >= 3 for rows in serial)
    for rows in serial:
        assert [row["earlier_gases"] for row in rows] == list(range(len(rows)))


def test_one_and_two_workers_write_the_same_rows(
    fixture_export: tuple[Path, Exported],
    synthetic_export: Path,
    local_run: Callable[[Path, int], tuple[Path, JobReport]],
) -> None:
    for export in (fixture_export[0], synthetic_export):
        one, report_one = local_run(export, 1)
        two, report_two = local_run(export, 2)
        for table in ("results", "errors"):
            assert read_table(one / table) == read_table(two / table), table
        assert report_one.tally.counts == report_two.tally.counts


def test_result_rows_have_exactly_the_declared_columns(
    fixture_export: tuple[Path, Exported],
    local_run: Callable[[Path, int], tuple[Path, JobReport]],
) -> None:
    import pyarrow.dataset as ds

    out, _ = local_run(fixture_export[0], 1)
    assert ds.dataset(str(out / "results")).schema.names == [c.name for c in RESULT_COLUMNS]
