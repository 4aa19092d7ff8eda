"""The Spark engine: Spark does the shuffle; Python workers run the same map and grouped map.

The plan, for an export of F files:

1. ``spark.range(F)`` in F partitions, ``mapInArrow``: each task reads one file with
   ``records.read_file`` (a local path, a shared mount, or a URI ``pyarrow.fs`` reads) and
   emits Arrow batches of records and error rows. Kept (memory, then disk) for the steps below.
2. The Locations (few) are collected to the driver and broadcast.
3. The records are shuffled by patient (``repartition(P, "key")``), sorted within each
   partition by patient, file and line, and ``mapInArrow`` runs the grouped map: consecutive
   rows of one patient form a group, assessed by ``patient.Assessor`` exactly as the local
   engine does. A Python worker holds one Arrow batch and one patient at a time.
4. Result rows and error rows are written by Spark as Parquet (``results/``, ``errors/``); each
   task's summary counts come back as small tally rows and are added up on the driver.

Spark's own JVM sorts and spills the shuffle; nothing here holds the export whole. The master
is ``local[N]`` for one machine and tests, or whatever ``spark-submit`` says on a cluster.
"""

from __future__ import annotations

import dataclasses
import functools
import os
import sys
from collections import Counter
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import orjson

from .errors import ERROR_COLUMNS, ErrorRow
from .export import Export, ExportFile
from .local import LocalStats, partition_count
from .patient import Assessor, JobContext
from .records import Record, read_file
from .rows import RESULT_COLUMNS
from .schema import Column, Kind, arrow_schema, spark_ddl, union
from .settings import location_limit
from .summary import COUNT_COLUMNS, Tally

RECORD_COLUMNS: tuple[Column, ...] = (
    Column("kind", Kind.STRING),
    Column("key", Kind.STRING),
    Column("file", Kind.STRING),
    Column("line", Kind.LONG),
    Column("body", Kind.BINARY),
)
MAPPED_COLUMNS = union(RECORD_COLUMNS, ERROR_COLUMNS)
OUT_COLUMNS = union((Column("stream", Kind.STRING),), RESULT_COLUMNS, ERROR_COLUMNS, COUNT_COLUMNS)
BATCH_ROWS = 4096


def session(master: str | None, workers: int) -> tuple[Any, bool]:
    """The active Spark session, or a new one; and whether it was made here (to stop it).

    Without a master and outside ``spark-submit``: ``local[workers]``. For a local master the
    Python workers are this interpreter (they must import this package), and the web UI is off.
    """
    from pyspark.sql import SparkSession

    active = SparkSession.getActiveSession()
    if active is not None:
        return active, False
    submitted = "PYSPARK_GATEWAY_PORT" in os.environ  # launched by spark-submit
    if master is None and not submitted:
        master = f"local[{workers}]"
    builder = SparkSession.builder.appName("oxyrule-bulk")
    if master is not None:
        builder = builder.master(master)
    if master is not None and master.startswith("local"):
        os.environ.setdefault("PYSPARK_PYTHON", sys.executable)
        os.environ.setdefault("PYSPARK_DRIVER_PYTHON", sys.executable)
        builder = builder.config("spark.ui.enabled", "false")  # no port opened on one machine
    builder = (
        builder.config("spark.sql.session.timeZone", "UTC")
        .config("spark.sql.parquet.outputTimestampType", "TIMESTAMP_MICROS")
        .config("spark.ui.showConsoleProgress", str(sys.stderr.isatty()).lower())
    )
    spark = builder.getOrCreate()
    context = spark.sparkContext
    if str(context.master or "").startswith("local"):
        # One machine: a few shuffle partitions (the small tallies) rather than 200 tiny ones.
        spark.conf.set("spark.sql.shuffle.partitions", str(2 * context.defaultParallelism))
    return spark, True


def run_spark(
    export: Export,
    out: str,
    context: JobContext,
    *,
    master: str | None,
    workers: int,
) -> tuple[LocalStats, dict[str, dict[str, object]]]:
    """Run the job on Spark; the counts and the Locations read."""
    from pyspark import StorageLevel
    from pyspark.sql import functions as f

    spark, made_here = session(master, workers)
    try:
        _ship_rules(spark, context)
        files = export.files
        mapped = (
            spark.range(0, len(files), 1, len(files))
            .mapInArrow(
                functools.partial(_map_batches, files=files, context=context),
                spark_ddl(MAPPED_COLUMNS),
            )
            .persist(StorageLevel.MEMORY_AND_DISK)
        )
        usable = mapped.where(f.col("code").isNull())
        locations = _locations(
            usable.where(f.col("kind") == "Location").select("file", "line", "body").collect(),
            context.bulk.max_locations,
        )
        shared = spark.sparkContext.broadcast(locations)
        parallelism = spark.sparkContext.defaultParallelism
        partitions = partition_count(export, context.bulk.partition_mib, parallelism)
        assessed = (
            usable.where(f.col("key").isNotNull())
            .select(*(c.name for c in RECORD_COLUMNS))
            .repartition(partitions, "key")
            .sortWithinPartitions("key", "file", "line")
            .mapInArrow(
                functools.partial(_assess_batches, context=context, locations=shared),
                spark_ddl(OUT_COLUMNS),
            )
            .persist(StorageLevel.MEMORY_AND_DISK)
        )
        results = assessed.where(f.col("stream") == "result")
        results.select(*(c.name for c in RESULT_COLUMNS)).write.mode("errorifexists").parquet(
            f"{out}/results"
        )
        errors = (
            assessed.where(f.col("stream") == "error")
            .select(*(c.name for c in ERROR_COLUMNS))
            .unionByName(
                mapped.where(f.col("code").isNotNull()).select(*(c.name for c in ERROR_COLUMNS))
            )
        )
        errors.write.mode("append").parquet(f"{out}/errors")
        stats = LocalStats(partitions=partitions)
        tallies = assessed.where(f.col("stream") == "tally").select(
            *(c.name for c in COUNT_COLUMNS)
        )
        stats.tally.merge_rows(row.asDict() for row in tallies.collect())
        stats.errors = Counter(
            {row["code"]: row["count"] for row in errors.groupBy("code").count().collect()}
        )
        assessed.unpersist()
        mapped.unpersist()
        shared.unpersist()
    finally:
        if made_here:
            spark.stop()
    return stats, locations


