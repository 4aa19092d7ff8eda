"""Where the barometric pressure and the FiO2 of a gas come from, in order of precedence.

Barometric pressure: measured > altitude model > site altitude setting > sea level assumed.
FiO2: measured or set (ventilator) > estimated from device and flow > room air by site
setting > none. Each choice is recorded (``barometric_source``, ``fio2_source``, the
provenance flags the data-quality rules read) so the result can say how the number was got.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from service.config import Settings
from service.exceptions import PhysiologyError
from service.intake.model import Fio2Source, Measurement, Quantity, Source
from service.physiology import constants as c
from service.physiology.atmosphere import barometric_pressure_mmhg
from service.physiology.oxygen_delivery import OxygenDevice, estimate_fio2

from .derivation import Derived, DerivedTable

if TYPE_CHECKING:  # derive imports the catalogue, which lists this module's facts
    from .derive import GasFacts

table = DerivedTable()


@table.flag("on_supplemental_oxygen", "Breathing supplemental oxygen")
def on_supplemental_oxygen(*, fio2: float) -> bool:
    return fio2 > c.ROOM_AIR_FIO2 + c.ROOM_AIR_FIO2_TOLERANCE


FACTS = tuple(table.facts)

MEASURED_PRESSURE = "measured"
ALTITUDE_MODEL = "altitude-model"
SITE_SETTING = "site-setting"
SEA_LEVEL_ASSUMED = "sea-level-assumed"


def _number(m: Measurement | None) -> float | None:
    return m.value if m is not None and isinstance(m.value, float) else None


def _sources(*found: Measurement | None) -> tuple[Source, ...]:
    return tuple(m.source for m in found if m is not None)


def barometric_pressure(out: GasFacts, settings: Settings) -> float:
    """Set the barometric pressure fact of ``out`` and file how it was got; return it."""
    measured = out.gas.get(Quantity.BAROMETRIC_PRESSURE)
    altitude = out.gas.get(Quantity.ALTITUDE)
    pb = _number(measured)
    source, method = MEASURED_PRESSURE, "measured ambient pressure"
    inputs = _sources(measured)
    candidates = (
        (_number(altitude), ALTITUDE_MODEL, _sources(altitude)),
        (settings.site_altitude_m, SITE_SETTING, ()),
    )
    for at, where, found in candidates:
        if pb is not None or at is None:
            continue
        try:
            pb = barometric_pressure_mmhg(altitude_m=at, model=settings.altitude_model)
        except PhysiologyError as error:
            out.problems.append(f"barometric_pressure: {error}")
            continue
        source, inputs = where, found
        method = f"{settings.altitude_model.value} model atmosphere at {at:g} m"
    if pb is None:
        pb, source, method, inputs = (
            c.SEA_LEVEL_PRESSURE_MMHG,
            SEA_LEVEL_ASSUMED,
            "assumed sea level",
            (),
        )
    out.barometric_source = source
    out.set_fact("barometric_pressure", pb, inputs)
    out.facts["barometric_pressure_estimated"] = source in (ALTITUDE_MODEL, SITE_SETTING)
    out.facts["barometric_pressure_assumed"] = source == SEA_LEVEL_ASSUMED
    out.derived["barometric-pressure"] = Derived(pb, "mm[Hg]", method, inputs)
    return pb


def inspired_oxygen_fraction(out: GasFacts, settings: Settings) -> float | None:
    """Set the FiO2 fact of ``out`` (when it can be known) and its flags; return it."""
    sent = out.gas.get(Quantity.FIO2)
    device = out.gas.get(Quantity.OXYGEN_DEVICE)
    flow = out.gas.get(Quantity.OXYGEN_FLOW)
    fio2 = _number(sent)
    estimated = False
    inputs: tuple[Source, ...] = ()
    method = "as sent"
    if fio2 is not None:
        assert sent is not None  # fio2 is the number sent
        out.fio2_source = (sent.fio2_source or Fio2Source.MEASURED).value
        inputs = _sources(sent)
    elif device is not None and isinstance(device.value, str):
        try:
            estimate = estimate_fio2(device=OxygenDevice(device.value), flow_l_min=_number(flow))
        except (PhysiologyError, ValueError) as error:
            out.problems.append(f"fio2: {error}")
        else:
            fio2, out.fio2_range = estimate.fio2, (estimate.low, estimate.high)
            out.fio2_source = Fio2Source.DEVICE_ESTIMATE.value
            estimated = device.value != OxygenDevice.NONE_ROOM_AIR
            inputs = _sources(device, flow)
            method = (
                f"estimated from {estimate.basis} (range {estimate.low:.2f}–{estimate.high:.2f})"
            )
    if fio2 is None and settings.assume_room_air:
        fio2, method = c.ROOM_AIR_FIO2, "room air assumed by site setting"
        out.fio2_source = Fio2Source.SITE_SETTING.value
    out.facts["fio2_estimated_from_flow"] = estimated
    out.facts["fio2_time_mismatch"] = sent is None and Quantity.FIO2 in out.gas.out_of_window
    if fio2 is None:
        return None
    out.set_fact("fio2", fio2, inputs)
    out.derived["fio2"] = Derived(fio2, "1", method, inputs)
    return fio2
