"""The assessment glue's words and flags (service/assess/assess.py): the time apart of a value
left out, the specimen flags, the status of an answer that cannot be classified."""

from __future__ import annotations

from datetime import timedelta

import pytest

from service.assess.assess import _duration, _specimen_flags, windows
from service.assess.pairing import pair_gases
from service.assess.result import ResultStatus
from service.config import Settings
from service.intake.model import Measurement, Specimen
from service.intake.model import Quantity as Q
from service.runtime import Runtime

from .builders import intake, m


@pytest.mark.parametrize(
    ("apart", "words"),
    [
        # 1 day = 86 400 s, 1 hour = 3 600 s, 1 minute = 60 s (SI, BIPM 2019, Table 8).
        (timedelta(days=2), "2 days"),  # the edge: two days and more read in days
        (timedelta(hours=58), "2 days"),  # 2.4 days
        (timedelta(days=10), "10 days"),
        (timedelta(hours=47), "47 hours"),
        (timedelta(hours=2), "2 hours"),  # the edge: two hours and more read in hours
        (timedelta(minutes=150), "2 hours"),  # 2.5 h, rounded half to even
        (timedelta(hours=10), "10 hours"),
        (timedelta(minutes=119), "119 minutes"),
        (timedelta(minutes=90), "90 minutes"),
        (timedelta(minutes=100), "100 minutes"),
        (timedelta(minutes=-100), "100 minutes"),  # after the gas: the same span
    ],
)
def test_a_time_apart_reads_in_the_largest_whole_unit_from_two(
    apart: timedelta, words: str
) -> None:
    assert _duration(apart) == words


@pytest.mark.parametrize(
    ("extra", "unknown", "not_arterial"),
    [
        ([], False, False),
        # an arterial-coded PO2 whose sample is of unknown origin: left out, and said so
        ([m(Q.ARTERIAL_PO2, 70.0, -5, specimen=Specimen.UNKNOWN)], True, False),
        # an arterial-coded PO2 taken from a vein: not arterial
        ([m(Q.ARTERIAL_PO2, 40.0, -5, specimen=Specimen.VENOUS)], False, True),
        # a venous PO2 sent beside the gas
        ([m(Q.VENOUS_PO2, 40.0, -5)], False, True),
    ],
)
def test_the_specimen_flags_tell_unknown_from_not_arterial(
    extra: list[Measurement], unknown: bool, not_arterial: bool
) -> None:
    data = intake(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0), *extra)
    flags = _specimen_flags(pair_gases(data, windows=windows(Settings())))
    assert flags == {"specimen_unknown": unknown, "specimen_not_arterial": not_arterial}


def test_an_answer_that_cannot_be_classified_requires_data() -> None:
    # No PaO2 and no SpO2: nothing to grade (FHIR GuidanceResponse.status data-required).
    result = Runtime.load().assess_intake(intake(m(Q.FIO2, 0.21)))
    assert result.status is ResultStatus.DATA_REQUIRED
