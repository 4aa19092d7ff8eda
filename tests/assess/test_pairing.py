"""Pairing gases with the values of the same moment (contract §2, time rules)."""

from __future__ import annotations

from datetime import timedelta

from service.assess.pairing import pair_gases
from service.intake.model import Quantity as Q
from service.intake.model import Specimen

from .builders import intake, m

WINDOW = timedelta(minutes=30)
SAMPLE = timedelta(minutes=5)


def test_latest_arterial_po2_is_the_index_gas() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 60.0, -120), m(Q.ARTERIAL_PO2, 70.0, 0)),
        window=WINDOW,
        same_sample=SAMPLE,
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
        window=WINDOW,
        same_sample=SAMPLE,
    )
    assert pairing.index.values[Q.FIO2].value == 0.3


def test_fio2_outside_the_window_is_not_used_but_kept_for_reporting() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.4, -45)),
        window=WINDOW,
        same_sample=SAMPLE,
    )
    assert Q.FIO2 not in pairing.index.values
    assert pairing.index.out_of_window[Q.FIO2].value == 0.4


def test_same_sample_values_must_be_drawn_together() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.ARTERIAL_PCO2, 40.0, 20)),
        window=WINDOW,
        same_sample=SAMPLE,
    )
    assert Q.ARTERIAL_PCO2 not in pairing.index.values


def test_patient_level_values_pair_regardless_of_time() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.DLCO_PERCENT_PREDICTED, 0.45, -60 * 24 * 30)),
        window=WINDOW,
        same_sample=SAMPLE,
    )
    assert pairing.index.values[Q.DLCO_PERCENT_PREDICTED].value == 0.45


def test_untimed_context_is_used_only_when_no_timed_value_qualifies() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.5, None), m(Q.FIO2, 0.3, -5)),
        window=WINDOW,
        same_sample=SAMPLE,
    )
    assert pairing.index.values[Q.FIO2].value == 0.3
    alone = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.5, None)),
        window=WINDOW,
        same_sample=SAMPLE,
    )
    assert alone.index.values[Q.FIO2].value == 0.5
    assert alone.index.untimed == [Q.FIO2]


def test_a_po2_of_doubtful_specimen_is_never_an_arterial_gas() -> None:
    # clinical-logic.md §2: venous, capillary or unknown samples are never used as PaO2.
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 40.0, 0, specimen=Specimen.UNKNOWN), m(Q.SPO2, 0.95, 0)),
        window=WINDOW,
        same_sample=SAMPLE,
    )
    assert pairing.index.anchor is not None
    assert pairing.index.anchor.quantity is Q.SPO2
    assert [x.value for x in pairing.excluded_specimens] == [40.0]


def test_without_a_gas_the_latest_spo2_anchors_and_without_either_nothing_does() -> None:
    spo2_only = pair_gases(
        intake(m(Q.SPO2, 0.93, -30), m(Q.SPO2, 0.91, 0)), window=WINDOW, same_sample=SAMPLE
    )
    assert spo2_only.index.anchor is not None
    assert spo2_only.index.anchor.value == 0.91
    empty = pair_gases(intake(m(Q.HAEMOGLOBIN, 14.0, 0)), window=WINDOW, same_sample=SAMPLE)
    assert len(empty.gases) == 1
    assert empty.index.anchor is None
