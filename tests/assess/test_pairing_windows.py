"""The edges of the pairing windows (service/assess/pairing.py): a setting charted up to the
setting window before a gas is still in force (4 h by default), and a context value up to the
pairing window from it belongs to it (30 min by default); both edges are inclusive."""

from __future__ import annotations

from service.config import Settings
from service.intake.model import Quantity as Q

from .builders import m
from .test_slips import gas

SETTINGS = Settings()


def test_a_setting_charted_exactly_one_setting_window_before_is_in_force() -> None:
    minutes = -60.0 * SETTINGS.setting_window_hours
    found = gas(m(Q.ARTERIAL_PO2, 70.0), m(Q.FIO2, 0.4, minutes))
    assert found.facts["fio2"] == 0.4
    beyond = gas(m(Q.ARTERIAL_PO2, 70.0), m(Q.FIO2, 0.4, minutes - 1.0))
    assert "fio2" not in beyond.facts


def test_a_context_value_exactly_one_pairing_window_away_belongs_to_the_gas() -> None:
    minutes = SETTINGS.pairing_window_minutes
    found = gas(m(Q.ARTERIAL_PO2, 70.0), m(Q.SPO2, 0.93, minutes))
    assert found.gas.get(Q.SPO2) is not None
    assert found.gas.untimed == []  # a timed value is never reported as untimed
    beyond = gas(m(Q.ARTERIAL_PO2, 70.0), m(Q.SPO2, 0.93, minutes + 1.0))
    assert beyond.gas.get(Q.SPO2) is None
