"""The local engine: the shuffle and the grouped map on one machine, with ``multiprocessing``.

Two passes, each a set of independent tasks run in-process (one worker) or on a pool of
worker processes (``--workers N``):

1. **map**, one task per export file: each line becomes a record or an error row; records
   are appended to spill files on local disk, one per partition, the partition chosen by a
   stable hash of the patient (CRC-32; Python's ``hash`` differs between processes);
   Locations go to a spill file of their own; error rows to ``errors/``.
2. **grouped map**, one task per partition: the partition's records are read back, grouped
   by patient, each patient assessed (``patient.Assessor``), and the rows written to
   ``results/`` and ``errors/`` as one Parquet part file each.

Memory: a map task holds one line and a bounded write buffer per partition; a grouped-map task
holds one partition. The number of partitions grows with the input (about
``OXYRULE_BULK_PARTITION_MIB`` of NDJSON each, at least two per worker), so memory stays the
same however many patients the export holds; ``LocalStats.largest_partition_records`` reports
the most records held at once, and a test checks that it does not grow with the patients.
"""

from __future__ import annotations

import math
import multiprocessing
import os
import shutil
import tempfile
import zlib
from collections import Counter
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import orjson

from .errors import ERROR_COLUMNS, ErrorRow
from .export import Export, ExportFile, join
from .output import ParquetSink
from .patient import Assessor, JobContext
from .records import Record, read_file
from .rows import RESULT_COLUMNS
from .settings import location_limit
from .summary import Tally

GZIP_EXPANSION = 8  # NDJSON of FHIR resources shrinks about this much under gzip (estimate)
SPILL_BUFFER_BYTES = 32 * 1024 * 1024  # one map task's write buffers, all partitions together
LOCATIONS = "locations"


@dataclass(slots=True)
class LocalStats:
    """What the tasks did, added up in the parent."""

    lines_bytes: int = 0
    records: int = 0
    errors: Counter[str] = field(default_factory=Counter)
    tally: Tally = field(default_factory=Tally)
    partitions: int = 0
    largest_partition_records: int = 0

    def count_error(self, row: ErrorRow) -> None:
        self.errors[row.code.value] += 1


@dataclass(frozen=True, slots=True)
class _Plan:
    """Everything a task needs besides its own number; sent to each worker once."""

    context: JobContext
    files: tuple[ExportFile, ...]
    partitions: int
    spill: str
    out: str


def partition_count(export: Export, partition_mib: int, workers: int) -> int:
    """Partitions for an export: about ``partition_mib`` of NDJSON each, two per worker at least."""
    estimated = sum(
        f.size * (GZIP_EXPANSION if f.name.endswith(".gz") else 1) for f in export.files
    )
    return max(2 * workers, math.ceil(estimated / (partition_mib * 1024 * 1024)))


def partition_of(key: str, partitions: int) -> int:
    """The partition of a patient: stable across processes and runs."""
    return zlib.crc32(key.encode()) % partitions


def run_local(
    export: Export,
    out: str,
    context: JobContext,
    *,
    workers: int,
    spill_dir: str | None = None,
    on_progress: Callable[[str, int, int], None] | None = None,
) -> tuple[LocalStats, dict[str, dict[str, object]]]:
    """Run both passes; the stats and the Locations read (by ``Location/<id>``)."""
    partitions = partition_count(export, context.bulk.partition_mib, workers)
    spill = tempfile.mkdtemp(prefix="oxyrule-bulk-", dir=spill_dir)
    plan = _Plan(context, export.files, partitions, spill, out)
    stats = LocalStats(partitions=partitions)
    progress = on_progress or (lambda stage, done, total: None)
    pool = _pool(plan, workers)
    try:
        done_bytes = 0
        total_bytes = export.total_bytes
        for size, map_stats in _run(pool, _map_task, range(len(export.files)), plan):
            done_bytes += size
            _merge(stats, map_stats)
            progress("reading", done_bytes, total_bytes)
        tasks = _run(pool, _reduce_task, range(partitions), plan)
        for done, (_, reduce_stats) in enumerate(tasks, start=1):
            _merge(stats, reduce_stats)
            progress("assessing", done, partitions)
        locations = _load_locations(plan)
    finally:
        if pool is not None:
            pool.close()
            pool.join()
        shutil.rmtree(spill, ignore_errors=True)
    return stats, locations


def _merge(stats: LocalStats, other: LocalStats) -> None:
    stats.lines_bytes += other.lines_bytes
    stats.records += other.records
    stats.errors.update(other.errors)
    stats.tally.merge(other.tally)
    stats.largest_partition_records = max(
        stats.largest_partition_records, other.largest_partition_records
    )


# --- running tasks in-process or on a pool ---------------------------------------------------

_PLAN: _Plan | None = None


def _init(plan: _Plan) -> None:
    global _PLAN
    _PLAN = plan


def _call(
    task: tuple[Callable[[_Plan, int], tuple[int, LocalStats]], int],
) -> tuple[int, LocalStats]:
    function, number = task
    assert _PLAN is not None
    return function(_PLAN, number)


