"""What if: the same case with one input changed, assessed again by the same service.

The bench's what-if panel sends the case as it was loaded and the inputs the rule owner moved;
this module changes those inputs in the case's ``Intake`` (nothing else), and the service
assesses it as it assesses any input. No physiology or rule is computed here: a change is
a measurement replaced, added or (for the pressure, when an altitude is chosen) removed.

Each input is the one the index gas was assessed with: the FiO2, PaCO2, Hb and pressure paired
with it (replaced where they were sent, added at the gas's time where they were not), the
patient's age at the gas's date (as a birth date), the altitude of the site.

A PaCO2 changed alone would contradict the pH and HCO3 of the same sample, and the service's
data check would rightly refuse the gas; so the pH is recomputed from the new PaCO2 and the
HCO3 as sent (Henderson: [H+] = 24 × PaCO2 / HCO3, Kassirer & Bleich 1965), as a sample with
that PaCO2 and the same bicarbonate would read. The physiology core computes it.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime

from msgspec.structs import replace  # the intake records are msgspec Structs

from service.assess.pairing import PairedGas
from service.intake.model import (
    Fio2Source,
    Intake,
    Measurement,
    Patient,
    Quantity,
    Source,
    Specimen,
)
from service.physiology.acid_base import hydrogen_ion_nmol_l, ph_from_hydrogen_ion
from service.physiology.bounds import AGE_YEARS, ALTITUDE_M
from service.physiology.units import FIO2_LIMITS

WHAT_IF = "what-if"
"""The reference prefix of a value the what-if panel added (``Observation/what-if-fio2``)."""


class WhatIfError(ValueError):
    """A what-if value outside what the service accepts; the message names the input."""


@dataclass(frozen=True, slots=True)
class Field:
    """One what-if input: its key, label, canonical unit and the range the panel offers."""

    key: str
    label: str
    unit: str
    low: float
    high: float
    step: float
    start: float
    """Where the control starts when the case did not send the input (a typical value)."""


# Pressures are in mm[Hg] here; the bench shows and sends them in the unit the reader chose.
FIELDS = (
    Field("fio2", "FiO2", "1", FIO2_LIMITS[0], FIO2_LIMITS[1], 0.01, 0.21),
    Field("altitude_m", "Altitude", "m", ALTITUDE_M[0], 5500.0, 50.0, 0.0),
    Field("barometric_pressure_mmhg", "Barometric pressure", "mm[Hg]", 350.0, 800.0, 1.0, 760.0),
    Field("age_years", "Age", "a", max(AGE_YEARS[0], 18.0), min(AGE_YEARS[1], 100.0), 1.0, 50.0),
    Field("paco2_mmhg", "PaCO2", "mm[Hg]", 15.0, 120.0, 1.0, 40.0),
    Field("haemoglobin_g_dl", "Hb", "g/dL", 4.0, 22.0, 0.1, 14.0),
)
FIELD = {f.key: f for f in FIELDS}


@dataclass(frozen=True, slots=True)
class WhatIf:
    """The inputs to change (None: as sent). Canonical units."""

    fio2: float | None = None
    altitude_m: float | None = None
    barometric_pressure_mmhg: float | None = None
    age_years: float | None = None
    paco2_mmhg: float | None = None
    haemoglobin_g_dl: float | None = None

    @classmethod
    def of(cls, values: dict[str, float]) -> WhatIf:
        """Checked values by key; an unknown key or a value out of range is a ``WhatIfError``."""
        checked: dict[str, float] = {}
        for key, value in values.items():
            field = FIELD.get(key)
            if field is None:
                raise WhatIfError(f"{key}: not a what-if input ({', '.join(FIELD)})")
            if not isinstance(value, int | float) or isinstance(value, bool):
                raise WhatIfError(f"{key}: a number is needed")
            if not field.low <= float(value) <= field.high:
                raise WhatIfError(
                    f"{key}: outside {field.low:g} to {field.high:g} {field.unit}".rstrip()
                )
            checked[key] = float(value)
        if "altitude_m" in checked and "barometric_pressure_mmhg" in checked:
            raise WhatIfError("set the altitude or the barometric pressure, not both")
        return cls(**checked)

    @property
    def empty(self) -> bool:
        return all(getattr(self, f.key) is None for f in FIELDS)


def _added(quantity: Quantity, value: float, at: datetime | None, **more: object) -> Measurement:
    source = Source(f"Observation/{WHAT_IF}-{quantity.value}", f"what-if.{quantity.value}")
    return Measurement(quantity, value, at, source, **more)  # type: ignore[arg-type]


def _set(
    measurements: list[Measurement],
    paired: Measurement | None,
    new: Measurement,
) -> list[Measurement]:
    """``paired`` replaced by ``new`` (its value, time and specimen kept apart), or ``new``
    added when nothing was paired."""
    if paired is None:
        return [*measurements, new]
    changed = replace(
        paired, value=new.value, sent_value=None, sent_unit=None, fio2_source=new.fio2_source
    )
    return [changed if m is paired else m for m in measurements]


def _consistent_ph(
    measurements: list[Measurement], gas: PairedGas, paco2_mmhg: float
) -> list[Measurement]:
    """The gas's pH recomputed for a new PaCO2 and the HCO3 as sent (module docstring)."""
    ph, hco3 = gas.get(Quantity.ARTERIAL_PH), gas.get(Quantity.ARTERIAL_HCO3)
    if ph is None or hco3 is None or not isinstance(hco3.value, float | int):
        return measurements
    hydrogen = hydrogen_ion_nmol_l(paco2_mmhg=paco2_mmhg, hco3_mmol_l=float(hco3.value))
    new = _added(
        Quantity.ARTERIAL_PH, round(ph_from_hydrogen_ion(hydrogen_ion_nmol_l=hydrogen), 3), None
    )
    return _set(measurements, ph, new)


