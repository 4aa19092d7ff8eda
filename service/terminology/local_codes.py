"""A site's local laboratory codes, mapped to the LOINC codes the service reads.

The map is read once at start-up (from a FHIR ConceptMap: ``service.fhir.concept_map``) and
then used by every adapter: an HL7 v2 OBX-3 in a local coding system resolves exactly as a
FHIR ``Observation.code`` does.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field


@dataclass(frozen=True, slots=True)
class LocalCodeMap:
    """(system, local code) → LOINC code."""

    mappings: Mapping[tuple[str, str], str] = field(default_factory=dict)
    skipped: int = 0  # targets not used because their equivalence is not equivalent/equal

    def loinc_for(self, system: str, code: str) -> str | None:
        """The LOINC code a local coding maps to, or None."""
        return self.mappings.get((system, code))
