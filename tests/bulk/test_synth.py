"""``oxyrule bulk synth``: invented exports, reproducible from a seed, spread over mechanisms,
places and months, with bad lines."""

from __future__ import annotations

import hashlib
import json
from collections import Counter
from collections.abc import Callable
from pathlib import Path

import pytest

from service.bulk.job import JobReport
from service.bulk.rows import GRADE_COLUMNS
from service.bulk.synth import write_export
from service.cli import main
from tests.bulk.conftest import read_table


def digests(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def test_the_same_seed_writes_the_same_bytes(tmp_path: Path) -> None:
    write_export(tmp_path / "a", patients=15, seed=3)
    write_export(tmp_path / "b", patients=15, seed=3)
    write_export(tmp_path / "c", patients=15, seed=4)
    assert digests(tmp_path / "a") == digests(tmp_path / "b")
    assert digests(tmp_path / "a") != digests(tmp_path / "c")


def test_the_command_says_what_it_wrote_and_refuses_a_used_folder(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["bulk", "synth", "12", str(tmp_path / "x"), "--seed", "2"]) == 0
    line = capsys.readouterr().out
    assert line.startswith("oxyrule bulk synth: 12 invented patients")
    manifest = json.loads((tmp_path / "x" / "manifest.json").read_text())
    listed = {o["url"] for o in manifest["output"]}
    assert {p.name for p in (tmp_path / "x").glob("*.ndjson*")} <= listed
    assert main(["bulk", "synth", "12", str(tmp_path / "x")]) == 1  # not empty: refused


def test_every_record_is_invented_and_tagged_as_test_data(synthetic_export: Path) -> None:
    for path in synthetic_export.glob("Patient.ndjson"):
        for line in path.read_text().splitlines():
            patient = json.loads(line)
            assert patient["meta"]["tag"][0]["code"] == "HTEST"
            assert "name" not in patient and "identifier" not in patient


def test_the_gases_cover_the_mechanisms_places_and_months(
    synthetic_export: Path, local_run: Callable[[Path, int], tuple[Path, JobReport]]
) -> None:
    """What rule set 2.0 makes of the scenarios (``service/bulk/synth.py``): every pattern,
    every mechanism likely somewhere, V/Q likely from the response to oxygen, a partition for
    each residence where the residence was not sent."""
    out, _ = local_run(synthetic_export, 1)
    results = read_table(out / "results")
    patterns = Counter(r["pattern"] for r in results)
    assert set(patterns) == {
        "no-hypoxaemia",
        "single",
        "mixed",
        "indeterminate",
        "not-classifiable",
    }
    likely = {m for m, c in GRADE_COLUMNS.items() for r in results if r[c] == "likely"}
    assert likely == set(GRADE_COLUMNS)
    by_response = [
        r
        for r in results
        if r["grade_vq_mismatch"] == "likely" and r["response_admixture_fall_least_percent"]
    ]
    assert by_response and all(r["response_fio2_step_fraction"] > 0 for r in by_response)
    assert {r["gas_exchange"] for r in results} == {"defect", "normal", "unknown"}
    assert any(r["deficit_partitions"] == 2 for r in results)
    assert any(r["inputs_uncertain"] for r in results)
    assert len({r["location"] for r in results}) >= 4
    assert len({r["time"].strftime("%Y-%m") for r in results}) >= 4
    assert any(r["earlier_gases"] >= 1 for r in results)