def _birth_date(at: date, age_years: float) -> date:
    years = int(age_years)
    try:
        return at.replace(year=at.year - years)
    except ValueError:  # 29 February in a year without one
        return at.replace(year=at.year - years, day=28)


def apply_what_if(intake: Intake, gas: PairedGas, changes: WhatIf) -> Intake:
    """``intake`` with the index gas's inputs changed as ``changes`` says."""
    at = gas.time
    measurements = list(intake.measurements)
    if changes.fio2 is not None:
        new = _added(Quantity.FIO2, changes.fio2, at, fio2_source=Fio2Source.MEASURED)
        measurements = _set(measurements, gas.get(Quantity.FIO2), new)
    if changes.paco2_mmhg is not None:
        new = _added(Quantity.ARTERIAL_PCO2, changes.paco2_mmhg, at, specimen=Specimen.ARTERIAL)
        measurements = _set(measurements, gas.get(Quantity.ARTERIAL_PCO2), new)
        measurements = _consistent_ph(measurements, gas, changes.paco2_mmhg)
    if changes.haemoglobin_g_dl is not None:
        new = _added(Quantity.HAEMOGLOBIN, changes.haemoglobin_g_dl, at)
        measurements = _set(measurements, gas.get(Quantity.HAEMOGLOBIN), new)
    if changes.barometric_pressure_mmhg is not None:
        new = _added(Quantity.BAROMETRIC_PRESSURE, changes.barometric_pressure_mmhg, at)
        measurements = _set(measurements, gas.get(Quantity.BAROMETRIC_PRESSURE), new)
    if changes.altitude_m is not None:
        # The altitude decides the pressure only when no pressure was measured.
        measurements = [m for m in measurements if m.quantity is not Quantity.BAROMETRIC_PRESSURE]
        new = _added(Quantity.ALTITUDE, changes.altitude_m, at)
        measurements = _set(measurements, gas.get(Quantity.ALTITUDE), new)
    patient = intake.patient
    if changes.age_years is not None:
        born = _birth_date((at or datetime.now()).date(), changes.age_years)
        patient = (
            replace(patient, birth_date=born)
            if patient is not None
            else Patient(reference=f"Patient/{WHAT_IF}", birth_date=born, gender=None)
        )
    return Intake(patient=patient, measurements=measurements, issues=list(intake.issues))
