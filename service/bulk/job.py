"""One bulk job from start to end: check, run an engine, count, summarise, say what happened.

``run_job`` is what ``oxyrule bulk`` calls. It refuses to start when pseudonymising is asked
without a key, the export cannot be read or the output folder holds an earlier run; then it
runs the chosen engine, writes ``summary/`` and returns a ``JobReport`` whose ``line()`` is
the one-line summary the command always prints (gases assessed, errors by code, time).
A progress line is drawn on stderr only when stderr is a terminal.
"""

from __future__ import annotations

import sys
import time
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import IO, Literal

from service import __version__
from service.config import Settings

from .errors import ERROR_COLUMNS, ErrorRow
from .export import join, open_export
from .output import ParquetSink, prepare, write_summary
from .patient import JobContext, runtime_for
from .pseudonym import Pseudonymiser
from .report import summary_page
from .rows import RESULT_COLUMNS
from .settings import BulkSettings
from .summary import Tally

Engine = Literal["local", "spark"]


@dataclass(frozen=True, slots=True)
class JobOptions:
    """What the command line asked for."""

    export_dir: str
    out_dir: str
    engine: Engine = "local"
    workers: int = 1
    master: str | None = None  # Spark master URL; None: spark-submit's, else local[workers]
    pseudonymise: bool = False
    spill_dir: str | None = None


@dataclass(slots=True)
class JobReport:
    """What the job did."""

    engine: str
    workers: int
    seconds: float
    tally: Tally
    errors: Counter[str] = field(default_factory=Counter)
    largest_partition_records: int | None = None

    @property
    def gases(self) -> int:
        return self.tally.gases

    def line(self) -> str:
        """The one-line summary: gases, patients, errors by code, time."""
        rate = self.gases / self.seconds if self.seconds > 0 else 0.0
        total = sum(self.errors.values())
        if total:
            detail = ", ".join(f"{code} {n:,}" for code, n in sorted(self.errors.items()))
            problems = f"{total:,} errors ({detail})"
        else:
            problems = "0 errors"
        return (
            f"oxyrule bulk: {self.gases:,} gases assessed for {self.tally.patients:,} patients; "
            f"{problems}; {self.seconds:.1f} s ({rate:,.0f} gases/s, {self.engine} engine)"
        )


class Progress:
    """A progress line on a terminal (stderr); silent otherwise."""

    def __init__(self, stream: IO[str] | None = None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = self.stream.isatty()
        self.last = 0.0
        self.drawn = False

    def __call__(self, stage: str, done: int, total: int) -> None:
        now = time.monotonic()
        if not self.enabled or (now - self.last < 0.2 and done < total):
            return
        self.last = now
        share = done / total if total else 1.0
        bar = "#" * int(share * 30)
        self.stream.write(f"\roxyrule bulk: {stage:<9} [{bar:<30}] {share:6.1%}")
        self.stream.flush()
        self.drawn = True

    def close(self) -> None:
        if self.drawn:
            self.stream.write("\n")
            self.stream.flush()


def run_job(
    options: JobOptions,
    settings: Settings,
    bulk: BulkSettings,
    *,
    progress: Progress | None = None,
) -> JobReport:
    """Run one bulk job.

    Raises:
        ImportError: the extra the engine needs is not installed.
        PseudonymKeyError: --pseudonymise without a usable key.
        ExportError: the export folder cannot be read.
        OutputExistsError: the output folder holds an earlier run.
    """
    started = time.monotonic()
    import pyarrow  # noqa: F401  (the extra must be installed before anything is written)

    if options.engine == "spark":
        import pyspark  # noqa: F401
    key = bulk.pseudonym_key.get_secret_value() if bulk.pseudonym_key else None
    pseudonym = Pseudonymiser.from_setting(key, required=options.pseudonymise)
    export = open_export(options.export_dir)
    runtime = runtime_for(settings)  # checks the rule set before any work
    out = prepare(options.out_dir)
    context = JobContext(settings, bulk, pseudonym, datetime.now(UTC), runtime.ruleset.content_hash)
    progress = progress or Progress()
    # errors/ always exists (its folder problems, if any); results/ too, if no gas was found.
    export_errors = ParquetSink(join(out, "errors/export.parquet"), ERROR_COLUMNS, always=True)
    for row in export.problems:
        export_errors.add(row.row())
    export_errors.close()
    try:
        if options.engine == "spark":
            from .spark import run_spark

            stats, locations = run_spark(
                export, out, context, master=options.master, workers=options.workers
            )
            largest = None
        else:
            from .local import run_local

            stats, locations = run_local(
                export,
                out,
                context,
                workers=options.workers,
                spill_dir=options.spill_dir,
                on_progress=progress,
            )
            largest = stats.largest_partition_records
    finally:
        progress.close()
    if stats.tally.gases == 0 and options.engine == "local":
        ParquetSink(join(out, "results/part-empty.parquet"), RESULT_COLUMNS, always=True).close()
    errors: Counter[str] = Counter(stats.errors)
    errors.update(_codes(export.problems))
    report = JobReport(
        engine=options.engine,
        workers=options.workers,
        seconds=time.monotonic() - started,
        tally=stats.tally,
        errors=errors,
        largest_partition_records=largest,
    )
    names = {ref: str(r["name"]) for ref, r in locations.items() if isinstance(r.get("name"), str)}
    run = {
        "oxyrule": __version__,
        "engine": options.engine,
        "workers": options.workers,
        "started": context.now.isoformat(),
        "seconds": round(report.seconds, 3),
        "gases": report.gases,
        "patients": report.tally.patients,
        "errors": dict(sorted(errors.items())),
        "ruleset": runtime.ruleset.identity,
        "ruleset_hash": runtime.ruleset.content_hash,
        "settings_hash": runtime.settings_hash,
        "bulk_settings": bulk.public(),
        "pseudonymised": pseudonym.enabled,
        "files": len(export.files),
        "input_bytes": export.total_bytes,
    }
    write_summary(out, report.tally, names, run, summary_page(report.tally, names, run))
    return report


def _codes(rows: tuple[ErrorRow, ...]) -> Counter[str]:
    return Counter(row.code.value for row in rows)
