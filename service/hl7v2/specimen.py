"""Which blood an order group's results came from: SPM-4, else OBR-15 (V2-to-FHIR IG).

LOINC puts the specimen in the code for most blood-gas terms; the "Bld" terms (11556-8 ...)
do not, and V2-to-FHIR maps SPM-4 (v2.5+) and, in older messages, OBR-15 to
``Specimen.type`` referenced by ``Observation.specimen``. As in the FHIR adapter, the type is
read from HL7 table 0487 (or 0070) or SNOMED CT codes, and a specimen that stays unknown is
never taken as arterial.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from service.hl7v2 import tables
from service.hl7v2.errors import Location
from service.hl7v2.message import Segment
from service.intake.model import Specimen
from service.terminology import codes


@dataclass(frozen=True, slots=True)
class OrderSpecimen:
    """The specimen of one order group, or UNKNOWN with the reason and where to look."""

    specimen: Specimen
    reason: str | None
    location: Location

    @property
    def known(self) -> bool:
        return self.specimen is not Specimen.UNKNOWN


def coded_specimen(code: str, v2_system: str) -> Specimen | None:
    """The specimen a (code, v2 coding system) names, if it is one the service knows."""
    if v2_system in tables.V2_SPECIMEN_TABLES:
        return tables.V2_SPECIMEN_CODES.get(code)
    system = tables.fhir_system(v2_system)
    return codes.SPECIMEN_TYPES.get((system, code))


def _spm_type(spm: Segment) -> Specimen | None:
    parts = spm.components(4) + [""] * 6
    for code, system in ((parts[0], parts[2]), (parts[3], parts[5])):
        found = coded_specimen(code, system) if code else None
        if found is not None:
            return found
    return None


def order_specimen(obr: Segment, spms: Sequence[Segment]) -> OrderSpecimen:
    """SPM-4 of the order's SPM segments; without SPM, OBR-15 component 1 (SPS)."""
    if spms:
        found = {s for s in (_spm_type(spm) for spm in spms) if s is not None}
        where = spms[0].at(4)
        if len(found) == 1:
            return OrderSpecimen(found.pop(), None, where)
        if found:
            reason = "the order's SPM segments name different specimen types"
        else:
            reason = "SPM-4 has no arterial, venous or capillary blood code"
        return OrderSpecimen(Specimen.UNKNOWN, reason, where)
    code, system = obr.value(15, 1, 1), obr.value(15, 1, 3)
    where = obr.at(15, 1)
    if not code:
        return OrderSpecimen(Specimen.UNKNOWN, "the order names no specimen (SPM-4, OBR-15)", where)
    specimen = coded_specimen(code, system)
    if specimen is None:
        reason = "OBR-15 has no arterial, venous or capillary blood code"
        return OrderSpecimen(Specimen.UNKNOWN, reason, where)
    return OrderSpecimen(specimen, None, where)
