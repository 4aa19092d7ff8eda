"""What reading one message found: problems that refuse it (AE), issues that are reported."""

from __future__ import annotations

from dataclasses import dataclass, field

from service.hl7v2.errors import ErrorCode, Location, V2Error
from service.intake.model import IntakeIssue, Severity


@dataclass(slots=True)
class Notes:
    """Collects located problems and intake issues while a message is read."""

    problems: list[V2Error] = field(default_factory=list)
    issues: list[IntakeIssue] = field(default_factory=list)

    def problem(self, code: ErrorCode, reason: str, location: Location) -> None:
        """A problem the sender must fix; the message is answered AE."""
        self.problems.append(V2Error(location, code, reason))

    def issue(self, code: str, severity: Severity, message: str, location: Location) -> None:
        """A finding reported beside the result (``observation-ignored``, ...); reading goes on."""
        self.issues.append(IntakeIssue(code, severity, message, str(location)))
