"""The one code table: which codes the service reads, and what each one means to it.

Every LOINC code, project code, device code and specimen code an adapter (FHIR or HL7 v2)
depends on lives here, with an evidence tag beside it saying where the meaning was confirmed.
A code maps to a ``Concept``: the intake ``Quantity`` it fills, the ``Dimension`` its unit is
converted through (``units.py``), and the specimen the code itself implies (LOINC puts the
specimen in the code's SYSTEM axis). Code sets of one message standard (FHIR's required
bindings) stay with that adapter.

Evidence tags (what was looked at to confirm a code's meaning): USC HL7 US Core IG
pulse-oximetry profile and examples; FVS FHIR core ``observation-vitalsign-oxygensat``
ValueSet and the R4 oxygen-saturation profile; VAL the HL7 FHIR Validator's vital-sign code
lists; MII German Medical Informatics Initiative ICU module profiles; GEC HL7 Germany GECCO
IG profiles; SAN HL7 SANER IG ``VentilatorObservations`` ValueSet; LNC LOINC term pages; LNm
third-party pages reproducing LOINC names; VA VA VistA LOINC short names; MIM MIMIC lab-item
LOINC mapping; DIC DICOM CID 3524 "Blood Gas Pressure"; EHC eHealth Connector (Swiss) LOINC
names; 2ry two or more independent public code tables agree (secondary evidence only);
UTG HL7 Terminology (THO) source files.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType

from service.exceptions import UnitError
from service.intake.model import QUANTITY_UNITS, Fio2Source, Quantity, Specimen
from service.physiology.oxygen_delivery import OxygenDevice
from service.physiology.reference import Residence
from service.physiology.units import Dimension, normalise_fio2, to_canonical, unit_named

# --- Code system and profile URLs -----------------------------------------------------------

LOINC = "http://loinc.org"
UCUM = "http://unitsofmeasure.org"
SNOMED_CT = "http://snomed.info/sct"
IEEE_11073 = "urn:iso:std:iso:11073:10101"
V2_SPECIMEN_TYPE = "http://terminology.hl7.org/CodeSystem/v2-0487"

INPUT_CODES = "https://oxyrule.org/fhir/CodeSystem/input"
OXYGEN_DEVICE_CODES = "https://oxyrule.org/fhir/CodeSystem/oxygen-device"
ALTITUDE_RESIDENCE_CODES = "https://oxyrule.org/fhir/CodeSystem/altitude-residence"


# --- What a code means ----------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Concept:
    """What one code means to the service.

    ``dimension`` is None for coded quantities (no unit) and for quantities that have no
    ``Dimension`` in ``units.py`` yet (DLCO): those accept only their canonical unit.
    ``specimen`` is what the code implies; None when the value does not come from a blood
    sample (pulse oximetry, FiO2, ...). ``by_specimen`` is set only for the LOINC "Bld" codes
    whose specimen is not in the code: the quantity then follows ``Observation.specimen``, and
    ``quantity`` is the one used when the specimen stays unknown (the measurement then carries
    ``Specimen.UNKNOWN`` and a ``specimen-unknown`` issue, so it is never taken as arterial
    silently). ``lower_limit`` is the quantity the Observation's ``referenceRange.low`` fills
    (the lower limit of normal of a DLCO), None when the range is not read.
    """

    quantity: Quantity
    dimension: Dimension | None
    specimen: Specimen | None = None
    fio2_source: Fio2Source | None = None
    by_specimen: MappingProxyType[Specimen, Quantity] | None = field(default=None)
    lower_limit: Quantity | None = None

    def to_canonical(self, value: float, unit: str) -> tuple[float, bool]:
        """(value in the quantity's canonical unit, whether the sender's unit was reinterpreted).

        FiO2 goes through ``normalise_fio2`` (a fraction sent as % and the reverse); a quantity
        with no ``Dimension`` takes only its canonical unit. Shared by the FHIR and HL7 v2
        adapters so the two read values alike.

        Raises:
            UnitError: the quantity cannot take ``unit``.
            ImpossibleValueError: an FiO2 outside its limits once read as a fraction.
        """
        if self.quantity is Quantity.FIO2:
            fio2 = normalise_fio2(value, unit)
            return fio2.fraction, fio2.reinterpreted
        if self.dimension is None:
            canonical = QUANTITY_UNITS[self.quantity]
            if unit != canonical:
                raise UnitError(unit, self.quantity.value, (canonical,), named=unit_named(unit))
            return value, False
        return to_canonical(value, unit, self.dimension), False


def _blood(quantity: Quantity, dimension: Dimension, specimen: Specimen) -> Concept:
    return Concept(quantity, dimension, specimen)


def _unspecified_blood(
    arterial: Quantity, venous: Quantity, capillary: Quantity, dimension: Dimension
) -> Concept:
    return Concept(
        arterial,
        dimension,
        Specimen.UNKNOWN,
        by_specimen=MappingProxyType(
            {
                Specimen.ARTERIAL: arterial,
                Specimen.VENOUS: venous,
                Specimen.CAPILLARY: capillary,
            }
        ),
    )


_P = Dimension.PRESSURE
_PH = Dimension.PH
_FR = Dimension.FRACTION
_Q = Quantity
_S = Specimen

# LOINC code -> Concept, with evidence tags (see the module docstring).
LOINC_CONCEPTS: MappingProxyType[str, Concept] = MappingProxyType(
    {
        # Arterial blood gas
        "2703-7": _blood(_Q.ARTERIAL_PO2, _P, _S.ARTERIAL),  # GEC, VA, DIC, LNm
        "2019-8": _blood(_Q.ARTERIAL_PCO2, _P, _S.ARTERIAL),  # GEC, VA, DIC
        "2744-1": _blood(_Q.ARTERIAL_PH, _PH, _S.ARTERIAL),  # GEC, 2ry
        "1960-4": _blood(_Q.ARTERIAL_HCO3, Dimension.SUBSTANCE_CONCENTRATION, _S.ARTERIAL),  # 2ry
        "1925-7": _blood(_Q.ARTERIAL_BASE_EXCESS, Dimension.SUBSTANCE_CONCENTRATION, _S.ARTERIAL),
        # 2708-6 alone is SaO2 by co-oximetry; beside 59408-5 (US Core) it is SpO2
        "2708-6": _blood(_Q.ARTERIAL_SO2, _FR, _S.ARTERIAL),  # USC, FVS, GEC
        # Fractional oxyhaemoglobin (O2Hb / total Hb) of a co-oximeter; not comparable with SpO2
        # until divided by 1 − COHb − MetHb. 51733-4 (saturation calculated from the PO2) is
        # not read: it adds nothing to the PO2.
        "2714-4": _blood(_Q.ARTERIAL_O2HB, _FR, _S.ARTERIAL),  # 2ry
        # Pulse oximetry Not a blood sample: no specimen.
        "59408-5": Concept(_Q.SPO2, _FR),  # USC, FVS
        "59417-6": Concept(_Q.SPO2, _FR),  # FVS (resting)
        "59407-7": Concept(_Q.SPO2, _FR),  # GEC (preductal)
        "59418-4": Concept(_Q.SPO2, _FR),  # LNC (postductal)
        # Venous, mixed venous, central venous
        "2705-2": _blood(_Q.VENOUS_PO2, _P, _S.VENOUS),  # EHC, VA, DIC, 2ry
        "2021-4": _blood(_Q.VENOUS_PCO2, _P, _S.VENOUS),  # EHC, VA, DIC
        "2746-6": _blood(_Q.VENOUS_PH, _PH, _S.VENOUS),  # 2ry
        "2711-0": _blood(_Q.VENOUS_SO2, _FR, _S.VENOUS),  # LNC, VA
        "19211-2": _blood(_Q.MIXED_VENOUS_PO2, _P, _S.MIXED_VENOUS),  # VA short name only
        "19224-5": _blood(_Q.MIXED_VENOUS_SO2, _FR, _S.MIXED_VENOUS),  # LNm, VAL
        "97549-0": _blood(_Q.CENTRAL_VENOUS_SO2, _FR, _S.CENTRAL_VENOUS),  # 2ry, VAL
        # Capillary
        "2704-5": _blood(_Q.CAPILLARY_PO2, _P, _S.CAPILLARY),  # GEC, VA, 2ry
        "2020-6": _blood(_Q.CAPILLARY_PCO2, _P, _S.CAPILLARY),  # GEC, VA
        "2745-8": _blood(_Q.CAPILLARY_PH, _PH, _S.CAPILLARY),  # GEC, LNm
        # Blood, specimen not stated: the specimen comes from Observation.specimen.
        "11556-8": _unspecified_blood(_Q.ARTERIAL_PO2, _Q.VENOUS_PO2, _Q.CAPILLARY_PO2, _P),
        "11557-6": _unspecified_blood(_Q.ARTERIAL_PCO2, _Q.VENOUS_PCO2, _Q.CAPILLARY_PCO2, _P),
        "11558-4": _unspecified_blood(_Q.ARTERIAL_PH, _Q.VENOUS_PH, _Q.CAPILLARY_PH, _PH),
        # Inspired oxygen, delivery, ventilator FiO2 goes through normalise_fio2.
        "3150-0": Concept(_Q.FIO2, _FR, fio2_source=Fio2Source.MEASURED),  # USC, GEC, LNm
        "71835-3": Concept(_Q.FIO2, _FR, fio2_source=Fio2Source.MEASURED),  # MII
        "19994-3": Concept(_Q.FIO2, _FR, fio2_source=Fio2Source.VENTILATOR_SETTING),  # MII, SAN
        "3151-8": Concept(_Q.OXYGEN_FLOW, Dimension.FLOW),  # USC
        "19941-4": Concept(_Q.OXYGEN_FLOW, Dimension.FLOW),  # GEC
        "107117-4": Concept(_Q.OXYGEN_DEVICE, None),  # 2ry — confirm
        "20077-4": Concept(_Q.PEEP, Dimension.AIRWAY_PRESSURE),  # SAN, 2ry (setting)
        "76248-4": Concept(_Q.PEEP, Dimension.AIRWAY_PRESSURE),  # MII (applied)
        "76530-5": Concept(_Q.MEAN_AIRWAY_PRESSURE, Dimension.AIRWAY_PRESSURE),  # SAN, MII
        "9279-1": Concept(_Q.RESPIRATORY_RATE, Dimension.RATE),  # GEC, VAL
        # Other inputs
        "8310-5": Concept(_Q.BODY_TEMPERATURE, Dimension.TEMPERATURE),  # GEC, VAL, USC
        "718-7": Concept(_Q.HAEMOGLOBIN, Dimension.HAEMOGLOBIN),  # GEC, VA
        "55782-7": Concept(_Q.HAEMOGLOBIN, Dimension.HAEMOGLOBIN),  # GEC (by oximetry)
        "30313-1": _blood(_Q.HAEMOGLOBIN, Dimension.HAEMOGLOBIN, _S.ARTERIAL),  # MII
        "14775-1": _blood(_Q.HAEMOGLOBIN, Dimension.HAEMOGLOBIN, _S.ARTERIAL),  # GEC
        "20563-3": Concept(_Q.CARBOXYHAEMOGLOBIN, _FR),  # MIM, 2ry
        "2614-6": Concept(_Q.METHAEMOGLOBIN, _FR),  # MIM, 2ry
        "76268-2": Concept(_Q.BAROMETRIC_PRESSURE, _P),  # LNm (IEEE-derived)
        # DLCO: units.py has no Dimension for mL/min/mm[Hg] yet, so only that unit is read.
        "19911-7": Concept(_Q.DLCO, None, lower_limit=_Q.DLCO_LOWER_LIMIT),  # LNC
    }
)

# Project CodeSystem https://oxyrule.org/fhir/CodeSystem/input: inputs with no LOINC term
# .
INPUT_CONCEPTS: MappingProxyType[str, Concept] = MappingProxyType(
    {
        "altitude": Concept(_Q.ALTITUDE, Dimension.LENGTH),
        "dlco-percent-predicted": Concept(
            _Q.DLCO_PERCENT_PREDICTED, _FR, lower_limit=_Q.DLCO_PERCENT_LOWER_LIMIT
        ),
        "altitude-residence": Concept(_Q.ALTITUDE_RESIDENCE, None),
        "spo2-exertional-nadir": Concept(_Q.SPO2_EXERTIONAL_NADIR, _FR),
        "spo2-exertional-baseline": Concept(_Q.SPO2_EXERTIONAL_BASELINE, _FR),
    }
)

# Codes that say "by pulse oximetry" when they stand beside 2708-6.
PULSE_OXIMETRY_LOINC = frozenset({"59408-5", "59417-6", "59407-7", "59418-4"})
IEEE_PULSE_OXIMETRY = "150456"  # MDC_PULS_OXIM_SAT_O2, USC example
SPO2_LOINC = "59408-5"


# The code systems the service reads directly, each with its table (one lookup per coding).
CONCEPTS_BY_SYSTEM: MappingProxyType[str, MappingProxyType[str, Concept]] = MappingProxyType(
    {LOINC: LOINC_CONCEPTS, INPUT_CODES: INPUT_CONCEPTS}
)


def concept_for(system: str, code: str) -> Concept | None:
    """The Concept of a coding the service reads directly (LOINC or the project input codes)."""
    table = CONCEPTS_BY_SYSTEM.get(system)
    return None if table is None else table.get(code)


# --- Coded values (valueCodeableConcept, a coded OBX-5) ---------------------------------------

OXYGEN_DEVICES = frozenset(device.value for device in OxygenDevice)
ALTITUDE_RESIDENCES = frozenset(residence.value for residence in Residence)

# SNOMED CT physical-object concepts -> our device codes. Only codes that several independent
# public code tables and HL7 IG ConceptMaps name the same way (secondary evidence, "2ry");
# some tables mislabel 426854004, so confirm in a SNOMED browser. No code was
# found with enough agreement for simple-mask, ventilator or room air: those stay unmapped.
SNOMED_OXYGEN_DEVICES: MappingProxyType[str, str] = MappingProxyType(
    {
        "336623009": "nasal-cannula",  # Oxygen nasal cannula (physical object)
        "426854004": "high-flow-nasal",  # High flow oxygen nasal cannula (physical object)
        "427591007": "non-rebreather-mask",  # Nonrebreather oxygen mask (physical object)
        "428285009": "venturi-mask",  # Venturi mask (physical object)
    }
)


CODE_SYSTEM_OF: MappingProxyType[Quantity, str] = MappingProxyType(
    {_Q.OXYGEN_DEVICE: OXYGEN_DEVICE_CODES, _Q.ALTITUDE_RESIDENCE: ALTITUDE_RESIDENCE_CODES}
)
"""The project CodeSystem of each coded quantity."""
_CODES_OF: MappingProxyType[Quantity, frozenset[str]] = MappingProxyType(
    {_Q.OXYGEN_DEVICE: OXYGEN_DEVICES, _Q.ALTITUDE_RESIDENCE: ALTITUDE_RESIDENCES}
)


def coded_value(quantity: Quantity, system: str, code: str) -> str | None:
    """The value a coding gives a coded quantity (our code), or None when it means nothing to
    the service: the quantity's project CodeSystem, or for devices a mapped SNOMED CT code."""
    if system == CODE_SYSTEM_OF[quantity] and code in _CODES_OF[quantity]:
        return code
    if quantity is _Q.OXYGEN_DEVICE and system == SNOMED_CT:
        return SNOMED_OXYGEN_DEVICES.get(code)
    return None