def _pool(plan: _Plan, workers: int) -> Any:
    """A pool of ``workers`` processes (spawned: no state inherited), or None for one."""
    if workers <= 1:
        return None
    context = multiprocessing.get_context("spawn")
    return context.Pool(workers, initializer=_init, initargs=(plan,))


def _run(
    pool: Any,
    function: Callable[[_Plan, int], tuple[int, LocalStats]],
    numbers: Iterable[int],
    plan: _Plan,
) -> Iterator[tuple[int, LocalStats]]:
    if pool is None:
        for number in numbers:
            yield function(plan, number)
        return
    yield from pool.imap_unordered(_call, [(function, n) for n in numbers])


# --- pass 1: map -----------------------------------------------------------------------------


def _map_task(plan: _Plan, number: int) -> tuple[int, LocalStats]:
    """Read one export file into partition spill files and error rows."""
    file = plan.files[number]
    stats = LocalStats()
    spill = _Spill(plan.spill, number, plan.partitions)
    errors = ParquetSink(join(plan.out, f"errors/read-{number:05d}.parquet"), ERROR_COLUMNS)
    bulk = plan.context.bulk
    try:
        for item in read_file(
            file, max_line_bytes=bulk.max_line_bytes, pseudonym=plan.context.pseudonym
        ):
            if isinstance(item, ErrorRow):
                stats.count_error(item)
                errors.add(item.row())
            else:
                stats.records += 1
                spill.add(number, item)
    finally:
        spill.close()
        errors.close()
    return file.size, stats


class _Spill:
    """Buffered appends to one spill file per partition (and one for Locations)."""

    def __init__(self, root: str, file_number: int, partitions: int) -> None:
        self.root = Path(root)
        self.name = f"f{file_number:05d}"
        self.partitions = partitions
        self.buffers: dict[str, bytearray] = {}
        self.limit = max(16 * 1024, SPILL_BUFFER_BYTES // (partitions + 1))

    def add(self, file_number: int, record: Record) -> None:
        if record.key is None:
            target = LOCATIONS
        else:
            target = f"p{partition_of(record.key, self.partitions):05d}"
        buffer = self.buffers.setdefault(target, bytearray())
        buffer += f"{record.kind}\t{record.key or ''}\t{file_number}\t{record.line}\n".encode()
        buffer += record.body
        buffer += b"\n"
        if len(buffer) >= self.limit:
            self._write(target, buffer)

    def _write(self, target: str, buffer: bytearray) -> None:
        folder = self.root / target
        folder.mkdir(exist_ok=True)
        with (folder / self.name).open("ab") as out:
            out.write(buffer)
        buffer.clear()

    def close(self) -> None:
        for target, buffer in self.buffers.items():
            if buffer:
                self._write(target, buffer)


def _spilled(folder: Path, files: tuple[ExportFile, ...]) -> Iterator[Record]:
    """The records spilled into one folder (one partition, or the Locations)."""
    if not folder.is_dir():
        return
    for path in sorted(folder.iterdir()):
        with path.open("rb") as stream:
            for header in stream:
                body = next(stream)[:-1]
                kind, key, file_number, line = header[:-1].decode().split("\t")
                name = files[int(file_number)].name
                yield Record(kind, key or None, name, int(line), body)


# --- pass 2: grouped map ---------------------------------------------------------------------

# The Locations, read once per worker process from the spill (they are few: wards, units).
_LOCATIONS: dict[str, dict[str, dict[str, object]]] = {}


def _load_locations(plan: _Plan) -> dict[str, dict[str, object]]:
    found = _LOCATIONS.get(plan.spill)
    if found is not None:
        return found
    locations: dict[str, dict[str, object]] = {}
    ordered = sorted(
        _spilled(Path(plan.spill) / LOCATIONS, plan.files), key=lambda r: (r.file, r.line)
    )
    for record in ordered:
        resource = orjson.loads(record.body)
        locations.setdefault(f"Location/{resource['id']}", resource)
        if len(locations) > plan.context.bulk.max_locations:
            raise location_limit(plan.context.bulk.max_locations)
    _LOCATIONS.clear()
    _LOCATIONS[plan.spill] = locations
    return locations


def _reduce_task(plan: _Plan, number: int) -> tuple[int, LocalStats]:
    """Group one partition by patient, assess each, write its part files."""
    stats = LocalStats()
    groups: dict[str, list[Record]] = {}
    for record in _spilled(Path(plan.spill) / f"p{number:05d}", plan.files):
        assert record.key is not None
        groups.setdefault(record.key, []).append(record)
        stats.largest_partition_records += 1
    assessor = Assessor(plan.context, _load_locations(plan))
    results = ParquetSink(join(plan.out, f"results/part-{number:05d}.parquet"), RESULT_COLUMNS)
    errors = ParquetSink(join(plan.out, f"errors/part-{number:05d}.parquet"), ERROR_COLUMNS)
    try:
        for key in sorted(groups):
            outcome = assessor.patient(key, groups.pop(key))
            stats.tally.add_patient()
            for row in outcome.results:
                results.add(row)
                stats.tally.add_result(row)
            for error in outcome.errors:
                stats.count_error(error)
                errors.add(error.row())
    finally:
        results.close()
        errors.close()
    return 0, stats


def cpu_count() -> int:
    """Processors this process may use."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1
