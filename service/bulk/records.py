"""The map step: each line of an export file as a record to group by patient, or an error row.

A record keeps the line's bytes as they were (the assessment reads them with the service's
FHIR reader later) with what grouping needs: the resource type and the patient it belongs to,
``Patient/<id>`` from the Patient's own id or from ``subject.reference`` of an Observation,
Specimen or Encounter. Locations belong to no patient and are shared with every worker.

Nothing stops the job: a line that is not JSON, not a resource, of an unknown type, or about
no patient becomes an error row naming its file and line. A FHIR resource type the job does
not read (Condition, MedicationRequest, …) is not an error of the data; it is counted once per
file and type, and a whole file of such a type is not read at all.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import orjson

from service.fhir.models import is_resource_type
from service.fhir.references import FHIR_ID, type_and_id

from .errors import ErrorCode, ErrorRow, Stage
from .export import ExportFile, Role, numbered_lines
from .pseudonym import Pseudonymiser

GROUPED = frozenset({"Patient", "Observation", "Specimen", "Encounter"})
SHARED = frozenset({"Location"})
READ = GROUPED | SHARED


@dataclass(frozen=True, slots=True)
class Record:
    """One usable line: its resource type, its patient (``None`` for a Location), where it
    was, and its bytes."""

    kind: str
    key: str | None
    file: str
    line: int
    body: bytes


def read_file(
    file: ExportFile, *, max_line_bytes: int, pseudonym: Pseudonymiser
) -> Iterator[Record | ErrorRow]:
    """Every record and error row of one file, in line order (unread types counted last)."""
    if file.role is Role.ERROR:
        yield from _server_errors(file, max_line_bytes)
        return
    if file.declared_type is not None and file.declared_type not in READ:
        yield _whole_file_not_read(file)
        return
    reader = _LineReader(file, pseudonym)
    number = 0
    try:
        for number, line in numbered_lines(file, max_line_bytes):
            if line is None:
                yield reader.error(number, ErrorCode.LINE_TOO_LONG, _too_long(max_line_bytes))
                continue
            if line.strip():
                yield from reader.read(number, line)
    except OSError as exc:
        message = f"the file cannot be read past this line ({type(exc).__name__})"
        yield reader.error(number + 1, ErrorCode.FILE_UNREADABLE, message)
    yield from reader.unread_types()


def _too_long(max_line_bytes: int) -> str:
    return f"the line is longer than {max_line_bytes} bytes (OXYRULE_BULK_MAX_LINE_BYTES): skipped"


def _whole_file_not_read(file: ExportFile) -> ErrorRow:
    kind = file.declared_type
    return ErrorRow(
        file.name,
        None,
        Stage.READ,
        ErrorCode.RESOURCE_NOT_READ,
        "information",
        f"{kind} resources are not used by the assessment: the file was not read",
        resource_type=kind,
    )


class _LineReader:
    """Classifies the lines of one file; counts the lines of types that are not read."""

    def __init__(self, file: ExportFile, pseudonym: Pseudonymiser) -> None:
        self.file = file
        self.pseudonym = pseudonym
        self.not_read: dict[str, tuple[int, int]] = {}  # type -> (first line, count)

    def error(
        self,
        line: int,
        code: ErrorCode,
        message: str,
        *,
        kind: str | None = None,
        rid: str | None = None,
        patient: str | None = None,
        expression: str | None = None,
        severity: str = "error",
    ) -> ErrorRow:
        return ErrorRow(
            self.file.name,
            line,
            Stage.READ,
            code,
            severity,
            message,
            resource_type=kind,
            resource_id=self.pseudonym(rid),
            patient=self.pseudonym(patient),
            expression=expression,
        )

    def read(self, number: int, line: bytes) -> Iterator[Record | ErrorRow]:
        try:
            resource = orjson.loads(line)
        except orjson.JSONDecodeError:
            yield self.error(number, ErrorCode.NOT_JSON, "the line is not JSON")
            return
        if not isinstance(resource, dict):
            yield self.error(number, ErrorCode.NOT_JSON, "the line is not a JSON object")
            return
        kind = resource.get("resourceType")
        if not isinstance(kind, str) or not kind:
            message = "no resourceType: not a FHIR resource"
            yield self.error(number, ErrorCode.NOT_A_RESOURCE, message, expression="resourceType")
            return
        declared = self.file.declared_type
        if kind not in READ:
            if not is_resource_type(kind):
                message = "resourceType is not a FHIR resource type"
                code = ErrorCode.UNKNOWN_RESOURCE_TYPE
                yield self.error(number, code, message, expression="resourceType")
            else:
                first, count = self.not_read.get(kind, (number, 0))
                self.not_read[kind] = (first, count + 1)
            return
        rid = resource.get("id")
        ref = f"{kind}/{rid}" if isinstance(rid, str) and FHIR_ID.fullmatch(rid) else None
        if declared is not None and kind != declared:
            message = f"a {kind} in a file of {declared} resources: read as a {kind}"
            yield self.error(
                number,
                ErrorCode.TYPE_MISMATCH,
                message,
                kind=kind,
                rid=ref,
                expression="resourceType",
                severity="warning",
            )
        if kind in ("Patient", "Location"):
            if ref is None:
                message = f"a {kind} without a usable id cannot be referred to: not used"
                yield self.error(
                    number, ErrorCode.NO_ID, message, kind=kind, expression=f"{kind}.id"
                )
                return
            key = ref if kind == "Patient" else None
            yield Record(kind, key, self.file.name, number, line)
            return
        patient = _subject(resource)
        if patient is None:
            message = f"{kind}.subject names no Patient: it cannot be grouped with a patient's data"
            yield self.error(
                number,
                ErrorCode.NO_PATIENT,
                message,
                kind=kind,
                rid=ref,
                expression=f"{kind}.subject.reference",
            )
            return
        yield Record(kind, patient, self.file.name, number, line)

    def unread_types(self) -> Iterator[ErrorRow]:
        for kind, (first, count) in sorted(self.not_read.items()):
            lines = "1 line" if count == 1 else f"{count} lines"
            message = f"{kind} resources are not used by the assessment: {lines}, from this one"
            code = ErrorCode.RESOURCE_NOT_READ
            yield self.error(first, code, message, kind=kind, severity="information")


def _subject(resource: dict[str, object]) -> str | None:
    """``Patient/<id>`` from ``subject.reference``, or None when it names no Patient."""
    subject = resource.get("subject")
    reference = subject.get("reference") if isinstance(subject, dict) else None
    if not isinstance(reference, str):
        return None
    typed = type_and_id(reference)
    return typed if typed is not None and typed.startswith("Patient/") else None


def _server_errors(file: ExportFile, max_line_bytes: int) -> Iterator[ErrorRow]:
    """Each OperationOutcome line of a server's error file, as one row (issue codes only: a
    server's diagnostics may quote patient data)."""
    number = 0
    try:
        for number, line in numbered_lines(file, max_line_bytes):
            if line is None or not line.strip():
                continue
            yield _server_error(file.name, number, line)
    except OSError as exc:
        message = f"the file cannot be read past this line ({type(exc).__name__})"
        yield ErrorRow(
            file.name, number + 1, Stage.EXPORT, ErrorCode.FILE_UNREADABLE, "error", message
        )


def _server_error(name: str, number: int, line: bytes) -> ErrorRow:
    try:
        outcome = orjson.loads(line)
    except orjson.JSONDecodeError:
        outcome = None
    issues = outcome.get("issue") if isinstance(outcome, dict) else None
    issues = [i for i in issues if isinstance(i, dict)] if isinstance(issues, list) else []
    codes = sorted({str(i.get("code")) for i in issues if isinstance(i.get("code"), str)})
    expressions = [e for i in issues for e in i.get("expression") or [] if isinstance(e, str)]
    message = (
        f"the exporting server reported {len(issues)} issue(s): {', '.join(codes) or 'no code'}"
        if issues
        else "the exporting server reported an error this job cannot read"
    )
    return ErrorRow(
        name,
        number,
        Stage.EXPORT,
        ErrorCode.EXPORT_ERROR,
        "error",
        message,
        resource_type="OperationOutcome",
        expression=expressions[0] if expressions else None,
    )
