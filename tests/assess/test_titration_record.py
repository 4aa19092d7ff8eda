"""How a titration's points are taken from the record (service/assess/titration.py): the oxygen
setting in force at each reading, the readings left out and why, the levels counted and the
window the sources come from.

Each check states the rule it holds the code to: the pairing rule of the service's own docs
(a setting charted at or before a moment stays in force for the site's setting window, ends
included; else the nearest within the pairing window; else an untimed one), the oximeter's
specified range, the dyshaemoglobin limits and the titration's window. The readings are
invented; where a value is a published fact its source is named beside it.
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from service.assess.assess import windows
from service.assess.titration import (
    RecordPoints,
    Titration,
    TitrationRules,
    assess_titration,
    record_points,
    window_end,
)
from service.config import Settings
from service.intake.model import Fio2Source, Intake, Measurement
from service.intake.model import Quantity as Q
from service.physiology.titration import SAME_STEP_FIO2, MeasuredKind
from tests.titration_reference import ph2o_37_mmhg

from .builders import T0, intake, m

PB = 760.0
INDEX = {"barometric_pressure": PB, "water_vapour_pressure": ph2o_37_mmhg(), "age": 60.0}


def _fio2(value: float, minutes: float | None, ident: str | None = None) -> Measurement:
    return m(Q.FIO2, value, minutes, ident=ident, fio2_source=Fio2Source.MEASURED)


def _points(
    record: Intake, settings: Settings | None = None, rules: TitrationRules | None = None
) -> RecordPoints | None:
    chosen = settings or Settings()
    return record_points(
        record, windows=windows(chosen), settings=chosen, rules=rules or TitrationRules()
    )


def _fio2_by_minute(found: RecordPoints | None) -> dict[float, float]:
    """The FiO2 each kept point was paired with, by its minute after T0."""
    assert found is not None
    return {(p.time - T0) / timedelta(minutes=1): p.inspired.fio2 for p in found.kept}


def _titration(
    record: Intake,
    *,
    index_minutes: float,
    settings: Settings | None = None,
    predict: bool = True,
) -> Titration | None:
    chosen = settings or Settings()
    return assess_titration(
        record,
        index=dict(INDEX),
        index_time=T0 + timedelta(minutes=index_minutes),
        windows=windows(chosen),
        settings=chosen,
        predict=predict,
    )


# --- the setting in force at a reading ---------------------------------------------------------


def test_a_setting_charted_exactly_one_setting_window_before_a_reading_is_still_in_force() -> None:
    # The site's setting window (4 h by default) is inclusive: at 240 min the FiO2 of 0.28
    # charted at 0 is still the one in force, though a new FiO2 is charted 10 min later
    # (within the pairing window, which only counts when nothing is in force).
    assert Settings().setting_window_hours == 4.0
    record = intake(
        _fio2(0.28, 0.0),
        m(Q.SPO2, 0.90, 240.0),
        _fio2(0.35, 250.0),
        m(Q.SPO2, 0.93, 260.0),
    )
    assert _fio2_by_minute(_points(record)) == {240.0: 0.28, 260.0: 0.35}


def test_with_nothing_in_force_the_nearer_setting_before_or_after_is_paired() -> None:
    # A site holding a setting in force for 15 min only: a reading 20 min after the FiO2 of
    # 0.28 and 25 min before the FiO2 of 0.35 has neither in force, and both lie within the
    # 30 min pairing window: the nearer one (the earlier, 20 min away) is paired.
    settings = Settings(setting_window_hours=0.25)
    record = intake(
        _fio2(0.28, 0.0),
        m(Q.SPO2, 0.90, 20.0),
        _fio2(0.35, 45.0),
        m(Q.SPO2, 0.93, 60.0),  # 15 min after its FiO2: in force
    )
    assert _fio2_by_minute(_points(record, settings)) == {20.0: 0.28, 60.0: 0.35}


def test_a_reading_before_the_first_setting_takes_it_up_to_exactly_the_pairing_window() -> None:
    # Nothing charted before the first reading: the nearest setting within the pairing window
    # (30 min by default, ends included) is paired, here charted exactly 30 min later.
    assert Settings().pairing_window_minutes == 30.0
    record = intake(
        m(Q.SPO2, 0.90, 0.0),
        _fio2(0.28, 30.0),
        m(Q.SPO2, 0.91, 40.0),
        _fio2(0.35, 60.0),
        m(Q.SPO2, 0.93, 70.0),
    )
    found = _points(record)
    assert _fio2_by_minute(found) == {0.0: 0.28, 40.0: 0.28, 70.0: 0.35}
    assert found is not None and found.left_out == []


def test_an_untimed_setting_counts_as_a_second_setting_and_is_paired_when_no_timed_one_is() -> None:
    # Room air charted without a time and one timed FiO2 of 0.35: two settings, so the record
    # can hold a titration; a reading far from the timed FiO2 takes the untimed one.
    record = intake(
        _fio2(0.21, None, ident="fio2-untimed"),
        m(Q.SPO2, 0.88, -100.0),
        _fio2(0.35, 0.0),
        m(Q.SPO2, 0.93, 10.0),
    )
    assert _fio2_by_minute(_points(record)) == {-100.0: 0.21, 10.0: 0.35}


# --- what is skipped, left out and kept ---------------------------------------------------------


def _two_steps() -> list[Measurement]:
    return [_fio2(0.28, 0.0), m(Q.SPO2, 0.90, 8.0), _fio2(0.35, 20.0), m(Q.SPO2, 0.93, 28.0)]


def test_one_spo2_or_pao2_value_is_no_titration_whatever_the_settings() -> None:
    record = intake(_fio2(0.28, 0.0), m(Q.SPO2, 0.90, 8.0), _fio2(0.35, 20.0))
    assert _points(record) is None


def test_a_reading_without_a_time_is_neither_a_point_nor_left_out() -> None:
    untimed = m(Q.SPO2, 0.95, None, ident="spo2-untimed")
    found = _points(intake(*_two_steps(), untimed))
    assert found is not None
    assert _fio2_by_minute(found) == {8.0: 0.28, 28.0: 0.35}
    assert found.left_out == []


def test_an_spo2_at_the_oximeters_lower_limit_is_kept_and_one_below_is_left_out() -> None:
    # Pulse oximeters are specified from 70 % SpO2 upwards (ISO 80601-2-61:2017, accuracy
    # over 70-100 %, from memory); the rule set's limit is the lowest value still specified.
    rules = TitrationRules()
    assert rules.oximeter_low == 0.70
    record = intake(
        _fio2(0.28, 0.0),
        m(Q.SPO2, 0.70, 8.0),
        _fio2(0.35, 20.0),
        m(Q.SPO2, 0.69, 28.0),
        m(Q.SPO2, 0.75, 30.0),
    )
    found = _points(record, rules=rules)
    assert _fio2_by_minute(found) == {8.0: 0.28, 30.0: 0.35}
    assert found is not None and [d.value for d in found.left_out] == [0.69]
    assert "SpO2 below 70%" in found.left_out[0].reason


@pytest.mark.parametrize(
    ("quantity", "limit_name"),
    [(Q.CARBOXYHAEMOGLOBIN, "carboxyhaemoglobin_high"), (Q.METHAEMOGLOBIN, "methaemoglobin_high")],
)
def test_spo2_is_usable_up_to_exactly_the_dyshaemoglobin_limit_and_not_above(
    quantity: Q, limit_name: str
) -> None:
    # COHb and MetHb read as oxyhaemoglobin by a two-wavelength oximeter (common practice);
    # the rule set says above which fraction SpO2 is unreliable.
    rules = TitrationRules()
    limit = getattr(rules, limit_name)
    at_limit = _points(intake(*_two_steps(), m(quantity, limit, 10.0)), rules=rules)
    assert _fio2_by_minute(at_limit) == {8.0: 0.28, 28.0: 0.35}
    above = _points(intake(*_two_steps(), m(quantity, limit + 0.01, 10.0)), rules=rules)
    assert above is not None and above.kept == []
    assert all("SpO2 unreliable" in d.reason for d in above.left_out)


def test_a_left_out_reading_keeps_its_own_kind() -> None:
    # An SpO2 and a gas taken 100 min before any setting (beyond the pairing window) have no
    # FiO2: each is left out as what it is.
    record = intake(
        m(Q.SPO2, 0.91, -100.0, ident="spo2-early"),
        m(Q.ARTERIAL_PO2, 65.0, -100.0, ident="pao2-early"),
        *_two_steps(),
    )
    found = _points(record)
    assert found is not None
    kinds = {d.reference: (d.kind, d.fio2, d.reason) for d in found.left_out}
    assert kinds == {
        "Observation/spo2-early": (MeasuredKind.SPO2, None, "no FiO2 known for it"),
        "Observation/pao2-early": (MeasuredKind.PAO2, None, "no FiO2 known for it"),
    }


# --- levels, window and sources -----------------------------------------------------------------


def _steps(levels: tuple[tuple[float, float], ...], start: float = 0.0) -> list[Measurement]:
    """(FiO2, SpO2) steps of 20 min, each FiO2 charted at its step's start, the SpO2 8 min in."""
    out: list[Measurement] = []
    for i, (fio2, spo2) in enumerate(levels):
        t = start + 20.0 * i
        out += [_fio2(fio2, t, ident=f"fio2-{t:g}"), m(Q.SPO2, spo2, t + 8.0, ident=f"spo2-{t:g}")]
    return out


