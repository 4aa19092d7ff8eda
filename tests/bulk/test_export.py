"""Reading an export folder: file types from the manifest or the name, lines with a budget."""

from __future__ import annotations

import gzip
import json
from pathlib import Path

import pytest

from service.bulk.errors import ErrorCode
from service.bulk.export import (
    ExportError,
    ExportFile,
    Role,
    numbered_lines,
    open_export,
    split_lines,
    type_from_name,
)


@pytest.mark.parametrize(
    ("name", "kind"),
    [
        ("Observation.ndjson", "Observation"),
        ("Observation.002.ndjson.gz", "Observation"),
        ("1.Patient.ndjson", "Patient"),
        ("Location_3.ndjson", "Location"),
        ("part-0001.ndjson", None),
    ],
)
def test_the_file_name_states_the_resource_type(name: str, kind: str | None) -> None:
    assert type_from_name(name) == kind


def test_lines_are_numbered_from_one_and_blank_lines_still_count() -> None:
    chunks = iter([b'{"a":1}\n\n{"b"', b':2}\r\n{"c":3}'])
    assert list(split_lines(chunks, 100)) == [
        (1, b'{"a":1}'),
        (2, b""),
        (3, b'{"b":2}\r'),
        (4, b'{"c":3}'),
    ]


def test_a_line_over_the_budget_is_skipped_and_the_next_keeps_its_number() -> None:
    long_line = b"x" * 50
    chunks = iter([b"short\n" + long_line[:30], long_line[30:] + b"\nafter\n"])
    assert list(split_lines(chunks, 20)) == [(1, b"short"), (2, None), (3, b"after")]


def test_a_line_over_the_budget_is_never_held_whole() -> None:
    """A line of 10 MB in 1 MB chunks: the pending buffer stops growing at the budget."""
    chunk = b"y" * (1 << 20)
    chunks = iter([chunk] * 10 + [b"\nend\n"])
    assert list(split_lines(chunks, 1 << 20)) == [(1, None), (2, b"end")]


def test_a_gzip_file_reads_like_a_plain_one(tmp_path: Path) -> None:
    with gzip.open(tmp_path / "Patient.ndjson.gz", "wb") as out:
        out.write(b'{"resourceType":"Patient","id":"a"}\n{"resourceType":"Patient","id":"b"}\n')
    file = ExportFile(
        "Patient.ndjson.gz", str(tmp_path / "Patient.ndjson.gz"), 10, "Patient", Role.OUTPUT
    )
    assert [n for n, _ in numbered_lines(file, 1000)] == [1, 2]


def test_the_manifest_declares_types_and_reports_missing_files(tmp_path: Path) -> None:
    (tmp_path / "file-a.ndjson").write_text("{}\n")
    (tmp_path / "file-b.ndjson").write_text("{}\n")
    (tmp_path / "notes.txt").write_text("not NDJSON\n")
    manifest = {
        "transactionTime": "2026-01-01T00:00:00Z",
        "output": [
            {"type": "Observation", "url": "https://server.invalid/files/file-a.ndjson"},
            {"type": "Patient", "url": "gone.ndjson"},
        ],
        "error": [{"type": "OperationOutcome", "url": "file-b.ndjson"}],
    }
    (tmp_path / "manifest.json").write_text(json.dumps(manifest))
    export = open_export(str(tmp_path))
    by_name = {f.name: f for f in export.files}
    assert by_name["file-a.ndjson"].declared_type == "Observation"
    assert by_name["file-b.ndjson"].role is Role.ERROR
    problems = {(p.file, p.code) for p in export.problems}
    assert problems == {
        ("gone.ndjson", ErrorCode.MANIFEST_FILE_MISSING),
        ("notes.txt", ErrorCode.FILE_SKIPPED),
    }


def test_a_manifest_that_is_not_json_is_reported_and_the_files_still_read(tmp_path: Path) -> None:
    (tmp_path / "Observation.ndjson").write_text("{}\n")
    (tmp_path / "manifest.json").write_text("{not json")
    export = open_export(str(tmp_path))
    assert [f.declared_type for f in export.files] == ["Observation"]
    assert [p.code for p in export.problems] == [ErrorCode.MANIFEST_INVALID]


def test_a_folder_without_ndjson_is_refused(tmp_path: Path) -> None:
    with pytest.raises(ExportError, match=r"no \*\.ndjson"):
        open_export(str(tmp_path))
    with pytest.raises(ExportError, match="not a folder"):
        open_export(str(tmp_path / "missing"))


def test_a_file_uri_reads_like_a_path(tmp_path: Path) -> None:
    """pyarrow's filesystem layer: the same code reads s3://, gs:// or hdfs:// URIs."""
    (tmp_path / "Patient.ndjson").write_text('{"resourceType":"Patient","id":"a"}\n')
    export = open_export(tmp_path.as_uri())
    assert [list(numbered_lines(f, 100)) for f in export.files] == [
        [(1, b'{"resourceType":"Patient","id":"a"}')]
    ]
