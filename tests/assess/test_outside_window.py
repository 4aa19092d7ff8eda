"""Values sent but taken too far from the gas are named, never silently dropped."""

from __future__ import annotations

from service.intake.model import Quantity as Q
from service.runtime import Runtime

from .builders import intake, m

DAY = 60 * 24


def test_a_value_outside_its_window_is_named_with_its_time_and_not_its_value() -> None:
    data = intake(
        m(Q.ARTERIAL_PO2, 58.0),
        m(Q.ARTERIAL_PCO2, 38.0),
        m(Q.FIO2, 0.21),
        m(Q.DLCO_PERCENT_PREDICTED, 0.43, -187 * DAY, ident="dlco"),
        m(Q.HAEMOGLOBIN, 13.7, -30 * 60, ident="hb"),
    )
    result = Runtime.load().assess_intake(data)
    outside = [f for f in result.findings if f.code == "value-outside-window"]
    by_place = {f.expression: f.message for f in outside}
    assert set(by_place) == {"Bundle.entry[0].resource/dlco", "Bundle.entry[0].resource/hb"}
    assert "187 days before the gas" in by_place["Bundle.entry[0].resource/dlco"]
    assert "beyond the 180 days" in by_place["Bundle.entry[0].resource/dlco"]
    assert "30 hours before" in by_place["Bundle.entry[0].resource/hb"]
    for message in by_place.values():
        assert "43" not in message and "13.7" not in message  # never the value sent
    assert all(f.severity.value == "information" for f in outside)


def test_an_fio2_outside_its_window_is_left_to_its_own_rule() -> None:
    data = intake(m(Q.ARTERIAL_PO2, 58.0), m(Q.ARTERIAL_PCO2, 38.0), m(Q.FIO2, 0.3, -6 * 60))
    codes = {f.code for f in Runtime.load().assess_intake(data).findings}
    assert "value-outside-window" not in codes
    assert "fio2-time-mismatch" in codes