def _ship_rules(spark: Any, context: JobContext) -> None:
    """Send the driver's rule directory (and site file) to every executor with the job.

    The executors then assess with exactly the rule set the driver checked (``Assessor``
    compares the content hash), whatever is installed on the nodes.
    """
    settings = context.settings
    spark.sparkContext.addFile(str(settings.rules_dir.resolve()), recursive=True)
    if settings.site_file is not None:
        spark.sparkContext.addFile(str(settings.site_file.resolve()))


def _executor_context(context: JobContext) -> JobContext:
    """The context with the rule directory and site file the job shipped to this executor."""
    from pyspark import SparkFiles

    settings = context.settings
    update: dict[str, object] = {}
    shipped = Path(SparkFiles.get(settings.rules_dir.resolve().name))
    if shipped.is_dir():
        update["rules_dir"] = shipped
    if settings.site_file is not None:
        site = Path(SparkFiles.get(settings.site_file.name))
        if site.is_file():
            update["site_file"] = site
    if not update:
        return context
    return dataclasses.replace(context, settings=settings.model_copy(update=update))


def _locations(rows: list[Any], limit: int) -> dict[str, dict[str, object]]:
    """``Location/<id>`` → resource, the first of duplicates in file and line order."""
    found: dict[str, dict[str, object]] = {}
    for row in sorted(rows, key=lambda r: (r["file"], r["line"])):
        resource = orjson.loads(row["body"])
        found.setdefault(f"Location/{resource['id']}", resource)
        if len(found) > limit:
            raise location_limit(limit)
    return found


# --- run in Spark's Python workers ------------------------------------------------------------


def _batches(rows: Iterator[dict[str, object]], columns: tuple[Column, ...]) -> Iterator[Any]:
    """Rows as Arrow record batches of at most ``BATCH_ROWS``."""
    import pyarrow as pa

    schema = arrow_schema(columns)
    pending: list[dict[str, object]] = []
    for row in rows:
        pending.append(row)
        if len(pending) >= BATCH_ROWS:
            yield pa.RecordBatch.from_pylist(pending, schema=schema)
            pending = []
    if pending:
        yield pa.RecordBatch.from_pylist(pending, schema=schema)


def _map_batches(
    batches: Iterator[Any], *, files: tuple[ExportFile, ...], context: JobContext
) -> Iterator[Any]:
    """Step 1: the lines of the files numbered in ``batches``, as records and error rows."""

    def rows() -> Iterator[dict[str, object]]:
        for batch in batches:
            for number in batch.column(0).to_pylist():
                for item in read_file(
                    files[number],
                    max_line_bytes=context.bulk.max_line_bytes,
                    pseudonym=context.pseudonym,
                ):
                    if isinstance(item, ErrorRow):
                        yield item.row()
                    else:
                        yield {
                            "kind": item.kind,
                            "key": item.key,
                            "file": item.file,
                            "line": item.line,
                            "body": item.body,
                        }

    yield from _batches(rows(), MAPPED_COLUMNS)


def _assess_batches(
    batches: Iterator[Any], *, context: JobContext, locations: Any
) -> Iterator[Any]:
    """Step 3: consecutive rows of one patient (the partition is sorted) assessed as a group."""
    assessor = Assessor(_executor_context(context), locations.value)
    tally = Tally()

    def groups() -> Iterator[tuple[str, list[Record]]]:
        key: str | None = None
        group: list[Record] = []
        for batch in batches:
            for row in batch.to_pylist():
                if row["key"] != key:
                    if key is not None:
                        yield key, group
                    key, group = row["key"], []
                group.append(Record(row["kind"], row["key"], row["file"], row["line"], row["body"]))
        if key is not None:
            yield key, group

    def rows() -> Iterator[dict[str, object]]:
        for key, group in groups():
            outcome = assessor.patient(key, group)
            tally.add_patient()
            for result in outcome.results:
                tally.add_result(result)
                yield {"stream": "result", **result}
            for error in outcome.errors:
                yield {"stream": "error", **error.row()}
        for count in tally.rows():
            yield {"stream": "tally", **count}

    yield from _batches(rows(), OUT_COLUMNS)
