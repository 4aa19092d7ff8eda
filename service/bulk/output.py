"""Writing the job's outputs: Parquet part files, the summary tables, ``run.json`` and the page.

The output folder holds ``results/``, ``errors/`` and ``summary/``. Parquet is written with
pyarrow through ``pyarrow.fs`` (a local path or a URI), in row groups of ``BATCH_ROWS`` so a
part file never holds more than one batch in memory. A job refuses an output folder that
already holds results, rather than mixing two runs.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import orjson

from .export import absolute, filesystem, join
from .schema import Column, arrow_schema
from .summary import TABLES, Tally, table_columns

BATCH_ROWS = 10_000
OUTPUTS = ("results", "errors", "summary")


class OutputExistsError(Exception):
    """The output folder already holds a job's outputs."""


def prepare(out_dir: str) -> str:
    """Create the output folder (absolute URI returned); refuse one holding outputs already."""
    from pyarrow import fs

    base = absolute(out_dir)
    system, path = filesystem(base)
    for name in OUTPUTS:
        if system.get_file_info(f"{path}/{name}").type != fs.FileType.NotFound:
            raise OutputExistsError(
                f"{out_dir}: already holds {name}/ from an earlier run; choose an empty folder"
            )
    system.create_dir(path, recursive=True)
    return base


class ParquetSink:
    """Rows appended to one Parquet file, written a batch at a time; nothing written when
    no row came unless ``always`` (``close`` returns the count)."""

    def __init__(self, uri: str, columns: Sequence[Column], *, always: bool = False) -> None:
        self.uri = uri
        self.always = always
        self.schema = arrow_schema(columns)
        self.names = [c.name for c in columns]
        self.pending: list[Mapping[str, object]] = []
        self.writer: Any = None
        self.count = 0

    def add(self, row: Mapping[str, object]) -> None:
        self.pending.append(row)
        self.count += 1
        if len(self.pending) >= BATCH_ROWS:
            self._flush()

    def _flush(self) -> None:
        if not self.pending and (self.writer is not None or not self.always):
            return
        import pyarrow as pa
        import pyarrow.parquet as pq

        if self.writer is None:
            system, path = filesystem(self.uri)
            system.create_dir(path.rsplit("/", 1)[0], recursive=True)
            self.writer = pq.ParquetWriter(path, self.schema, filesystem=system)
        table = pa.Table.from_pylist(self.pending, schema=self.schema)
        self.writer.write_table(table)
        self.pending = []

    def close(self) -> int:
        self._flush()
        if self.writer is not None:
            self.writer.close()
        return self.count


def write_bytes(uri: str, data: bytes) -> None:
    system, path = filesystem(uri)
    system.create_dir(path.rsplit("/", 1)[0], recursive=True)
    with system.open_output_stream(path, compression=None) as stream:
        stream.write(data)


def write_table(uri: str, rows: list[dict[str, object]], columns: Sequence[Column]) -> None:
    """One small table as Parquet (``uri``) and CSV (same name, ``.csv``)."""
    import pyarrow as pa
    import pyarrow.csv as csv
    import pyarrow.parquet as pq

    table = pa.Table.from_pylist(rows, schema=arrow_schema(columns))
    system, path = filesystem(uri)
    system.create_dir(path.rsplit("/", 1)[0], recursive=True)
    pq.write_table(table, path, filesystem=system)
    with system.open_output_stream(path.removesuffix(".parquet") + ".csv") as stream:
        csv.write_csv(table, stream)


def write_summary(
    base: str,
    tally: Tally,
    location_names: Mapping[str, str],
    run: dict[str, object],
    page: str,
) -> None:
    """``summary/``: one table per count (Parquet and CSV), ``run.json`` and ``index.html``."""
    for name in TABLES:
        rows = tally.table(name, location_names)
        write_table(join(base, f"summary/{name}.parquet"), rows, table_columns(name))
    write_bytes(
        join(base, "summary/run.json"), orjson.dumps(run, option=orjson.OPT_INDENT_2) + b"\n"
    )
    write_bytes(join(base, "summary/index.html"), page.encode())
