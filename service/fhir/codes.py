"""FHIR code sets the FHIR adapter checks itself, and the FHIR-only URLs it reads.

Everything a code *means* (LOINC, SNOMED CT, device and specimen codes) is adapter-neutral and
lives in ``service.terminology.codes``; what is here belongs to FHIR resources alone.
"""

from __future__ import annotations

DATA_ABSENT_REASON = "http://terminology.hl7.org/CodeSystem/data-absent-reason"
TEST_DATA_TAG_SYSTEM = "http://terminology.hl7.org/CodeSystem/v3-ActReason"
TEST_DATA_TAG_CODE = "HTEST"
US_CORE_PULSE_OXIMETRY = "http://hl7.org/fhir/us/core/StructureDefinition/us-core-pulse-oximetry"


# --- FHIR required-binding code sets the adapter checks itself --------------------------------
# fhir.resources does not check required bindings (FHIR R4: bindings of strength "required").

OBSERVATION_STATUS_USED = frozenset({"final", "amended", "corrected", "preliminary"})
# registered: no result yet; unknown: the sender cannot say whether the value stands.
OBSERVATION_STATUS_IGNORED = frozenset({"entered-in-error", "cancelled", "registered", "unknown"})
OBSERVATION_STATUSES = OBSERVATION_STATUS_USED | OBSERVATION_STATUS_IGNORED

BUNDLE_TYPES = frozenset(
    {
        "document",
        "message",
        "transaction",
        "transaction-response",
        "batch",
        "batch-response",
        "history",
        "searchset",
        "collection",
        "subscription-notification",  # R4B
    }
)

ADMINISTRATIVE_GENDERS = frozenset({"male", "female", "other", "unknown"})

QUANTITY_COMPARATORS = frozenset({"<", "<=", ">=", ">", "ad"})
