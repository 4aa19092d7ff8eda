"""One case as a rule owner brings it: a FHIR Bundle (JSON) or an HL7 v2 ORU^R01, told apart
by content, read into an ``Intake`` by the service's own readers.

``explain``, the bench and fixtures whose input is an HL7 v2 message read their input here, so
that every tool reads a case exactly as the service does.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import orjson

from service.fhir.extract import read_bundle
from service.fhir.outcome import LocatedError
from service.hl7v2.errors import V2MessageError
from service.hl7v2.header import unsupported
from service.hl7v2.intake import read_oru
from service.hl7v2.message import parse_message, v2_text
from service.intake.model import Intake
from service.runtime import Runtime

CaseKind = Literal["fhir", "hl7v2"]


class CaseInputError(ValueError):
    """A case that cannot be read; ``problems`` each say where and what (never the value)."""

    def __init__(self, kind: CaseKind, problems: list[str]) -> None:
        self.kind = kind
        self.problems = problems
        super().__init__("; ".join(problems))


@dataclass(frozen=True, slots=True)
class CaseInput:
    """A case read: what it was and the intake the service assesses."""

    kind: CaseKind
    intake: Intake


def read_case(raw: bytes, runtime: Runtime) -> CaseInput:
    """The intake of ``raw``: an HL7 v2 message (MSH first, or MLLP-framed), else a Bundle.

    Raises:
        CaseInputError: not JSON, not a Bundle the service can read, or a v2 message it
            refuses; each problem located.
    """
    text = v2_text(raw)
    if text is not None:
        try:
            message = parse_message(text)
            problems = unsupported(message.header)
            if problems:
                raise CaseInputError("hl7v2", [str(p) for p in problems])
            return CaseInput("hl7v2", read_oru(message, concept_map=runtime.concept_map))
        except V2MessageError as exc:
            raise CaseInputError("hl7v2", [str(e) for e in exc.errors]) from None
    try:
        data = orjson.loads(raw)
    except orjson.JSONDecodeError as exc:
        raise CaseInputError(
            "fhir", [f"neither an HL7 v2 message (MSH first) nor JSON ({exc.msg})"]
        ) from None
    try:
        return CaseInput("fhir", read_bundle(data, concept_map=runtime.concept_map))
    except LocatedError as exc:
        raise CaseInputError(
            "fhir", [f"{p.expression}: {p.diagnostics}" for p in exc.problems]
        ) from None
