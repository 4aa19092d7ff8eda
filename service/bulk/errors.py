"""Rows of ``errors/``: every line, resource or episode the job could not use, and why.

Each row names the file (relative to the export folder) and the 1-based line when there is
one, the resource type and id when known, the problem's code, severity and message, and a
FHIRPath relative to the resource (``Observation.valueQuantity.code``). Messages say what is
wrong with an element and never quote a value sent (the service's rule for every error).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from enum import StrEnum

from .schema import Column, Kind


class Stage(StrEnum):
    """Where in the job a problem was met."""

    EXPORT = "export"  # the folder or its manifest
    READ = "read"  # one line of one file
    PATIENT = "patient"  # grouping and reading one patient's resources
    EPISODE = "episode"  # one gas episode


class ErrorCode(StrEnum):
    """What went wrong; counted in the one-line summary."""

    MANIFEST_INVALID = "manifest-invalid"
    MANIFEST_FILE_MISSING = "manifest-file-missing"
    EXPORT_ERROR = "export-error"  # an OperationOutcome the exporting server wrote
    FILE_SKIPPED = "file-skipped"
    FILE_UNREADABLE = "file-unreadable"
    LINE_TOO_LONG = "line-too-long"
    NOT_JSON = "not-json"
    NOT_A_RESOURCE = "not-a-resource"
    UNKNOWN_RESOURCE_TYPE = "unknown-resource-type"
    TYPE_MISMATCH = "type-mismatch"
    RESOURCE_NOT_READ = "resource-not-read"
    NO_ID = "no-id"
    NO_PATIENT = "no-patient"
    DUPLICATE_RESOURCE = "duplicate-resource"
    UNREADABLE_RESOURCE = "unreadable-resource"
    GAS_WITHOUT_TIME = "gas-without-time"
    PATIENT_NOT_EXPORTED = "patient-not-exported"
    TOO_MANY_RESOURCES = "too-many-resources"
    EPISODE_UNREADABLE = "episode-unreadable"
    EPISODE_TOO_LARGE = "episode-too-large"


ERROR_COLUMNS: tuple[Column, ...] = (
    Column("file", Kind.STRING),
    Column("line", Kind.LONG),
    Column("resource_type", Kind.STRING),
    Column("resource_id", Kind.STRING),
    Column("patient", Kind.STRING),
    Column("stage", Kind.STRING),
    Column("code", Kind.STRING),
    Column("severity", Kind.STRING),
    Column("message", Kind.STRING),
    Column("expression", Kind.STRING),
)


@dataclass(frozen=True, slots=True)
class ErrorRow:
    """One row of ``errors/`` (``patient`` and ``resource_id`` pseudonymised when asked)."""

    file: str | None
    line: int | None
    stage: Stage
    code: ErrorCode
    severity: str  # error | warning | information
    message: str
    resource_type: str | None = None
    resource_id: str | None = None
    patient: str | None = None
    expression: str | None = None

    def row(self) -> dict[str, object]:
        """The row as a dict of the ``ERROR_COLUMNS``."""
        out = asdict(self)
        out["stage"], out["code"] = self.stage.value, self.code.value
        return out
