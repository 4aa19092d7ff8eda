"""The fact catalogue of the default rule set, assembled from the tables that own each fact.

- Measured facts: one line each here; the accepted range is the intake range table's
  (``service.intake.plausibility``) in the unit the catalogue presents (percent for
  fractions), so every value the intake accepts, the catalogue accepts.
- Derived facts: the derived-fact table (``service.assess.derived``), whose functions declare
  the inputs the catalogue lists.
- Serial facts: ``service.assess.serial``; facts fitted to a titration:
  ``service.assess.titration``. Provenance flags: here.

The ranges are wide on purpose: they reject impossible numbers (a unit slip, a typing error)
and leave judging what is abnormal to the rules. A leaf compares one fact with one number, so
where a rule needs the size of a signed difference the catalogue carries it as its own fact
(``ph_henderson_gap``, ``spo2_sao2_gap``, ``fio2_step``).
"""

from __future__ import annotations

from dataclasses import dataclass

from service.engine.catalogue import FactCatalogue
from service.engine.facts import FactKind, FactOrigin, FactSpec
from service.intake.model import CODED, QUANTITY_UNITS, Quantity
from service.intake.plausibility import POSSIBLE_RANGE
from service.physiology.bounds import AGE_YEARS
from service.physiology.oxygen_delivery import OxygenDevice
from service.physiology.reference import Residence
from service.physiology.units import to_fact_unit

from .derivation import check_order
from .derived import DERIVED_FACTS
from .serial import SERIAL_FACTS
from .titration import FITTED_FACTS

__all__ = ["AGE", "DEFAULT_CATALOGUE", "MEASURED", "OXYGEN_DEVICES", "PROVENANCE"]

OXYGEN_DEVICES = frozenset(device.value for device in OxygenDevice)
ALTITUDE_RESIDENCES = frozenset(residence.value for residence in Residence)
_CODES = {Quantity.OXYGEN_DEVICE: OXYGEN_DEVICES, Quantity.ALTITUDE_RESIDENCE: ALTITUDE_RESIDENCES}
AGE = "age"


@dataclass(frozen=True, slots=True)
class Measured:
    """A measured quantity as the rules see it: the unit they read it in and its precision."""

    quantity: Quantity
    unit: str
    decimals: int
    description: str

    @property
    def name(self) -> str:
        return self.quantity.value

    def spec(self) -> FactSpec:
        canonical = QUANTITY_UNITS[self.quantity]
        if self.quantity in CODED:
            return FactSpec(
                self.name, FactKind.CODE, None, self.description, allowed=_CODES[self.quantity]
            )
        if self.unit != canonical and not (self.unit == "%" and canonical == "1"):
            raise ValueError(
                f"{self.name}: the catalogue cannot present {canonical} as {self.unit}"
            )
        low, high = POSSIBLE_RANGE[self.quantity]
        return FactSpec(
            self.name,
            FactKind.QUANTITY,
            self.unit,
            self.description,
            to_fact_unit(low, self.unit),
            to_fact_unit(high, self.unit),
            decimals=self.decimals,
        )


_Q = Quantity
MMHG = "mm[Hg]"

