"""Shared exports and runs for the bulk tests: built once per test session.

``fixture_export``: every fixture Bundle re-exported as Bulk Data files. ``synthetic_export``:
a small invented export (``oxyrule bulk synth``) with its bad lines. ``local_run`` runs the
local engine on either (cached per export and worker count), in process.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from service.bulk.job import Engine, JobOptions, JobReport, run_job
from service.bulk.settings import BulkSettings
from service.bulk.synth import write_export
from service.config import Settings
from tests.bulk.fixture_export import Exported, export_fixtures

SYNTHETIC_PATIENTS = 40
SYNTHETIC_SEED = 7


class Quiet:
    """A progress stream that is not a terminal."""

    def isatty(self) -> bool:
        return False

    def write(self, text: str) -> int:
        raise AssertionError("no progress may be drawn off a terminal")

    def flush(self) -> None:
        pass


def run(
    export: Path,
    out: Path,
    *,
    engine: Engine = "local",
    workers: int = 1,
    bulk: BulkSettings | None = None,
    pseudonymise: bool = False,
) -> JobReport:
    """One bulk job in this process, with no progress drawn."""
    from service.bulk.job import Progress

    options = JobOptions(
        str(export), str(out), engine=engine, workers=workers, pseudonymise=pseudonymise
    )
    quiet: Any = Quiet()
    return run_job(options, Settings(), bulk or BulkSettings(), progress=Progress(quiet))


def read_table(folder: Path) -> list[dict[str, Any]]:
    """Every row of a Parquet folder, in a stable order (the engines' orders differ)."""
    import pyarrow.dataset as ds

    rows: list[dict[str, Any]] = ds.dataset(str(folder)).to_table().to_pylist()
    return sorted(rows, key=lambda r: repr(sorted(r.items(), key=lambda kv: kv[0])))


@pytest.fixture(scope="session")
def fixture_export(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Exported]:
    folder = tmp_path_factory.mktemp("fixture-export")
    return folder, export_fixtures(folder)


@pytest.fixture(scope="session")
def synthetic_export(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("synthetic") / "export"
    write_export(folder, patients=SYNTHETIC_PATIENTS, seed=SYNTHETIC_SEED)
    return folder


@pytest.fixture(scope="session")
def local_run(
    tmp_path_factory: pytest.TempPathFactory,
) -> Iterator[Callable[[Path, int], tuple[Path, JobReport]]]:
    """Run the local engine once per (export, workers); the output folder and report."""
    done: dict[tuple[Path, int], tuple[Path, JobReport]] = {}

    def get(export: Path, workers: int) -> tuple[Path, JobReport]:
        key = (export, workers)
        if key not in done:
            out = tmp_path_factory.mktemp("local-out") / "out"
            done[key] = (out, run(export, out, workers=workers))
        return done[key]

    yield get