def test_an_spo2_above_97_percent_is_not_counted_among_the_informative_levels() -> None:
    # Above 97 % the oxyhaemoglobin curve is flat and SpO2 says little about PaO2 (O'Driscoll
    # BR et al., BTS guideline 2017, target band 94-98 %; the module's docs): such points do
    # not count as FiO2 levels. 97 % itself still counts.
    record = intake(*_steps(((0.28, 0.90), (0.35, 0.94), (0.40, 0.97), (0.50, 0.98))))
    found = _titration(record, index_minutes=68.0)
    assert found is not None
    assert found.fio2_levels == 3
    assert found.facts["titration_fio2_levels"] == 3.0
    assert found.facts["titration_fio2_highest"] == 0.40


def test_points_on_two_levels_only_outside_the_window_are_no_titration() -> None:
    # A step of FiO2 0.21 five hours earlier, then two readings on 0.28: inside the 120 min
    # window there is one FiO2 level only, and one level fits nothing.
    record = intake(
        _fio2(0.21, -300.0),
        m(Q.SPO2, 0.86, -292.0),
        _fio2(0.28, 0.0),
        m(Q.SPO2, 0.90, 8.0),
        m(Q.SPO2, 0.91, 15.0),
    )
    found = _points(record)
    assert found is not None and sorted(set(_fio2_by_minute(found).values())) == [0.21, 0.28]
    assert _titration(record, index_minutes=15.0) is None


