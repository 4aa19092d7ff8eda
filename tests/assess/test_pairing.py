"""Pairing gases with the values of the same moment (README, What it reads)."""

from __future__ import annotations

from datetime import timedelta

from service.assess.pairing import Windows, pair_gases
from service.intake.model import Quantity as Q
from service.intake.model import Specimen

from .builders import intake, m

WINDOWS = Windows(
    same_sample=timedelta(minutes=5),
    context=timedelta(minutes=30),
    setting=timedelta(hours=4),
    haemoglobin=timedelta(hours=24),
    dyshaemoglobins=timedelta(hours=4),
    temperature=timedelta(hours=4),
    lung_function=timedelta(days=180),
)


def test_latest_arterial_po2_is_the_index_gas() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 60.0, -120), m(Q.ARTERIAL_PO2, 70.0, 0)), windows=WINDOWS
    )
    assert [g.anchor.value for g in pairing.gases if g.anchor] == [70.0, 60.0]


def test_context_is_the_nearest_value_inside_the_window() -> None:
    pairing = pair_gases(
        intake(
            m(Q.ARTERIAL_PO2, 70.0, 0),
            m(Q.FIO2, 0.4, -25),
            m(Q.FIO2, 0.3, -10),
            m(Q.FIO2, 0.6, 50),
        ),
        windows=WINDOWS,
    )
    assert pairing.index.values[Q.FIO2].value == 0.3


def test_fio2_outside_the_window_is_not_used_but_kept_for_reporting() -> None:
    # After the gas only the pairing window applies (a later setting was not in force).
    pairing = pair_gases(intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.4, 45)), windows=WINDOWS)
    assert Q.FIO2 not in pairing.index.values
    assert pairing.index.out_of_window[Q.FIO2].value == 0.4
    # Before the gas, beyond the hours a setting is taken to stay in force.
    stale = pair_gases(intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.4, -5 * 60)), windows=WINDOWS)
    assert Q.FIO2 not in stale.index.values
    assert stale.index.out_of_window[Q.FIO2].value == 0.4


def test_a_setting_charted_hours_before_the_gas_is_the_one_in_force() -> None:
    # Oxygen settings are charted when set and stay in force until changed (common practice);
    # the latest one before the gas wins over one charted just after it.
    pairing = pair_gases(
        intake(
            m(Q.ARTERIAL_PO2, 70.0, 0),
            m(Q.FIO2, 0.5, -3 * 60),
            m(Q.FIO2, 0.35, -2 * 60),
            m(Q.FIO2, 0.6, 10),
        ),
        windows=WINDOWS,
    )
    assert pairing.index.values[Q.FIO2].value == 0.35
    assert pairing.index.offset(Q.FIO2) == timedelta(hours=2)


def test_each_kind_of_value_has_its_own_window() -> None:
    day = 60 * 24
    data = intake(
        m(Q.ARTERIAL_PO2, 70.0, 0),
        m(Q.HAEMOGLOBIN, 12.0, -20 * 60),  # within a day
        m(Q.CARBOXYHAEMOGLOBIN, 0.02, -5 * 60),  # beyond 4 h
        m(Q.BODY_TEMPERATURE, 38.5, -3 * 60),  # within 4 h
        m(Q.DLCO_PERCENT_PREDICTED, 0.45, -150 * day),  # within 180 days
        m(Q.SPO2_EXERTIONAL_NADIR, 0.86, -200 * day),  # beyond 180 days
        m(Q.SPO2, 0.9, -40),  # beyond the pairing window
    )
    gas = pair_gases(data, windows=WINDOWS).index
    assert {Q.HAEMOGLOBIN, Q.BODY_TEMPERATURE, Q.DLCO_PERCENT_PREDICTED} <= set(gas.values)
    assert {Q.CARBOXYHAEMOGLOBIN, Q.SPO2_EXERTIONAL_NADIR, Q.SPO2} <= set(gas.out_of_window)
    assert not {Q.CARBOXYHAEMOGLOBIN, Q.SPO2_EXERTIONAL_NADIR, Q.SPO2} & set(gas.values)


def test_same_sample_values_must_be_drawn_together() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.ARTERIAL_PCO2, 40.0, 20)), windows=WINDOWS
    )
    assert Q.ARTERIAL_PCO2 not in pairing.index.values


def test_patient_level_values_pair_regardless_of_time() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.DLCO_PERCENT_PREDICTED, 0.45, -60 * 24 * 30)),
        windows=WINDOWS,
    )
    assert pairing.index.values[Q.DLCO_PERCENT_PREDICTED].value == 0.45


def test_untimed_context_is_used_only_when_no_timed_value_qualifies() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.5, None), m(Q.FIO2, 0.3, -5)),
        windows=WINDOWS,
    )
    assert pairing.index.values[Q.FIO2].value == 0.3
    alone = pair_gases(intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.5, None)), windows=WINDOWS)
    assert alone.index.values[Q.FIO2].value == 0.5
    assert alone.index.untimed == [Q.FIO2]


def test_a_po2_of_doubtful_specimen_is_never_an_arterial_gas() -> None:
    # docs/clinical-logic.md, "Trust the data first": venous, capillary or unknown samples are
    # never used as PaO2.
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 40.0, 0, specimen=Specimen.UNKNOWN), m(Q.SPO2, 0.95, 0)),
        windows=WINDOWS,
    )
    assert pairing.index.anchor is not None
    assert pairing.index.anchor.quantity is Q.SPO2
    assert [x.value for x in pairing.excluded_specimens] == [40.0]


def test_without_a_gas_the_latest_spo2_anchors_and_without_either_nothing_does() -> None:
    spo2_only = pair_gases(intake(m(Q.SPO2, 0.93, -30), m(Q.SPO2, 0.91, 0)), windows=WINDOWS)
    assert spo2_only.index.anchor is not None
    assert spo2_only.index.anchor.value == 0.91
    empty = pair_gases(intake(m(Q.HAEMOGLOBIN, 14.0, 0)), windows=WINDOWS)
    assert len(empty.gases) == 1
    assert empty.index.anchor is None
