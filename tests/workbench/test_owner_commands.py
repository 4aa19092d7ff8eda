"""The command line as a new rule owner meets it: a mistake in an expected-outcome file, a
command run outside the repository, a fixture folder that is not there, a bulk run that has
bad lines. Each answer is a located sentence and an honest count, never a traceback or a
silent pass."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from service.workbench.lint import lint

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo"


def oxyrule(
    *args: str, cwd: Path = ROOT, stdin: bytes | None = None
) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "service.cli", *args],
        cwd=cwd,
        input=stdin.decode() if stdin is not None else None,
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )


def _demo_case(folder: Path, expected: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    shutil.copy(DEMO / "post-operative-drowsiness.bundle.json", folder / "case.bundle.json")
    (folder / "case.expected.yaml").write_text(expected)
    return folder


def test_a_misspelt_key_in_an_expected_outcome_is_one_located_line(tmp_path: Path) -> None:
    folder = _demo_case(
        tmp_path / "cases",
        "description: Invented copy of a demo case.\n"
        "expect:\n  mechanism: {hypoventilation: likely}\n",
    )
    done = oxyrule("test", str(folder))
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    (line,) = done.stderr.strip().splitlines()
    assert "case.expected.yaml" in line
    assert "expect.mechanism: unknown key (did you mean mechanisms?)" in line


def test_a_fixture_path_that_is_not_there_is_named(tmp_path: Path) -> None:
    done = oxyrule("test", str(tmp_path / "no-such-folder"))
    assert done.returncode == 2
    assert "no-such-folder: no such file or folder" in done.stderr
    assert "Traceback" not in done.stderr


def test_test_outside_the_repository_runs_the_fixtures_beside_the_rule_set(
    tmp_path: Path,
) -> None:
    # From an unrelated folder, with the shipped rule set: its fixtures are the ones beside it.
    done = oxyrule("test", cwd=tmp_path)
    assert "Traceback" not in done.stderr
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr
    assert done.stdout.startswith("rule set oxyrule-default|")
    assert done.stdout.strip().splitlines()[-1].endswith(" passed, 0 failed")


def test_test_with_no_fixtures_anywhere_says_where_it_looked(tmp_path: Path) -> None:
    rules = tmp_path / "site" / "rules"
    shutil.copytree(ROOT / "rules", rules)
    done = oxyrule("test", "--rules", str(rules), cwd=tmp_path)
    assert done.returncode == 2
    assert "no fixtures folder here" in done.stderr and str(rules) in done.stderr
    assert "Traceback" not in done.stderr


def test_lint_fails_when_the_named_fixture_folder_is_missing(tmp_path: Path) -> None:
    messages = [str(m) for m in lint(ROOT / "rules", fixtures=[tmp_path / "fixturez"])]
    assert any(
        "fixturez" in m and "does not exist" in m and "coverage was not checked" in m
        for m in messages
    ), messages
    assert all(m.startswith("error") for m in messages if "fixturez" in m)


def test_lint_without_any_fixture_folder_is_not_green(tmp_path: Path) -> None:
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    done = oxyrule("lint", str(rules), cwd=tmp_path)
    assert done.returncode == 1
    assert "no fixture folder found" in done.stdout
    assert "1 error, 0 warnings" in done.stdout  # counted in words, singular when one
    skipped = oxyrule("lint", str(rules), "--no-coverage", cwd=tmp_path)
    assert skipped.returncode == 0, skipped.stdout
    assert "fixture coverage not checked (--no-coverage)" in skipped.stdout


def test_lint_says_what_coverage_it_checked() -> None:
    done = oxyrule("lint")
    assert done.returncode == 0, done.stdout
    last = done.stdout.strip().splitlines()[-1]
    assert "0 errors, 0 warnings; fixture coverage checked against" in last
    assert " cases in " in last


def test_a_bulk_run_always_ends_with_a_summary_naming_rejected_lines(tmp_path: Path) -> None:
    good = (DEMO / "altitude-visitor.bundle.json").read_bytes().replace(b"\n", b"")
    other = (DEMO / "post-operative-drowsiness.bundle.json").read_bytes().replace(b"\n", b"")
    lines = [good, b"not json", other, b"", b'{"resourceType": "Patient"}']
    path = tmp_path / "batch.ndjson"
    path.write_bytes(b"\n".join(lines) + b"\n")
    done = oxyrule("assess", str(path))  # stderr is a pipe here, not a terminal
    assert done.returncode == 2
    assert len(done.stdout.splitlines()) == 4  # one answer per non-blank line
    (summary,) = done.stderr.strip().splitlines()
    assert summary.startswith("oxyrule: 2 assessed, 2 rejected (lines 2, 5), ")
    assert summary.endswith(" s")
    clean = tmp_path / "clean.ndjson"
    clean.write_bytes(good + b"\n")
    ok = oxyrule("assess", str(clean))
    assert ok.returncode == 0
    assert ok.stderr.startswith("oxyrule: 1 assessed, 0 rejected, ")


def test_a_rejected_single_input_says_so_on_stderr(tmp_path: Path) -> None:
    path = tmp_path / "patient.json"
    path.write_text('{"resourceType": "Patient"}')
    done = oxyrule("assess", str(path))
    assert done.returncode == 2
    assert '"OperationOutcome"' in done.stdout
    assert "rejected" in done.stderr


@pytest.mark.parametrize("units", ["kPa"])
def test_explain_accepts_an_hl7_v2_message_and_a_unit(units: str) -> None:
    done = oxyrule(
        "explain",
        "--units",
        units,
        str(ROOT / "fixtures" / "hl7v2" / "post-operative-drowsiness.hl7"),
    )
    assert done.returncode == 0, done.stdout + done.stderr
    assert done.stdout.startswith("Verdict: ")
    assert "PaCO2 8.67 kPa" in done.stdout and "mmHg" not in done.stdout.split("Deciding")[0]