def test_predictions_are_made_only_when_asked() -> None:
    record = intake(*_steps(((0.24, 0.86), (0.28, 0.89), (0.35, 0.92), (0.40, 0.94))))
    asked = _titration(record, index_minutes=68.0)
    assert asked is not None and asked.fit is not None and asked.prediction is not None
    not_asked = _titration(record, index_minutes=68.0, predict=False)
    assert not_asked is not None and not_asked.fit is not None
    assert not_asked.prediction is None
    assert not any(name.startswith("predicted_") for name in not_asked.facts)


def test_the_sources_are_those_of_the_points_inside_the_window_ends_included() -> None:
    # The window (120 min by default) ends at the index reading at 120 min and starts exactly
    # at 0: the readings at both ends are inside, the step five hours earlier is not.
    assert Settings().titration_window_minutes == 120.0
    record = intake(
        _fio2(0.21, -200.0, ident="fio2-early"),
        m(Q.SPO2, 0.86, -190.0, ident="spo2-early"),
        _fio2(0.28, -10.0, ident="fio2-first"),
        m(Q.SPO2, 0.90, 0.0, ident="spo2-start"),
        m(Q.SPO2, 0.90, 60.0, ident="spo2-middle"),
        _fio2(0.35, 100.0, ident="fio2-second"),
        m(Q.SPO2, 0.93, 120.0, ident="spo2-end"),
    )
    found = _titration(record, index_minutes=120.0)
    assert found is not None
    assert found.series.window_start == T0 and found.series.window_end == T0 + timedelta(
        minutes=120
    )
    assert {s.reference for s in found.sources} == {
        "Observation/fio2-first",
        "Observation/spo2-start",
        "Observation/spo2-middle",
        "Observation/fio2-second",
        "Observation/spo2-end",
    }


def test_the_window_ends_at_the_latest_point_up_to_exactly_one_window_after_the_index() -> None:
    window = timedelta(minutes=120)
    index = T0
    later = [T0 + timedelta(minutes=t) for t in (30.0, 120.0, 121.0)]
    assert window_end(later, index, window) == T0 + window  # one window after: included
    assert window_end(later[:1] + later[2:], index, window) == T0 + timedelta(minutes=30)
    assert window_end(later[2:], index, window) == index  # none in reach: the index gas
    assert window_end(later, None, window) is None  # no index time: the series decides


# --- half a point of FiO2 is one step (0.405 - 0.40 is 0.0050000000000000044 in floating point) ---


def test_a_change_of_half_a_point_of_fio2_is_the_same_step() -> None:
    # An analyser charting FiO2 to 0.1 % reads 0.405 after 0.40: no more than SAME_STEP_FIO2
    # apart, the same step, so the reading 2 min later is settled and the two are one level.
    assert SAME_STEP_FIO2 == 0.005
    record = intake(
        _fio2(0.40, 0.0),
        m(Q.SPO2, 0.93, 8.0),
        _fio2(0.405, 20.0),
        m(Q.SPO2, 0.93, 22.0),
    )
    found = _points(record)
    assert found is not None and found.left_out == []
    assert _titration(record, index_minutes=22.0) is None  # one FiO2 level: nothing to fit


def test_fio2s_half_a_point_apart_count_as_one_level() -> None:
    # A gas on an analysed FiO2 of 0.405 between oximetry on 0.40 and 0.50: two levels.
    record = intake(
        _fio2(0.40, 0.0),
        m(Q.SPO2, 0.93, 8.0),
        _fio2(0.405, 20.0),
        m(Q.ARTERIAL_PO2, 75.0, 28.0),
        m(Q.ARTERIAL_PCO2, 40.0, 28.0),
        _fio2(0.50, 40.0),
        m(Q.SPO2, 0.95, 48.0),
    )
    found = _titration(record, index_minutes=28.0)
    assert found is not None and len(found.series.points) == 3
    assert found.fio2_levels == 2 and found.facts["titration_fio2_levels"] == 2.0