# One line per fact keeps the table reviewable; the formatter would spread it over 100 lines.
# fmt: off
MEASURED: tuple[Measured, ...] = (
    Measured(_Q.ARTERIAL_PO2, MMHG, 1, "Partial pressure of oxygen, arterial blood"),
    Measured(_Q.ARTERIAL_PCO2, MMHG, 1, "Partial pressure of carbon dioxide, arterial"),
    Measured(_Q.ARTERIAL_PH, "[pH]", 2, "pH of arterial blood"),
    Measured(_Q.ARTERIAL_HCO3, "mmol/L", 1, "Bicarbonate, arterial blood"),
    Measured(_Q.ARTERIAL_SO2, "%", 1, "Oxygen saturation of arterial haemoglobin (functional)"),
    Measured(_Q.ARTERIAL_O2HB, "%", 1, "Fractional oxyhaemoglobin, arterial (O2Hb / total Hb)"),
    Measured(_Q.SPO2, "%", 1, "Oxygen saturation by pulse oximetry"),
    Measured(_Q.FIO2, "1", 2, "Fraction of inspired oxygen"),
    Measured(_Q.OXYGEN_FLOW, "L/min", 1, "Supplemental oxygen flow rate"),
    Measured(_Q.HAEMOGLOBIN, "g/dL", 1, "Haemoglobin concentration, blood"),
    Measured(_Q.CARBOXYHAEMOGLOBIN, "%", 1, "Carboxyhaemoglobin fraction"),
    Measured(_Q.METHAEMOGLOBIN, "%", 1, "Methaemoglobin fraction"),
    Measured(_Q.BODY_TEMPERATURE, "Cel", 1, "Body temperature"),
)
MEASURED_AFTER_AGE: tuple[Measured, ...] = (
    Measured(_Q.BAROMETRIC_PRESSURE, MMHG, 0, "Ambient barometric pressure"),
    Measured(_Q.ALTITUDE, "m", 0, "Altitude above sea level where the gas was drawn"),
    Measured(_Q.ALTITUDE_RESIDENCE, "", 0, "Lives at this altitude (resident) or visiting"),
    Measured(_Q.MIXED_VENOUS_PO2, MMHG, 1, "Partial pressure of oxygen, mixed venous"),
    Measured(_Q.MIXED_VENOUS_SO2, "%", 0, "Oxygen saturation, mixed venous blood"),
    Measured(_Q.DLCO, "mL/min/mm[Hg]", 1, "Diffusing capacity for CO"),
    Measured(_Q.DLCO_LOWER_LIMIT, "mL/min/mm[Hg]", 1, "Lower limit of normal of the DLCO"),
    Measured(_Q.DLCO_PERCENT_PREDICTED, "%", 0, "Diffusing capacity for CO, % predicted"),
    Measured(_Q.DLCO_PERCENT_LOWER_LIMIT, "%", 0, "Lower limit of normal of the DLCO, % pred."),
    Measured(_Q.SPO2_EXERTIONAL_NADIR, "%", 1, "Lowest SpO2 during an exercise test"),
    Measured(_Q.SPO2_EXERTIONAL_BASELINE, "%", 1, "SpO2 at rest before the exercise test"),
    Measured(_Q.PEEP, "cm[H2O]", 0, "Positive end-expiratory pressure"),
    Measured(_Q.RESPIRATORY_RATE, "/min", 0, "Respiratory rate"),
    Measured(_Q.OXYGEN_DEVICE, "", 0, "Oxygen delivery device in use"),
)
# fmt: on
AGE_SPEC = FactSpec(AGE, FactKind.QUANTITY, "a", "Age in years", *AGE_YEARS, decimals=0)


def _flag(name: str, description: str) -> FactSpec:
    return FactSpec(name, FactKind.BOOLEAN, None, description, origin=FactOrigin.PROVENANCE)


PROVENANCE: tuple[FactSpec, ...] = (
    _flag("fio2_sent", "An FiO2, an oxygen device or a site setting says what was breathed"),
    _flag("fio2_raised_by_pao2", "The PaO2 needs more oxygen than the low end of the estimate"),
    _flag("fio2_estimated_from_flow", "FiO2 was estimated from device and flow"),
    _flag("fio2_time_mismatch", "FiO2 was recorded too far from the sample time"),
    _flag("barometric_pressure_estimated", "Barometric pressure was estimated from altitude"),
    _flag("barometric_pressure_assumed", "Barometric pressure was assumed to be sea level"),
    _flag("arterial_gas_present", "An arterial blood gas was supplied"),
    _flag("specimen_unknown", "The specimen type of the gas was not stated"),
    _flag("specimen_not_arterial", "The specimen was stated to be other than arterial"),
    _flag("sao2_by_cooximetry", "SaO2 was measured by co-oximetry, not calculated"),
)

# The least FiO2 the PaO2 allows when a device estimate had to be narrowed (``uncertainty``).
FIO2_LOWEST_POSSIBLE = FactSpec(
    "fio2_lowest_possible",
    FactKind.QUANTITY,
    "1",
    "The least FiO2 the PaO2 allows, when it is above the low end of the device's range",
    0.0,
    1.0,
    decimals=2,
    origin=FactOrigin.PROVENANCE,
)

MEASURED_SPECS: tuple[FactSpec, ...] = (
    *(m.spec() for m in MEASURED),
    AGE_SPEC,
    *(m.spec() for m in MEASURED_AFTER_AGE),
)
check_order(DERIVED_FACTS, [spec.name for spec in MEASURED_SPECS + PROVENANCE])

DEFAULT_CATALOGUE = FactCatalogue(
    (
        *MEASURED_SPECS,
        *(entry.spec for entry in DERIVED_FACTS),
        *SERIAL_FACTS,
        *FITTED_FACTS,
        *PROVENANCE,
        FIO2_LOWEST_POSSIBLE,
    )
)
"""The catalogue the default rule set and the intake agree on."""

MEASURED_FACTS: tuple[Measured, ...] = MEASURED + MEASURED_AFTER_AGE
"""Every measured quantity the rules read (age, from the birth date, aside)."""
