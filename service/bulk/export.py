"""A FHIR Bulk Data export folder: its files, its manifest, and the lines of each file.

An export (FHIR Bulk Data Access IG, "Bulk Data Output File Request") is one NDJSON file per
resource type, several per type allowed, optionally gzip-compressed, and a JSON manifest that
lists each file's ``type`` and ``url``. The folder is read through ``pyarrow.fs``, so a local
path, a shared mount or a URI pyarrow knows (``s3://``, ``gs://``, ``hdfs://``) reads alike.

The manifest is used when the folder has one (``manifest.json``): its ``output`` entries give
each file's declared type, matched by the last segment of the ``url``; its ``error`` entries
are the server's own OperationOutcome files, read and passed on to ``errors/``. A file the
manifest lists but the folder lacks is reported. Without a manifest, the type is taken from the
file name when it names one (``Observation.ndjson``, ``Observation.002.ndjson.gz``,
``1.Observation.ndjson``), else from each line.

Lines are read in chunks and split here rather than with ``readline``: a line longer than the
budget is skipped as it streams past, never held whole in memory.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass
from enum import StrEnum
from pathlib import PurePosixPath
from typing import Any

import orjson

from .errors import ErrorCode, ErrorRow, Stage

MANIFEST = "manifest.json"
SUFFIXES = (".ndjson", ".ndjson.gz")
CHUNK_BYTES = 1 << 20
_TYPE_TOKEN = re.compile(r"[A-Z][A-Za-z]+")
_URI = re.compile(r"^[A-Za-z][A-Za-z0-9+.-]*://")


class Role(StrEnum):
    """What a file of the export holds."""

    OUTPUT = "output"  # resources
    ERROR = "error"  # the server's OperationOutcomes


@dataclass(frozen=True, slots=True)
class ExportFile:
    """One NDJSON file: its name in the folder (used in ``errors/``), where to open it, its
    size in bytes as stored and the resource type it declares, if any."""

    name: str
    uri: str
    size: int
    declared_type: str | None
    role: Role = Role.OUTPUT


@dataclass(frozen=True, slots=True)
class Export:
    """The files to read, sorted by name, and what was wrong with the folder itself."""

    files: tuple[ExportFile, ...]
    problems: tuple[ErrorRow, ...]

    @property
    def total_bytes(self) -> int:
        return sum(f.size for f in self.files)


class ExportError(Exception):
    """The folder cannot be read as an export at all (missing, empty, not a folder)."""


def absolute(location: str) -> str:
    """A URI as it is; a local path made absolute (``pyarrow.fs`` wants one)."""
    if _URI.match(location):
        return location
    from pathlib import Path

    return str(Path(location).resolve())


def filesystem(uri: str) -> tuple[Any, str]:
    """The ``pyarrow.fs`` filesystem and path of a local path or URI."""
    from pyarrow import fs

    system, path = fs.FileSystem.from_uri(absolute(uri))
    return system, str(path)


def join(base: str, name: str) -> str:
    """``base/name`` for a path or a URI."""
    return base.rstrip("/") + "/" + name


def type_from_name(name: str) -> str | None:
    """The resource type a file name states (``Observation.002.ndjson.gz`` → Observation)."""
    stem = name
    for suffix in sorted(SUFFIXES, key=len, reverse=True):
        if stem.endswith(suffix):
            stem = stem[: -len(suffix)]
            break
    for token in re.split(r"[._\-]", stem):
        if _TYPE_TOKEN.fullmatch(token):
            return token
    return None


def open_export(location: str) -> Export:
    """List an export folder and read its manifest.

    Raises:
        ExportError: the folder does not exist or holds no NDJSON file.
    """
    from pyarrow import fs

    base = absolute(location)
    system, path = filesystem(base)
    info = system.get_file_info(path)
    if info.type != fs.FileType.Directory:
        raise ExportError(f"{location}: not a folder")
    entries = system.get_file_info(fs.FileSelector(path, recursive=False))
    sizes = {e.base_name: e.size for e in entries if e.type == fs.FileType.File}
    problems: list[ErrorRow] = []
    declared: dict[str, tuple[str | None, Role]] = {}
    if MANIFEST in sizes:
        with system.open_input_stream(f"{path}/{MANIFEST}", compression=None) as stream:
            raw = stream.read()
        declared, problems = read_manifest(raw, set(sizes))
    files = []
    for name in sorted(sizes):
        if name == MANIFEST:
            continue
        if not name.endswith(SUFFIXES):
            problems.append(_skipped(name))
            continue
        kind, role = declared.get(name, (type_from_name(name), Role.OUTPUT))
        files.append(ExportFile(name, join(base, name), sizes[name] or 0, kind, role))
    if not files:
        raise ExportError(f"{location}: no *.ndjson or *.ndjson.gz file in the folder")
    return Export(tuple(files), tuple(problems))


def _skipped(name: str) -> ErrorRow:
    return ErrorRow(
        name,
        None,
        Stage.EXPORT,
        ErrorCode.FILE_SKIPPED,
        "information",
        "not an NDJSON file (*.ndjson, *.ndjson.gz): not read",
    )


def read_manifest(
    raw: bytes, present: set[str]
) -> tuple[dict[str, tuple[str | None, Role]], list[ErrorRow]]:
    """File name → (declared type, role) from a manifest, and what was wrong with it."""
    problems: list[ErrorRow] = []

    def problem(code: ErrorCode, message: str, at: str, name: str = MANIFEST) -> None:
        problems.append(ErrorRow(name, None, Stage.EXPORT, code, "error", message, expression=at))

    try:
        manifest = orjson.loads(raw)
    except orjson.JSONDecodeError:
        problem(ErrorCode.MANIFEST_INVALID, "not JSON: the manifest is not used", "$")
        return {}, problems
    if not isinstance(manifest, dict):
        problem(ErrorCode.MANIFEST_INVALID, "not a JSON object: the manifest is not used", "$")
        return {}, problems
    declared: dict[str, tuple[str | None, Role]] = {}
    for key, role in (("output", Role.OUTPUT), ("error", Role.ERROR)):
        items = manifest.get(key, [])
        if not isinstance(items, list):
            problem(ErrorCode.MANIFEST_INVALID, f"'{key}' is not an array: not used", key)
            continue
        for i, item in enumerate(items):
            at = f"{key}[{i}]"
            url = item.get("url") if isinstance(item, dict) else None
            kind = item.get("type") if isinstance(item, dict) else None
            if not isinstance(url, str) or not url.strip():
                problem(ErrorCode.MANIFEST_INVALID, "an entry without a 'url': not used", at)
                continue
            name = PurePosixPath(url.split("?", 1)[0]).name
            if name not in present:
                message = "the manifest lists this file; the folder does not hold it"
                problem(ErrorCode.MANIFEST_FILE_MISSING, message, at, name)
                continue
            declared[name] = (kind if isinstance(kind, str) else None, role)
    return declared, problems


def numbered_lines(file: ExportFile, max_bytes: int) -> Iterator[tuple[int, bytes | None]]:
    """(1-based line number, line without its end) for each line; ``None`` for a line over
    ``max_bytes``. Blank lines are included (the caller skips them; they still count).

    Raises:
        OSError: the file cannot be opened or decompressed (the caller reports where).
    """
    system, path = filesystem(file.uri)
    compression = "gzip" if file.name.endswith(".gz") else None
    with system.open_input_stream(path, compression=compression) as stream:
        yield from split_lines(iter(lambda: stream.read(CHUNK_BYTES), b""), max_bytes)


def split_lines(chunks: Iterator[bytes], max_bytes: int) -> Iterator[tuple[int, bytes | None]]:
    """Lines of a stream of byte chunks, numbered from 1; ``None`` for one over ``max_bytes``."""
    pending = bytearray()
    too_long = False
    number = 0
    for chunk in chunks:
        start = 0
        while True:
            end = chunk.find(b"\n", start)
            if end < 0:
                if not too_long:
                    pending += chunk[start:]
                    if len(pending) > max_bytes:
                        too_long = True
                        pending.clear()
                break
            number += 1
            if too_long:
                too_long = False
                yield number, None
            else:
                if pending:
                    pending += chunk[start:end]
                    line = bytes(pending)
                    pending.clear()
                else:
                    line = chunk[start:end]
                yield number, (line if len(line) <= max_bytes else None)
            start = end + 1
    if pending or too_long:
        yield number + 1, None if too_long else bytes(pending)