# --- Specimen type (Specimen.type), for the "Bld" codes ---------------------------------------

#: SNOMED CT specimen concepts (2ry) and HL7 v2 table 0487 (UTG). BLD (whole
# blood, type not stated) is deliberately absent: it leaves the specimen unknown.
SPECIMEN_TYPES: MappingProxyType[tuple[str, str], Specimen] = MappingProxyType(
    {
        (SNOMED_CT, "122552005"): Specimen.ARTERIAL,  # Arterial blood specimen
        (SNOMED_CT, "122555007"): Specimen.VENOUS,  # Venous blood specimen
        (SNOMED_CT, "122554006"): Specimen.CAPILLARY,  # Capillary blood specimen
        (V2_SPECIMEN_TYPE, "BLDA"): Specimen.ARTERIAL,  # Blood arterial
        (V2_SPECIMEN_TYPE, "BLDV"): Specimen.VENOUS,  # Blood venous
    }
)


def _first_codes() -> dict[str, tuple[str, str]]:
    """Quantity name -> the first (system, code) that fills it, LOINC before project codes."""
    found: dict[str, tuple[str, str]] = {}
    for system, table in ((LOINC, LOINC_CONCEPTS), (INPUT_CODES, INPUT_CONCEPTS)):
        for code, concept in table.items():
            if concept.by_specimen is None:
                found.setdefault(concept.quantity.value, (system, code))
    return found


