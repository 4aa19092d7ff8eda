"""How derived values are shown, whatever the output (FHIR, HL7 v2, text): their order, their
display precision, and the pressure unit a site or a request chose.

Values stay in canonical units inside the service; this is the one place where a pressure is
converted for display.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import lru_cache
from typing import TYPE_CHECKING, Any, Literal

from service.engine.rationale import NO_UNITS, DisplayUnit, Units
from service.physiology.units import kpa_from_mmhg
from service.terminology.codes import UCUM

if TYPE_CHECKING:
    from service.assess.derivation import Derived

PressureUnit = Literal["mm[Hg]", "kPa"]
Json = dict[str, Any]


# Derived quantities in the order the result lists them, with display decimals.
QUANTITY_ORDER = (
    "barometric-pressure",
    "water-vapour-pressure",
    "fio2",
    "inspired-po2",
    "alveolar-po2",
    "aa-gradient",
    "aa-gradient-upper-limit",
    "room-air-alveolar-po2",
    "room-air-pao2",
    "room-air-pao2-least",
    "room-air-pao2-most",
    "pao2-expected",
    "pao2-lower-limit",
    "paco2-upper-limit",
    "a-a-ratio",
    "pf-ratio",
    "sf-ratio",
    "arterial-o2-content",
    "shunt-fraction",
    "venous-admixture",
    "shunt-dissolved-bound",
    "imputed-pao2",
    "expected-hco3",
)
DECIMALS = {"fio2": 2, "a-a-ratio": 2, "pf-ratio": 0, "sf-ratio": 0}


QuantityShape = tuple[int, str, bool]
"""How one kind of value is shown: (display decimals, UCUM unit shown, whether a mm[Hg] value
is converted to kPa). Depends only on the value's name, unit and the pressure unit asked for."""


def quantity(name: str, value: float, unit: str, pressure_unit: PressureUnit) -> Json:
    """A UCUM Quantity, converting pressures to kPa when asked, rounded for display."""
    return shaped(value, quantity_shape(name, unit, pressure_unit))


def quantity_of(name: str, unit: str, pressure_unit: PressureUnit) -> Callable[[float], Json]:
    """``quantity`` for one name and unit, its decimals and conversion looked up once (for a
    series of values of one kind: the oxygen-response prediction curve)."""
    shape = quantity_shape(name, unit, pressure_unit)

    def of(value: float) -> Json:
        return shaped(value, shape)

    return of


@lru_cache(maxsize=1024)
def quantity_shape(name: str, unit: str, pressure_unit: PressureUnit) -> QuantityShape:
    """How a value of ``name`` in ``unit`` is shown for ``pressure_unit`` (looked up once per
    kind: the names and units are the service's own, a few dozen)."""
    if unit == "mm[Hg]" and pressure_unit == "kPa":
        return (2 if name != "pf-ratio" else 1), "kPa", True
    return DECIMALS.get(name, 1), unit, False


def derived_shape(name: str, unit: str, pressure_unit: PressureUnit) -> QuantityShape:
    """``quantity_shape`` of a derived value (``shown_quantity``): S/F is shown in %."""
    if name == "sf-ratio":
        decimals, _, convert = quantity_shape(name, "1", pressure_unit)
        return decimals, "%", convert
    return quantity_shape(name, unit, pressure_unit)


def shaped(value: float, shape: QuantityShape) -> Json:
    """The Quantity of ``value`` (canonical unit) shown as ``shape`` says: the one rule by
    which a shown value is converted and rounded (``service.fhir.render`` writes it out in its
    loops over many values, the same three steps)."""
    decimals, unit, convert = shape
    if convert:
        value = kpa_from_mmhg(value)
    # + 0.0 turns a negative zero (a part that rounds to nothing) into 0.0.
    rounded = round(value, decimals) + 0.0
    return {
        "value": rounded if decimals else float(int(rounded)),
        "unit": unit,
        "system": UCUM,
        "code": unit,
    }


def display_round(value: float, decimals: int, scale: float) -> float:
    """``round(value, decimals) + 0.0`` as ``shaped`` shows it (a whole number as a float when
    ``decimals`` is 0); ``scale`` is ``10.0 ** decimals``.

    Written out because Python's ``round`` with places (a correctly rounded decimal string
    and back) costs more than the rest of a shown Quantity, and the renderer rounds a few
    dozen values per result. The exact product ``value * 10**decimals`` lies within a
    rounding error (under 2.5e-7 below 1e9) of ``scaled``; when ``scaled`` is farther than
    1e-4 from the midpoint between two integers, the nearest integer to both is the same, so
    it is the one ``round`` rounds to, and dividing it by the exact power of ten gives the
    double nearest the decimal, as ``round`` does (IEEE 754 division is correctly rounded; a
    zero comes out +0.0). Near a midpoint, or out of range (NaN, infinities), ``round``
    itself decides. ``tests/fhir/test_render_kept.py`` checks it against ``round``."""
    scaled = value * scale
    if -1e9 < scaled < 1e9 and -0.4999 < scaled - (whole := round(scaled)) < 0.4999:
        return whole / scale
    rounded = round(value, decimals) + 0.0  # + 0.0: no negative zero
    return rounded if decimals else float(int(rounded))


KPA_PER_MMHG_SHOWN = kpa_from_mmhg(1.0)
"""The factor text uses to show a mm[Hg] value in kPa (the one conversion, ``units``)."""
_DISPLAY: dict[PressureUnit, Units] = {
    "mm[Hg]": NO_UNITS,
    # One decimal more than the mmHg value: 65.0 mmHg reads 8.67 kPa (as ``quantity`` does).
    "kPa": {"mm[Hg]": DisplayUnit("kPa", KPA_PER_MMHG_SHOWN, extra_decimals=1)},
}


def display_units(unit: PressureUnit) -> Units:
    """What the rule engine's sentences show a pressure in, for a requested pressure unit."""
    return _DISPLAY[unit]


def pressure_text(value_mmhg: float, unit: PressureUnit, decimals: int = 1) -> str:
    """A pressure for a sentence: ``65.0 mmHg`` or ``8.67 kPa`` (one decimal more in kPa)."""
    if unit == "kPa":
        return f"{kpa_from_mmhg(value_mmhg):.{decimals + 1}f} kPa"
    return f"{value_mmhg:.{decimals}f} mmHg"


def pressure_label(unit: PressureUnit) -> str:
    """The unit as a reader writes it: ``mmHg`` or ``kPa``."""
    return "mmHg" if unit == "mm[Hg]" else "kPa"


def shown_quantity(name: str, d: Derived, pressure_unit: PressureUnit) -> Json:
    """A derived value's Quantity. S/F is SpO2 in % over FiO2 as a fraction, so its number
    (e.g. 405) is in UCUM ``%``; unit ``1`` would make it 405, not 4.05 (UCUM: % = 10^-2)."""
    return shaped(d.value, derived_shape(name, d.unit, pressure_unit))
