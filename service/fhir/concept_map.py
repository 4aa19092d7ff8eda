"""Local laboratory codes mapped to LOINC by a FHIR ConceptMap.

A site whose analyser sends its own codes puts an R4 ``ConceptMap`` in the rule directory; it is
loaded once at start-up, checked completely, and refused with every problem located
(``ConceptMap.group[0].element[3].target[0].equivalence``) so a broken map stops the service
instead of silently dropping results.

Only mappings that say the local code *means the same* as the LOINC code are used: R4
``equivalence`` ``equivalent`` or ``equal`` (R5 ``relationship`` ``equivalent`` is read the same
way). ``relatedto``, ``wider``, ``narrower``, ``inexact`` and the rest are valid FHIR but would
let a differently defined result (another specimen, a calculated value) stand in for the one a
rule expects; they are skipped and counted in ``skipped``. A target LOINC code the service does
not read is an error: the map's author meant it to be read.
"""

from __future__ import annotations

from dataclasses import replace
from types import MappingProxyType

from service.fhir.outcome import ConceptMapError
from service.fhir.shape import Collector, JsonObject, member_list, objects
from service.fhir.shape import member_str as text
from service.terminology import codes
from service.terminology.local_codes import LocalCodeMap

USED_EQUIVALENCES = frozenset({"equivalent", "equal"})
R4_EQUIVALENCES = frozenset(
    {
        "relatedto",
        "equivalent",
        "equal",
        "wider",
        "subsumes",
        "narrower",
        "specializes",
        "inexact",
        "unmatched",
        "disjoint",
    }
)


def read_concept_map(data: object, *, source: str = "ConceptMap") -> LocalCodeMap:
    """Read an R4 ConceptMap (parsed JSON) into a ``LocalCodeMap``. ``source`` names the file
    in messages.

    Raises:
        ConceptMapError: the ConceptMap is malformed or maps to a code the service does not
            read; every problem is listed with its FHIRPath.
    """
    out = Collector()
    mappings: dict[tuple[str, str], str] = {}
    skipped = 0
    if not isinstance(data, dict) or data.get("resourceType") != "ConceptMap":
        out.problem("structure", "expected a ConceptMap resource", "ConceptMap")
    else:
        groups = member_list(data, "group", "ConceptMap", out, required=True) or []
        for group, at in objects(groups, "ConceptMap.group", out):
            skipped += _read_group(group, at, mappings, out)
    if out.problems:
        # Name the file in every message: the loader reports them at start-up.
        named = [replace(p, diagnostics=f"{source}: {p.diagnostics}") for p in out.problems]
        raise ConceptMapError(named)
    return LocalCodeMap(MappingProxyType(mappings), skipped)


def _read_group(
    group: JsonObject, at: str, mappings: dict[tuple[str, str], str], out: Collector
) -> int:
    system = text(group, "source", at, out, required=True)
    target = text(group, "target", at, out, required=True)
    if target is not None and target != codes.LOINC:
        out.problem("not-supported", f"the target system must be {codes.LOINC}", f"{at}.target")
    elements = member_list(group, "element", at, out, required=True) or []
    skipped = 0
    for element, element_at in objects(elements, f"{at}.element", out):
        local = text(element, "code", element_at, out, required=True)
        targets = member_list(element, "target", element_at, out) or []
        for mapped, target_at in objects(targets, f"{element_at}.target", out):
            loinc, used = _read_target(mapped, target_at, out)
            skipped += not used
            if loinc is None or system is None or local is None:
                continue
            previous = mappings.setdefault((system, local), loinc)
            if previous != loinc:
                out.problem(
                    "invalid",
                    f"local code '{local}' is already mapped to LOINC {previous}",
                    f"{target_at}.code",
                )
    return skipped


def _read_target(mapped: JsonObject, at: str, out: Collector) -> tuple[str | None, bool]:
    """(LOINC code or None, whether the equivalence lets the target be used)."""
    if "equivalence" in mapped:
        equivalence = text(mapped, "equivalence", at, out)
        if equivalence is not None and equivalence not in R4_EQUIVALENCES:
            out.problem("code-invalid", "not an R4 ConceptMap equivalence", f"{at}.equivalence")
            return None, True
    elif "relationship" in mapped:  # R5 spelling
        equivalence = text(mapped, "relationship", at, out)
    else:
        out.problem("required", "'equivalence' is required here", at)
        return None, True
    if equivalence not in USED_EQUIVALENCES:
        # A valid equivalence we do not use is "skipped"; a wrong type was already a problem.
        return None, equivalence is None
    code = text(mapped, "code", at, out, required=True)
    if code is not None and code not in codes.LOINC_CONCEPTS:
        out.problem("not-supported", f"LOINC {code} is not a code the service reads", f"{at}.code")
        return None, True
    return code, True
