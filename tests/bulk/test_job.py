"""``oxyrule bulk`` as a command: outputs, the one-line summary, refusals, pseudonyms."""

from __future__ import annotations

import hashlib
import hmac
import io
import os
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from service.bulk.job import JobReport, Progress
from service.bulk.pseudonym import Pseudonymiser, PseudonymKeyError
from service.bulk.settings import BulkSettings
from tests.bulk.conftest import read_table, run

KEY = "an-invented-key-for-tests-0123456789-abcdef"


def bulk_cli(*args: str, env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "service.cli", "bulk", *args],
        capture_output=True,
        text=True,
        env={**os.environ, **(env or {})},
        check=False,
    )


def test_the_command_writes_the_outputs_and_one_summary_line(
    synthetic_export: Path, tmp_path: Path
) -> None:
    done = bulk_cli(str(synthetic_export), str(tmp_path / "out"))
    assert done.returncode == 0, done.stderr
    (line,) = done.stdout.splitlines()
    assert line.startswith("oxyrule bulk: ") and "gases assessed for 40 patients" in line
    for code in ("not-json", "unknown-resource-type", "no-patient", "unreadable-resource"):
        assert f"{code} " in line, code
    assert line.endswith("gases/s, local engine)")
    assert "\r" not in done.stderr  # no progress line off a terminal
    for folder in ("results", "errors", "summary"):
        assert (tmp_path / "out" / folder).is_dir()


def test_bad_lines_land_in_errors_with_file_and_line(
    synthetic_export: Path, local_run: Callable[[Path, int], tuple[Path, JobReport]]
) -> None:
    out, report = local_run(synthetic_export, 1)
    errors = read_table(out / "errors")
    assert len(errors) == sum(report.errors.values())
    lines = {(e["code"], e["file"]) for e in errors if e["line"] is not None}
    observation_files = {p.name for p in synthetic_export.glob("Observation.*")}
    for code in ("not-json", "unknown-resource-type", "no-patient", "unreadable-resource"):
        assert any(c == code and f in observation_files for c, f in lines), code
    unreadable = [e for e in errors if e["code"] == "unreadable-resource"]
    assert {e["expression"] for e in unreadable} == {"Observation.valueQuantity.code"}
    missing = [e for e in errors if e["code"] == "manifest-file-missing"]
    assert [e["file"] for e in missing] == ["Observation.999.ndjson"]


def test_a_progress_line_is_drawn_only_on_a_terminal(
    synthetic_export: Path, tmp_path: Path
) -> None:
    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    screen = Terminal()
    from service.bulk.job import JobOptions, run_job
    from service.config import Settings

    options = JobOptions(str(synthetic_export), str(tmp_path / "out"))
    run_job(options, Settings(), BulkSettings(), progress=Progress(screen))
    drawn = screen.getvalue()
    assert "\roxyrule bulk: reading" in drawn and "\roxyrule bulk: assessing" in drawn
    assert drawn.endswith("100.0%\n")


@pytest.mark.parametrize(
    "reason", ["missing export", "used output", "no key", "short key", "retired setting"]
)
def test_the_command_refuses_to_start_and_writes_nothing(
    reason: str, synthetic_export: Path, tmp_path: Path
) -> None:
    export, out, env, args = str(synthetic_export), tmp_path / "out", {}, []
    if reason == "missing export":
        export = str(tmp_path / "nowhere")
    elif reason == "used output":
        (out / "results").mkdir(parents=True)
    elif reason == "retired setting":
        env = {"OXYRULE_BULK_LOOKBACK_HOURS": "12"}
    else:
        args = ["--pseudonymise"]
        env = {"OXYRULE_BULK_PSEUDONYM_KEY": "short" if reason == "short key" else ""}
    done = bulk_cli(export, str(out), *args, env=env)
    assert done.returncode == 2, done.stderr
    assert done.stdout == "" and done.stderr.startswith("oxyrule bulk: ")
    if reason == "retired setting":
        assert "OXYRULE_OXYGEN_RESPONSE_WINDOW_HOURS" in done.stderr
    written = sorted(p.name for p in out.rglob("*")) if out.exists() else []
    assert written == (["results"] if reason == "used output" else [])


def test_pseudonyms_are_hmac_sha256_of_the_reference() -> None:
    """RFC 4231, test case 2: HMAC-SHA-256 with key "Jefe"."""
    digest = Pseudonymiser(b"Jefe")("Patient/what do ya want for nothing?")
    expected = hmac.new(b"Jefe", b"Patient/what do ya want for nothing?", hashlib.sha256)
    assert digest == f"Patient/{expected.hexdigest()}"
    rfc = hmac.new(b"Jefe", b"what do ya want for nothing?", hashlib.sha256).hexdigest()
    assert rfc == "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
    with pytest.raises(PseudonymKeyError):
        Pseudonymiser.from_setting(None, required=True)


def _all_bytes(folder: Path) -> bytes:
    return b"".join(p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file())


def test_pseudonymised_outputs_hold_no_reference_and_never_the_key(
    synthetic_export: Path, tmp_path: Path
) -> None:
    out = tmp_path / "out"
    bulk = BulkSettings(pseudonym_key=KEY)
    report = run(synthetic_export, out, bulk=bulk, pseudonymise=True)
    assert report.gases > 0
    results = read_table(out / "results")
    expected = hmac.new(KEY.encode(), b"Patient/syn-000001", hashlib.sha256).hexdigest()
    assert f"Patient/{expected}" in {r["patient"] for r in results}
    everything = _all_bytes(out)
    assert b"syn-0000" not in everything  # no patient or resource id of the export
    assert KEY.encode() not in everything
    errors: list[dict[str, Any]] = read_table(out / "errors")
    assert all(e["patient"] is None or len(e["patient"]) == 8 + 64 for e in errors)


def test_without_the_extra_the_command_says_what_to_install(
    synthetic_export: Path,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
) -> None:
    from service.cli import main

    monkeypatch.setitem(sys.modules, "pyarrow", None)
    assert main(["bulk", str(synthetic_export), str(tmp_path / "out")]) == 1
    assert "pip install 'oxyrule[bulk]'" in capsys.readouterr().err
    monkeypatch.setitem(sys.modules, "pyspark", None)
    monkeypatch.delitem(sys.modules, "pyarrow")
    assert main(["bulk", "--engine", "spark", str(synthetic_export), str(tmp_path / "o2")]) == 1
    assert "pip install 'oxyrule[spark]'" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []  # refused before anything was written
