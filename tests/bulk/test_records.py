"""Each line of an export file: a record to group by patient, or an error row naming its
file and line. Nothing stops the reading."""

from __future__ import annotations

import json
from pathlib import Path

from service.bulk.errors import ErrorCode, ErrorRow
from service.bulk.export import ExportFile, Role
from service.bulk.pseudonym import Pseudonymiser
from service.bulk.records import Record, read_file

OBS = {
    "resourceType": "Observation",
    "id": "o1",
    "status": "final",
    "code": {"coding": [{"system": "http://loinc.org", "code": "2703-7"}]},
    "subject": {"reference": "Patient/p1"},
}


def _read(
    tmp_path: Path, lines: list[str], *, name: str = "Observation.ndjson", kind: str | None = None
) -> list[Record | ErrorRow]:
    path = tmp_path / name
    path.write_text("".join(line + "\n" for line in lines))
    declared = "Observation" if kind is None else kind or None  # "": no declared type
    file = ExportFile(name, str(path), path.stat().st_size, declared, Role.OUTPUT)
    return list(read_file(file, max_line_bytes=2000, pseudonym=Pseudonymiser()))


def test_each_bad_line_becomes_an_error_row_with_its_file_and_line(tmp_path: Path) -> None:
    lines = [
        json.dumps(OBS),
        '{"resourceType":"Observation","id":"cut","sta',
        "[1, 2]",
        json.dumps({"id": "x"}),
        json.dumps({"resourceType": "Obsrvation", "id": "typo"}),
        json.dumps({**OBS, "id": "o2", "subject": {"reference": "Group/g1"}}),
        json.dumps({**OBS, "id": "o3", "subject": None}),
        "",
        "x" * 3000,
        json.dumps({**OBS, "id": "o4", "subject": {"reference": "https://h.invalid/Patient/p2"}}),
    ]
    out = _read(tmp_path, lines)
    records = [r for r in out if isinstance(r, Record)]
    errors = [(e.file, e.line, e.code) for e in out if isinstance(e, ErrorRow)]
    assert [(r.line, r.key) for r in records] == [(1, "Patient/p1"), (10, "Patient/p2")]
    assert errors == [
        ("Observation.ndjson", 2, ErrorCode.NOT_JSON),
        ("Observation.ndjson", 3, ErrorCode.NOT_JSON),
        ("Observation.ndjson", 4, ErrorCode.NOT_A_RESOURCE),
        ("Observation.ndjson", 5, ErrorCode.UNKNOWN_RESOURCE_TYPE),
        ("Observation.ndjson", 6, ErrorCode.NO_PATIENT),
        ("Observation.ndjson", 7, ErrorCode.NO_PATIENT),
        ("Observation.ndjson", 9, ErrorCode.LINE_TOO_LONG),
    ]


def test_an_error_never_quotes_what_was_sent(tmp_path: Path) -> None:
    secret = "Invented-Name-Qx7"
    lines = [json.dumps({"resourceType": secret}), '{"name": "' + secret + '"']
    for row in _read(tmp_path, lines):
        assert isinstance(row, ErrorRow)
        assert secret not in json.dumps(row.row())


def test_types_not_read_are_counted_once_per_file(tmp_path: Path) -> None:
    condition = json.dumps({"resourceType": "Condition", "id": "c"})
    out = _read(tmp_path, [condition, json.dumps(OBS), condition], kind="")
    errors = [e for e in out if isinstance(e, ErrorRow)]
    assert len(errors) == 1 and errors[0].code is ErrorCode.RESOURCE_NOT_READ
    assert errors[0].line == 1 and "2 lines" in errors[0].message
    assert errors[0].severity == "information"


def test_a_whole_file_of_a_type_not_read_is_not_opened(tmp_path: Path) -> None:
    file = ExportFile("Condition.ndjson", str(tmp_path / "absent"), 0, "Condition", Role.OUTPUT)
    out = list(read_file(file, max_line_bytes=100, pseudonym=Pseudonymiser()))
    assert [(e.code, e.line) for e in out if isinstance(e, ErrorRow)] == [
        (ErrorCode.RESOURCE_NOT_READ, None)
    ]


def test_a_resource_in_the_wrong_file_is_read_with_a_warning(tmp_path: Path) -> None:
    patient = json.dumps({"resourceType": "Patient", "id": "p9"})
    out = _read(tmp_path, [patient])
    assert [type(r).__name__ for r in out] == ["ErrorRow", "Record"]
    warning = out[0]
    assert isinstance(warning, ErrorRow) and warning.code is ErrorCode.TYPE_MISMATCH
    assert warning.severity == "warning"
    record = out[1]
    assert isinstance(record, Record) and record.key == "Patient/p9"


def test_patients_and_locations_need_an_id(tmp_path: Path) -> None:
    lines = [
        json.dumps({"resourceType": "Patient"}),
        json.dumps({"resourceType": "Location", "id": "bad id"}),
        json.dumps({"resourceType": "Location", "id": "ward-1"}),
    ]
    out = _read(tmp_path, lines, name="mixed.ndjson", kind="")
    assert [(getattr(r, "code", None), r.line) for r in out] == [
        (ErrorCode.NO_ID, 1),
        (ErrorCode.NO_ID, 2),
        (None, 3),
    ]
    last = out[2]
    assert isinstance(last, Record) and last.key is None


def test_the_servers_own_errors_are_passed_on_without_their_text(tmp_path: Path) -> None:
    outcome = {
        "resourceType": "OperationOutcome",
        "issue": [
            {"severity": "error", "code": "processing", "diagnostics": "Invented-Name-Qx7"},
            {"severity": "error", "code": "not-found", "expression": ["Patient/x"]},
        ],
    }
    path = tmp_path / "errors.ndjson"
    path.write_text(json.dumps(outcome) + "\n")
    file = ExportFile("errors.ndjson", str(path), 1, "OperationOutcome", Role.ERROR)
    (row,) = list(read_file(file, max_line_bytes=2000, pseudonym=Pseudonymiser()))
    assert isinstance(row, ErrorRow) and row.code is ErrorCode.EXPORT_ERROR
    assert row.line == 1 and "not-found, processing" in row.message
    assert "Invented-Name" not in row.message
