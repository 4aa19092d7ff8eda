"""The command line's built-in demo (README quick start, first command)."""

from __future__ import annotations

import subprocess
import sys

import pytest

from service.cli import main


def test_demo_prints_the_physiology_and_the_caution(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["demo"]) == 0
    out = capsys.readouterr().out
    assert "alveolar PO2" in out
    assert "not a diagnosis" in out


def test_console_script_runs_as_a_module() -> None:
    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "--version"],
        capture_output=True,
        text=True,
        check=True,
    )
    assert done.stdout.startswith("oxyrule ")
