"""Where the barometric pressure and the FiO2 of a gas come from, in order of precedence.

Barometric pressure: measured > altitude model > site altitude setting > sea level assumed.
FiO2: measured or set (ventilator) > estimated from device and flow > room air by site
setting > none. Each choice is recorded (``barometric_source``, ``fio2_source``, the
provenance flags the data-quality rules read) so the result can say how the number was got.
"""

from __future__ import annotations

from datetime import timedelta
from typing import TYPE_CHECKING

import msgspec

from service.config import Settings
from service.exceptions import PhysiologyError
from service.intake.model import Fio2Source, Measurement, Quantity, Source
from service.physiology import constants as c
from service.physiology.atmosphere import barometric_pressure_mmhg
from service.physiology.oxygen_delivery import OxygenDevice, estimate_fio2

from .derivation import Derived, DerivedTable
from .pairing import PairedGas

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
    # A loop, not a generator: in Python 3.11 a generator is a frame made and thrown away.
    out: tuple[Source, ...] = ()
    for m in found:
        if m is not None:
            out += (m.source,)
    return out


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


class InspiredChoice(msgspec.Struct, frozen=True, gc=False):
    """The FiO2 of one moment and how it was known: ``fio2`` None when it cannot be known;
    ``fio2_range`` the range of a device estimate (None when measured, set or assumed);
    ``source`` a ``Fio2Source`` value; ``estimated`` True for a flow-based estimate.

    A frozen msgspec Struct rather than a frozen dataclass, whose ``__init__`` sets each of
    its seven fields through ``object.__setattr__``: one is made per gas. Numbers, strings
    and tuples of ``Source`` (a Struct without gc) cannot form a cycle, hence ``gc=False``."""

    fio2: float | None
    fio2_range: tuple[float, float] | None
    source: str | None
    estimated: bool
    inputs: tuple[Source, ...]
    method: str
    problem: str | None = None


def choose_inspired_oxygen(gas: PairedGas, settings: Settings) -> InspiredChoice:
    """The FiO2 of ``gas`` (a gas, or any moment paired like one), by precedence: measured or
    set > estimated from device and flow > room air by site setting > none."""
    sent = gas.get(Quantity.FIO2)
    device = gas.get(Quantity.OXYGEN_DEVICE)
    flow = gas.get(Quantity.OXYGEN_FLOW)
    fio2 = _number(sent)
    if sent is not None and fio2 is not None:
        source = (sent.fio2_source or Fio2Source.MEASURED).value
        return InspiredChoice(fio2, None, source, False, _sources(sent), "as sent")
    problem: str | None = None
    if device is not None and isinstance(device.value, str):
        try:
            estimate = estimate_fio2(device=OxygenDevice(device.value), flow_l_min=_number(flow))
        except (PhysiologyError, ValueError) as error:
            problem = f"fio2: {error}"
        else:
            return InspiredChoice(
                estimate.fio2,
                (estimate.low, estimate.high),
                Fio2Source.DEVICE_ESTIMATE.value,
                device.value != OxygenDevice.NONE_ROOM_AIR,
                _sources(device, flow),
                f"estimated from {estimate.basis} (range {estimate.low:.2f}–{estimate.high:.2f})",
            )
    if settings.assume_room_air:
        return InspiredChoice(
            c.ROOM_AIR_FIO2,
            None,
            Fio2Source.SITE_SETTING.value,
            False,
            (),
            "room air assumed by site setting",
            problem,
        )
    return InspiredChoice(None, None, None, False, (), "as sent", problem)


def inspired_oxygen_fraction(out: GasFacts, settings: Settings) -> float | None:
    """Set the FiO2 fact of ``out`` (when it can be known) and its flags; return it."""
    choice = choose_inspired_oxygen(out.gas, settings)
    if choice.problem is not None:
        out.problems.append(choice.problem)
    sent = out.gas.get(Quantity.FIO2)
    fio2 = choice.fio2
    out.fio2_source = choice.source
    out.fio2_range = choice.fio2_range
    out.facts["fio2_sent"] = fio2 is not None
    out.facts["fio2_estimated_from_flow"] = choice.estimated
    # A setting charted outside the pairing window is used as the one in force, and said so.
    offset = out.gas.offset(Quantity.FIO2)
    late = offset is not None and abs(offset) > timedelta(minutes=settings.pairing_window_minutes)
    out.facts["fio2_time_mismatch"] = (sent is None and Quantity.FIO2 in out.gas.out_of_window) or (
        sent is not None and late
    )
    if fio2 is None:
        return None
    out.set_fact("fio2", fio2, choice.inputs)
    out.derived["fio2"] = Derived(fio2, "1", choice.method, choice.inputs)
    return fio2
