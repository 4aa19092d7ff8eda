"""Where the FiO2 of a gas comes from, as the provenance flags the data-quality rules read say
it (service/assess/sources.py): sent, estimated from a device and flow, assumed by the site,
or not known; and charted in time with the gas or not (the pairing window, 30 min by
default)."""

from __future__ import annotations

import pytest

from service.intake.model import Quantity as Q
from service.physiology import constants as c

from .builders import m
from .test_slips import gas

FLAGS = ("fio2_sent", "fio2_estimated_from_flow", "fio2_time_mismatch")


def _flags(*measurements: object, **settings: object) -> tuple[object, ...]:
    found = gas(m(Q.ARTERIAL_PO2, 70.0), *measurements, **settings)
    return tuple(found.facts[name] for name in FLAGS)


def test_an_fio2_sent_with_the_gas() -> None:
    assert _flags(m(Q.FIO2, 0.4)) == (True, False, False)


def test_a_device_and_flow_give_an_estimate() -> None:
    # A nasal cannula at 2 L/min: an estimate from the flow (common practice, ~0.28).
    assert _flags(m(Q.OXYGEN_DEVICE, "nasal-cannula"), m(Q.OXYGEN_FLOW, 2.0)) == (
        True,
        True,
        False,
    )


def test_room_air_assumed_by_the_site_is_no_estimate() -> None:
    found = gas(m(Q.ARTERIAL_PO2, 70.0), assume_room_air=True)
    assert found.facts["fio2"] == c.ROOM_AIR_FIO2
    assert tuple(found.facts[name] for name in FLAGS) == (True, False, False)


def test_nothing_said_of_the_fio2() -> None:
    assert _flags() == (False, False, False)


@pytest.mark.parametrize(
    ("minutes", "mismatch"),
    [
        # Charted up to the pairing window before the gas: in time with it.
        (-30.0, False),
        # Charted earlier, the setting is still the one in force (within the setting window),
        # and the result says it was charted away from the gas.
        (-31.0, True),
        (-120.0, True),
    ],
)
def test_a_setting_charted_away_from_the_gas_is_flagged(minutes: float, mismatch: bool) -> None:
    assert _flags(m(Q.FIO2, 0.4, minutes)) == (True, False, mismatch)


def test_an_fio2_charted_only_long_after_the_gas_is_not_used_and_flagged() -> None:
    found = gas(m(Q.ARTERIAL_PO2, 70.0), m(Q.FIO2, 0.4, 90.0))
    assert "fio2" not in found.facts
    assert tuple(found.facts[name] for name in FLAGS) == (False, False, True)
