"""The range of values each intake quantity can possibly take, in its canonical unit.

These limits catch unit slips and transcription errors (a PaO2 of −5, a pH of 9.1), not
abnormal results: each is wide on purpose. A value outside its range is reported as
``value-out-of-range`` (error) and not used. Limits shared with the physiology core come from
``service.physiology.bounds``; the rest are set here, each with its reason.

This table serves every adapter (FHIR, HL7 v2), and it is the one range table of the service:
the rule catalogue takes the accepted range of each measured fact from it
(``service.assess.catalogue``), so a value accepted here is never refused there.
"""

from __future__ import annotations

from types import MappingProxyType

from service.intake.model import QUANTITY_UNITS, Quantity
from service.physiology import bounds
from service.physiology.units import FIO2_LIMITS

_PRESSURE = bounds.PARTIAL_PRESSURE_MMHG
_FRACTION = bounds.FRACTION
# No oximeter or analyser reports a saturation of 1 % or less; it is what a fraction sent with
# unit "%" becomes (0.97 % = 0.0097). Starting the range at 2 % refuses that slip instead of
# reading it as a fatally low value. Fractions sent as "1" above 1 fail the upper limit.
_SATURATION = (0.02, 1.0)


def _by_suffix(
    suffixes: tuple[str, ...], limits: tuple[float, float]
) -> dict[Quantity, tuple[float, float]]:
    return {q: limits for q in Quantity if q.value.endswith(suffixes)}


POSSIBLE_RANGE: MappingProxyType[Quantity, tuple[float, float]] = MappingProxyType(
    {
        **_by_suffix(("_po2",), _PRESSURE),
        **_by_suffix(("_pco2",), bounds.CARBON_DIOXIDE_MMHG),
        **_by_suffix(("_ph",), bounds.PH),
        **_by_suffix(("so2",), _SATURATION),
        Quantity.SPO2: _SATURATION,
        Quantity.ARTERIAL_O2HB: _SATURATION,
        Quantity.SPO2_EXERTIONAL_NADIR: _SATURATION,
        Quantity.SPO2_EXERTIONAL_BASELINE: _SATURATION,
        Quantity.ARTERIAL_HCO3: bounds.BICARBONATE_MMOL_L,
        Quantity.ARTERIAL_BASE_EXCESS: (-50.0, 50.0),  # far beyond any survivable acid-base state
        Quantity.FIO2: FIO2_LIMITS,  # also enforced by units.normalise_fio2
        Quantity.OXYGEN_FLOW: (0.0, 80.0),  # high-flow nasal systems top out at 60-80 L/min
        Quantity.PEEP: (0.0, 50.0),  # cm[H2O]; clinical settings stay below ~25
        Quantity.MEAN_AIRWAY_PRESSURE: (0.0, 80.0),  # cm[H2O]
        Quantity.RESPIRATORY_RATE: (0.0, 300.0),  # /min; apnoea to high-frequency ventilation
        Quantity.BODY_TEMPERATURE: bounds.BODY_TEMPERATURE_CEL,
        Quantity.HAEMOGLOBIN: bounds.HAEMOGLOBIN_G_DL,
        Quantity.CARBOXYHAEMOGLOBIN: _FRACTION,
        Quantity.METHAEMOGLOBIN: _FRACTION,
        Quantity.BAROMETRIC_PRESSURE: bounds.PRESSURE_BAROMETRIC_MMHG,
        Quantity.ALTITUDE: bounds.ALTITUDE_M,
        Quantity.DLCO: (0.0, 100.0),  # mL/min/mm[Hg]; adult normal is ~25-35
        Quantity.DLCO_PERCENT_PREDICTED: (0.05, 3.0),  # fraction; below 5 % is a unit slip
        Quantity.DLCO_LOWER_LIMIT: (0.0, 100.0),  # as DLCO
        Quantity.DLCO_PERCENT_LOWER_LIMIT: (0.05, 3.0),  # as DLCO % predicted
    }
)


def out_of_range(quantity: Quantity, value: float) -> str | None:
    """Why ``value`` (canonical unit) is impossible for ``quantity``, or None if possible."""
    limits = POSSIBLE_RANGE.get(quantity)
    if limits is None:
        return None
    low, high = limits
    if low <= value <= high:
        return None
    unit = QUANTITY_UNITS[quantity]
    return f"a possible value lies between {low:g} and {high:g} {unit}"
