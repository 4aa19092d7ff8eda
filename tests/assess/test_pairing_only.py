"""A moment paired by ``pair_at`` (service/assess/pairing.py): it takes only the quantities it
is asked for, and its anchor is never replaced by another value of the same kind."""

from __future__ import annotations

from datetime import timedelta

from service.assess.assess import windows
from service.assess.pairing import group_measurements, pair_at
from service.config import Settings
from service.intake.model import Quantity as Q

from .builders import T0, intake, m


def test_only_the_quantities_asked_for_are_paired() -> None:
    spo2 = m(Q.SPO2, 0.9, 0)
    data = intake(spo2, m(Q.FIO2, 0.3, -10), m(Q.HAEMOGLOBIN, 13.0, -10))
    by_quantity, _ = group_measurements(data)
    moment = pair_at(spo2, by_quantity, windows(Settings()), only=frozenset({Q.FIO2}))
    assert set(moment.values) == {Q.SPO2, Q.FIO2}


def test_the_anchor_stays_when_the_moment_is_set_at_another_time() -> None:
    # An SpO2 reading anchors the moment; the time asked for is 20 minutes later, where
    # another SpO2 was read: the moment is still the anchor's reading.
    spo2, later = m(Q.SPO2, 0.9, 0, ident="first"), m(Q.SPO2, 0.95, 20, ident="later")
    data = intake(spo2, later, m(Q.FIO2, 0.3, -10))
    by_quantity, _ = group_measurements(data)
    moment = pair_at(
        spo2,
        by_quantity,
        windows(Settings()),
        only=frozenset({Q.SPO2, Q.FIO2}),
        at=T0 + timedelta(minutes=20),
    )
    assert moment.values[Q.SPO2] is spo2
