"""The deficit partition as waterfall steps: from the expected PaO2, part by part, to the PaO2.

The partition of ``tests.deficit_reference``'s patient (Cerveri 1995, the alveolar gas equation)
is rebuilt here from its published equations and stepped through."""

from __future__ import annotations

import itertools

import pytest

from service.physiology.deficit import DeficitPartition, partition_pao2_deficit
from service.physiology.deficit_steps import RESIDUE_MMHG, shown_parts, waterfall
from tests.deficit_reference import (
    AGE_YEARS,
    FIO2,
    PACO2_MMHG,
    PAO2_MMHG,
    PB_MMHG,
    reference,
)


def _partition(paco2: float | None = PACO2_MMHG) -> DeficitPartition:
    return partition_pao2_deficit(
        arterial_po2_mmhg=PAO2_MMHG,
        age_years=AGE_YEARS,
        fio2=FIO2,
        barometric_mmhg=PB_MMHG,
        expected_paco2_mmhg=40.0,
        paco2_mmhg=paco2,
    )


def test_the_steps_run_from_the_expected_pao2_to_the_measured_one() -> None:
    ref = reference()
    steps = waterfall(_partition())
    assert [s.key for s in steps] == [
        "expected",
        "inspired",
        "ventilation",
        "gas-exchange",
        "measured",
    ]
    assert steps[0].end_mmhg == pytest.approx(ref.expected, abs=1e-3)  # Cerveri 1995
    for before, after in itertools.pairwise(steps[:-1]):
        assert after.start_mmhg == before.end_mmhg  # each step starts where the last ended
    assert steps[-2].end_mmhg == pytest.approx(PAO2_MMHG, abs=RESIDUE_MMHG)
    assert (steps[-1].start_mmhg, steps[-1].end_mmhg) == (0.0, PAO2_MMHG)
    expected = {"inspired": 0.0, **ref.parts()}
    for step in steps[1:-1]:
        assert step.part_mmhg is not None
        assert step.part_mmhg == pytest.approx(expected[step.key], abs=1e-3)
        assert step.start_mmhg - step.end_mmhg == pytest.approx(step.part_mmhg)
        assert step.lowers is (step.part_mmhg > 0.0)


def test_without_paco2_the_rest_is_one_unattributed_step() -> None:
    parts = dict(shown_parts(_partition(paco2=None)))
    assert set(parts) == {"inspired", "unattributed"}
    assert parts["unattributed"] == pytest.approx(reference().fall, abs=1e-3)


def test_an_oxygen_credit_is_a_step_up() -> None:
    # On 100 % oxygen the inspired part is a large credit: the level rises above the expected.
    d = DeficitPartition(84.6, 100.0, -493.4, 1.1, 476.9, 0.0)
    steps = waterfall(d)
    inspired = steps[1]
    assert inspired.end_mmhg == pytest.approx(84.6 + 493.4) and not inspired.lowers
    assert steps[-2].end_mmhg == pytest.approx(100.0)
    # An unattributed rest of zero with the other parts known is not a part.
    assert "unattributed" not in dict(shown_parts(d))


def test_a_rest_that_is_not_rounding_is_shown() -> None:
    d = DeficitPartition(80.0, 60.0, 5.0, 5.0, 9.0, 1.0)
    assert dict(shown_parts(d))["unattributed"] == 1.0
    assert waterfall(d)[-2].end_mmhg == pytest.approx(60.0)
