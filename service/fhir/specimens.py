"""Which blood a "Bld" result came from, read from the Specimen it references.

LOINC codes such as 11556-8 (PO2 in Blood) do not say whether the sample was arterial (their LOINC
system is ``Bld``: blood, type not stated). The answer can only come from ``Observation.specimen``
→ a contained or bundled ``Specimen`` whose ``type`` carries a SNOMED CT or HL7 v2 table 0487 code
(``codes.SPECIMEN_TYPES``). When it does not, the specimen stays unknown and the caller says why;
it is never taken as arterial.
"""

from __future__ import annotations

from dataclasses import dataclass

from service.fhir.references import BundleIndex
from service.fhir.shape import (
    Collector,
    JsonObject,
    member_list,
    member_object,
    objects,
    refuse_modifiers,
)
from service.fhir.shape import member_str as text
from service.intake.model import Specimen
from service.terminology import codes


@dataclass(frozen=True, slots=True)
class SpecimenFinding:
    """The specimen found, or UNKNOWN with the reason and where to look."""

    specimen: Specimen
    reason: str | None
    expression: str


def specimen_type(resource: JsonObject, at: str, out: Collector) -> Specimen:
    """The specimen named by ``Specimen.type`` (first known coding), else UNKNOWN."""
    found = member_object(resource, "type", at, out)
    if found is None:
        return Specimen.UNKNOWN
    concept, path = found
    codings = member_list(concept, "coding", path, out) or []
    for coding, coding_at in objects(codings, f"{path}.coding", out):
        system = text(coding, "system", coding_at, out)
        code = text(coding, "code", coding_at, out)
        if system is not None and code is not None:
            known = codes.SPECIMEN_TYPES.get((system, code))
            if known is not None:
                return known
    return Specimen.UNKNOWN


def _contained(
    observation: JsonObject, at: str, local_id: str, out: Collector
) -> tuple[JsonObject, str]:
    items = member_list(observation, "contained", at, out) or []
    for resource, path in objects(items, f"{at}.contained", out):
        if resource.get("id") == local_id:
            return resource, path
    return {}, at


def observation_specimen(
    observation: JsonObject, at: str, index: BundleIndex, out: Collector
) -> SpecimenFinding:
    """Resolve ``Observation.specimen`` and read the type of the Specimen it points at."""
    found = member_object(observation, "specimen", at, out)
    if found is None:
        reason = "the Observation names no specimen"
        return SpecimenFinding(Specimen.UNKNOWN, reason, at)
    ref_obj, ref_at = found
    ref_path = f"{ref_at}.reference"
    reference = text(ref_obj, "reference", ref_at, out)
    if reference is None:
        # At the Reference itself when it has no ``reference`` (an identifier or a display
        # only): a path to an absent element selects nothing (FHIRPath).
        where = ref_path if "reference" in ref_obj else ref_at
        return SpecimenFinding(Specimen.UNKNOWN, "the specimen reference is empty", where)
    if reference.startswith("#"):
        target, target_at = _contained(observation, at, reference[1:], out)
        if target:
            refuse_modifiers(target, target_at, out, resource=True)
    else:
        entry = index.resolve(reference)
        target = {} if entry is None else index.resources[entry]
        target_at = f"Bundle.entry[{entry}].resource"
    if target.get("resourceType") != "Specimen":
        reason = "the referenced Specimen is not in the Bundle"
        return SpecimenFinding(Specimen.UNKNOWN, reason, ref_path)
    specimen = specimen_type(target, target_at, out)
    if specimen is Specimen.UNKNOWN:
        reason = "the Specimen type has no arterial, venous or capillary blood code"
        where = f"{target_at}.type" if "type" in target else target_at
        return SpecimenFinding(Specimen.UNKNOWN, reason, where)
    return SpecimenFinding(specimen, None, ref_path)
