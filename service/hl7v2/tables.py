"""The HL7 v2 tables and coding-system ids this package reads and writes, in one place.

Each table cites where its codes come from (HL7 v2.5.1 tables by number, V2-to-FHIR IG). The FHIR
side of every mapping is the one code table of the service (``service.terminology.codes``): a v2
coding is turned into a (FHIR system, code) pair here and looked up there, so the two adapters
cannot disagree on what a code means.
"""

from __future__ import annotations

from types import MappingProxyType

from service.intake.model import Specimen
from service.terminology import codes

# --- Coding systems (HL7 table 0396 -> FHIR system URI) ---------------------------------------
# V2-to-FHIR maps CWE.3 (name of coding system) through table 0396 to Coding.system. "LN" is
# LOINC, "SCT" SNOMED CT, "UCUM" UCUM, "HL7nnnn" an HL7 table. The project's
# own CodeSystems take local ids of the form 99zzz that table 0396 reserves for local use; a
# sender may also put the FHIR URI itself in CWE.3.
INPUT_SYSTEM = "99OXYIN"  # https://oxyrule.org/fhir/CodeSystem/input (altitude, ...)
DEVICE_SYSTEM = "99OXYDEV"  # https://oxyrule.org/fhir/CodeSystem/oxygen-device

CODING_SYSTEMS: MappingProxyType[str, str] = MappingProxyType(
    {
        "LN": codes.LOINC,
        "SCT": codes.SNOMED_CT,
        "UCUM": codes.UCUM,
        "HL70487": codes.V2_SPECIMEN_TYPE,
        INPUT_SYSTEM: codes.INPUT_CODES,
        DEVICE_SYSTEM: codes.OXYGEN_DEVICE_CODES,
        **{uri: uri for uri in (codes.LOINC, codes.SNOMED_CT, codes.UCUM, codes.INPUT_CODES)},
        codes.OXYGEN_DEVICE_CODES: codes.OXYGEN_DEVICE_CODES,
    }
)


def fhir_system(v2_system: str) -> str:
    """The FHIR system URI of a v2 coding-system id; an unknown id is kept as sent, which is
    how a site's ConceptMap names a local v2 code system (``group.source``)."""
    return CODING_SYSTEMS.get(v2_system, v2_system)


# Result side: the project's CodeSystems under local v2 ids (render.py has the FHIR URIs).
DERIVED_SYSTEM = "99OXYDRV"  # .../CodeSystem/derived
MECHANISM_SYSTEM = "99OXYMEC"  # .../CodeSystem/hypoxaemia-mechanism
GRADE_SYSTEM = "99OXYGRD"  # .../CodeSystem/mechanism-grade
PATTERN_SYSTEM = "99OXYPAT"  # .../CodeSystem/hypoxaemia-pattern
FINDING_SYSTEM = "99OXYFND"  # .../CodeSystem/finding
SITE_FINDING_SYSTEM = "99OXYSFN"  # finding codes a rule set declares (its ruleset.yaml)
GAS_EXCHANGE_SYSTEM = "99OXYGXS"  # .../CodeSystem/gas-exchange-status

# --- Observation result status (HL7 table 0085) -> used or not --------------------------------
# V2-to-FHIR ConceptMap table-hl70085-to-observation-status: F->final, P->preliminary, C->corrected,
# A->amended, D and W->entered-in-error, X->cancelled; I, R, S, U, V, N, O, B have no row and
# are decided here. Only F, C, A and P are used, as their FHIR counterparts are by the FHIR
# adapter; every other code is ignored and reported with its reason.
USED_STATUS_RANK: MappingProxyType[str, int] = MappingProxyType(
    {"P": 1, "F": 2, "C": 3, "A": 3}  # a correction outranks a final, a final a preliminary
)
STATUS_NAMES: MappingProxyType[str, str] = MappingProxyType(
    {
        "P": "preliminary",
        "F": "final",
        "C": "corrected",
        "A": "amended",
        "B": "appended to a final report",
        "D": "deleted",
        "I": "specimen in lab, result pending",
        "N": "not asked",
        "O": "order detail only, no result",
        "R": "entered, not verified",
        "S": "partial",
        "U": "status changed to final without the result",
        "V": "verified",
        "W": "posted as wrong",
        "X": "cannot be obtained",
    }
)

# --- Administrative sex (HL7 table 0001) -> FHIR gender (V2-to-FHIR IG) -------------------
SEX_TO_GENDER: MappingProxyType[str, str] = MappingProxyType(
    {"F": "female", "M": "male", "O": "other", "A": "other", "N": "other", "U": "unknown"}
)

# --- Value types (HL7 table 0125) -----------------------------------------------------------
NUMERIC_TYPES = frozenset({"NM", "SN"})
CODED_TYPES = frozenset({"CWE", "CE", "CNE"})
VALUE_TYPES = NUMERIC_TYPES | CODED_TYPES | frozenset(
    {
        "AD", "CF", "CK", "CN", "CP", "CX", "DR", "DT", "DTM", "ED", "FT", "ID", "IS", "MA",
        "MO", "NA", "NR", "PN", "RP", "ST", "TM", "TN", "TS", "TX", "XAD", "XCN", "XON",
        "XPN", "XTN",
    }
)  # fmt: skip
SN_COMPARATORS = frozenset({"", "=", "<", ">", "<=", ">=", "<>"})
SN_SEPARATORS = frozenset({"-", "+", "/", ".", ":"})

# --- Specimen type (SPM-4, OBR-15.1) -> Specimen ---------------------------------------------
# Table 0487 (UTG): BLDA blood arterial, BLDV blood venous; table 0070 (older, still sent in
# OBR-15): BLDC capillary blood, which 0487 lacks (from memory). BLD (whole blood, type
# not stated) is deliberately absent: it leaves the specimen unknown, as in the FHIR adapter.
V2_SPECIMEN_CODES: MappingProxyType[str, Specimen] = MappingProxyType(
    {"BLDA": Specimen.ARTERIAL, "BLDV": Specimen.VENOUS, "BLDC": Specimen.CAPILLARY}
)
V2_SPECIMEN_TABLES = frozenset({"", "HL70487", "HL70070", codes.V2_SPECIMEN_TYPE})

# --- Message header --------------------------------------------------------------------------
SUPPORTED_VERSIONS = frozenset(
    {"2.3", "2.3.1", "2.4", "2.5", "2.5.1", "2.6", "2.7", "2.7.1", "2.8", "2.8.1", "2.8.2"}
)
PROCESSING_IDS = frozenset({"P", "T", "D"})  # HL7 table 0103: production, training, debugging
DEFAULT_VERSION = "2.5.1"
APPLICATION = "OXYRULE"  # our MSH-3 when the sender left its MSH-5 empty