_CODE_FOR_QUANTITY = MappingProxyType(_first_codes())


def code_for_fact(fact: str) -> tuple[str, str] | None:
    """The (system, code) to request a measured fact by, e.g. ``arterial_po2`` → 2703-7.

    The reverse of the table above, for ``GuidanceResponse.dataRequirement``; None for facts
    the service derives rather than reads.
    """
    return _CODE_FOR_QUANTITY.get(fact)


# Derived values filed as Observations: (LOINC code or None for our own code, display).
DERIVED_OBSERVATION_CODES: dict[str, tuple[str | None, str]] = {
    "alveolar-po2": (None, "Alveolar oxygen partial pressure (alveolar gas equation)"),
    "aa-gradient": (
        "19991-9",
        "Oxygen.alveolar - arterial [Partial pressure difference] Respiratory system",
    ),
    "pf-ratio": ("50984-4", "Horowitz index in Arterial blood"),
    "sf-ratio": (None, "Oxygen saturation by pulse oximetry / inspired oxygen fraction"),
    # No LOINC term for the a/A ratio could be confirmed (78354-8 was not found in LOINC's
    # published tables): a code of the project's CodeSystem.
    "a-a-ratio": (None, "Arterial-alveolar oxygen partial pressure ratio (PaO2 / PAO2)"),
    "shunt-fraction": (None, "Shunt fraction (venous admixture) estimate"),
}
