"""The Spark engine in local mode writes the same rows as the local engine.

One Spark session for the module (starting the JVM is most of the cost). Skipped, with the
reason, only when no Java runtime is installed; ``.ci/run`` installs one when it is missing.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from service.bulk.job import JobReport
from tests.bulk.conftest import read_table, run
from tests.bulk.fixture_export import export_fixtures
from tests.bulk.history import classify, gas_times

ROOT = Path(__file__).resolve().parents[2]
# Short jobs: the JVM's quick compiler only and a serial collector start it seconds sooner on a
# small shared machine (the peak speed of long jobs does not matter here).
QUICK_JVM = "-XX:TieredStopAtLevel=1 -XX:+UseSerialGC"


def _java() -> str | None:
    home = os.environ.get("JAVA_HOME")
    if home and Path(home, "bin", "java").is_file():
        return str(Path(home, "bin", "java"))
    return shutil.which("java")


pytestmark = pytest.mark.skipif(
    _java() is None, reason="no Java runtime (apt-get install openjdk-17-jre-headless)"
)


@pytest.fixture(scope="module")
def spark() -> Iterator[Any]:
    os.environ["PYSPARK_PYTHON"] = sys.executable
    os.environ["PYSPARK_DRIVER_PYTHON"] = sys.executable
    from pyspark.sql import SparkSession

    session = (
        SparkSession.builder.master("local[2]")
        .appName("oxyrule-bulk-tests")
        .config("spark.ui.enabled", "false")
        .config("spark.driver.extraJavaOptions", QUICK_JVM)
        .config("spark.ui.showConsoleProgress", "false")
        .config("spark.sql.shuffle.partitions", "4")
        .config("spark.sql.session.timeZone", "UTC")
        .config("spark.sql.parquet.outputTimestampType", "TIMESTAMP_MICROS")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()


@pytest.fixture(scope="module")
def together(synthetic_export: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Every fixture and the synthetic export in one folder: one Spark job covers both."""
    folder = tmp_path_factory.mktemp("together") / "export"
    shutil.copytree(synthetic_export, folder)
    export_fixtures(folder, names="fixtures.")
    return folder


@pytest.fixture(scope="module")
def runs(
    spark: Any,
    together: Path,
    local_run: Callable[[Path, int], tuple[Path, JobReport]],
    tmp_path_factory: pytest.TempPathFactory,
) -> tuple[tuple[Path, JobReport], tuple[Path, JobReport]]:
    """(Spark, local) runs of the same export."""
    out = tmp_path_factory.mktemp("spark-out") / "out"
    return (out, run(together, out, engine="spark", workers=2)), local_run(together, 1)


def test_spark_and_local_write_the_same_rows(
    runs: tuple[tuple[Path, JobReport], tuple[Path, JobReport]],
) -> None:
    (spark_out, spark_report), (local_out, local_report) = runs
    spark_results = read_table(spark_out / "results")
    assert len(spark_results) > 200
    assert spark_results == read_table(local_out / "results")
    assert read_table(spark_out / "errors") == read_table(local_out / "errors")
    assert spark_report.tally.counts == local_report.tally.counts
    assert spark_report.errors == local_report.errors
    for table in ("gases", "patterns", "grades", "findings"):
        name = f"{table}.parquet"
        assert read_table(spark_out / "summary" / name) == read_table(local_out / "summary" / name)


def test_spark_counts_the_bad_lines(
    runs: tuple[tuple[Path, JobReport], tuple[Path, JobReport]],
) -> None:
    (_, report), _ = runs
    for code in ("not-json", "unknown-resource-type", "no-patient", "unreadable-resource"):
        assert report.errors[code] >= 1, code
    assert f"{sum(report.errors.values()):,} errors" in report.line()


def test_spark_submit_runs_the_job_with_the_rules_shipped_to_the_executors(
    local_run: Callable[[Path, int], tuple[Path, JobReport]], tmp_path: Path
) -> None:
    """The README's cluster command, on a local master: the launcher under spark-submit."""
    import pyspark

    export = tmp_path / "export"
    demo = sorted((ROOT / "fixtures" / "demo").glob("*.bundle.json"))
    export_fixtures(export, demo)
    # Each demo patient's gases, counted by the literal history builder (not by the job).
    gases = sum(
        len(gas_times(classify([e["resource"] for e in json.loads(p.read_text())["entry"]])))
        for p in demo
    )
    submit = Path(pyspark.__file__).parent / "bin" / "spark-submit"
    out = tmp_path / "out"
    env = {
        **os.environ,
        "PYSPARK_PYTHON": sys.executable,
        "PYSPARK_DRIVER_PYTHON": sys.executable,
    }
    done = subprocess.run(
        [
            str(submit),
            "--master",
            "local[1]",
            "--conf",
            "spark.ui.enabled=false",
            "--conf",
            "spark.ui.showConsoleProgress=false",
            "--driver-java-options",
            QUICK_JVM,
            str(ROOT / "deploy" / "spark" / "oxyrule_bulk.py"),
            str(export),
            str(out),
            "--rules",
            str(ROOT / "rules"),
        ],
        capture_output=True,
        env=env,
        timeout=300,
        check=False,
    )
    assert done.returncode == 0, done.stderr.decode()[-3000:]
    assert f"{gases} gases assessed for {len(demo)} patients".encode() in done.stdout
    local_out, _ = local_run(export, 1)
    assert read_table(out / "results") == read_table(local_out / "results")
