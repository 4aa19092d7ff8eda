"""A gas carried to room air by its effective shunt (service/physiology/oxygen_projection.py),
against the shunt equation written out independently (``tests.titration_reference``: Berggren
1942, Severinghaus 1979 eq. 1, scipy's root finder) and the published iso-shunt relation
(Benatar SR, Hewlett AM & Nunn JF, Br J Anaesth 1973;45:711)."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.exceptions import OutsideModelRangeError
from service.physiology.oxygen_exchange import exchange_conditions, predict_arterial_oxygen
from service.physiology.oxygen_projection import project_gas
from service.physiology.reference import vq_drop_upper_limit_mmhg, vq_drop_upper_limit_range_mmhg
from tests.titration_reference import arterial, room_air_projection

PB, PH2O = 760.0, 47.0
CONDITIONS = exchange_conditions(barometric_mmhg=PB, water_vapour_mmhg=PH2O)


def test_a_thirty_percent_shunt_on_pure_oxygen_projects_to_the_shunt_equations_room_air_pao2() -> (
    None
):
    # The case the constant a/A projection got wrong: a 30 % shunt on FiO2 1.0 (PaO2 about
    # 100 mmHg, iso-shunt lines, Benatar 1973) projects by a/A to about 15 mmHg on air; the
    # shunt equation gives about 53 [calc, tests.titration_reference].
    gas = arterial(shunt=0.30, drop=0.0, fio2=1.0, paco2=40.0, pb=PB, ph2o=PH2O)
    projected = project_gas(
        arterial_po2_mmhg=gas.pao2,
        fio2=1.0,
        paco2_mmhg=40.0,
        target_fio2=0.21,
        conditions=CONDITIONS,
    )
    on_air = arterial(shunt=0.30, drop=0.0, fio2=0.21, paco2=40.0, pb=PB, ph2o=PH2O)
    assert projected.arterial_po2_mmhg == pytest.approx(on_air.pao2, abs=0.05)
    assert projected.arterial_po2_mmhg == pytest.approx(53.3, abs=0.2)
    assert projected.effective_shunt == pytest.approx(0.30, abs=1e-6)
    a_over_a = gas.pao2 / gas.alveolar_po2 * on_air.alveolar_po2
    assert a_over_a < 16.0  # what the old projection said


@pytest.mark.parametrize(
    ("pao2", "fio2", "paco2"), [(70.0, 0.4, 45.0), (150.0, 0.6, 38.0), (62.0, 0.28, 60.0)]
)
def test_the_projection_agrees_with_the_independent_shunt_equation(
    pao2: float, fio2: float, paco2: float
) -> None:
    mine = project_gas(
        arterial_po2_mmhg=pao2, fio2=fio2, paco2_mmhg=paco2, target_fio2=0.21, conditions=CONDITIONS
    )
    theirs = room_air_projection(pao2=pao2, fio2=fio2, paco2=paco2, pb=PB, ph2o=PH2O)
    # Within 0.05 mmHg: the service's curve scale uses P50 26.86, the reference the root of
    # eq. 1 (26.857).
    assert mine.arterial_po2_mmhg == pytest.approx(theirs, abs=0.05)


def test_the_projection_does_not_depend_on_the_assumed_av_difference() -> None:
    # Shunt = D / (D + avd x ...): the fraction moves with the a-v difference, the content
    # deficit D and so the projection do not (constant avd across FiO2).
    values = [
        project_gas(
            arterial_po2_mmhg=110.0,
            fio2=0.6,
            paco2_mmhg=40.0,
            target_fio2=0.21,
            conditions=exchange_conditions(
                barometric_mmhg=PB, water_vapour_mmhg=PH2O, av_difference_ml_dl=avd
            ),
        )
        for avd in (3.5, 5.0, 7.0)
    ]
    assert (
        max(v.arterial_po2_mmhg for v in values) - min(v.arterial_po2_mmhg for v in values) < 1e-9
    )
    assert values[0].effective_shunt > values[1].effective_shunt > values[2].effective_shunt


def test_on_its_own_fio2_a_gas_projects_to_itself() -> None:
    projected = project_gas(
        arterial_po2_mmhg=11.8, fio2=0.21, paco2_mmhg=5.3, target_fio2=0.21, conditions=CONDITIONS
    )
    assert projected.arterial_po2_mmhg == 11.8


def test_a_shunt_too_large_for_air_has_no_steady_state_there() -> None:
    # PaO2 20 on pure oxygen: a content deficit of about 15 mL/dL, more than air can carry
    # with 5 mL/dL still to give the tissues [calc].
    with pytest.raises(OutsideModelRangeError):
        project_gas(
            arterial_po2_mmhg=20.0,
            fio2=1.0,
            paco2_mmhg=40.0,
            target_fio2=0.21,
            conditions=CONDITIONS,
        )


@settings(max_examples=200, deadline=None)
@given(
    shunt=st.floats(0.0, 0.4),
    drop=st.floats(0.0, 60.0),
    fio2=st.floats(0.3, 1.0),
    paco2=st.floats(30.0, 60.0),
)
def test_projected_down_to_air_it_never_understates_the_two_parameter_lung(
    shunt: float, drop: float, fio2: float, paco2: float
) -> None:
    # Low-V/Q units cost more content on a lower FiO2, so the effective shunt of a gas on
    # oxygen promises at least what a lung with a V/Q term gives on air (exact for drop 0).
    try:
        gas = predict_arterial_oxygen(
            shunt_fraction=shunt,
            vq_drop_mmhg=drop,
            fio2=fio2,
            paco2_mmhg=paco2,
            conditions=CONDITIONS,
        )
        truth = predict_arterial_oxygen(
            shunt_fraction=shunt,
            vq_drop_mmhg=drop,
            fio2=0.21,
            paco2_mmhg=paco2,
            conditions=CONDITIONS,
        )
        projected = project_gas(
            arterial_po2_mmhg=gas.arterial_po2_mmhg,
            fio2=fio2,
            paco2_mmhg=paco2,
            target_fio2=0.21,
            conditions=CONDITIONS,
        )
    except OutsideModelRangeError:
        return  # no living steady state on air: nothing to compare
    assert projected.arterial_po2_mmhg >= truth.arterial_po2_mmhg - 1e-6


def test_the_healthy_limit_of_the_vq_term_over_unknown_ages_is_its_extremes() -> None:
    # The range helper looks only at the ends and at 74 (the last rising year); checked
    # against every whole year.
    every = [vq_drop_upper_limit_mmhg(age_years=a) for a in range(18, 101)]
    assert vq_drop_upper_limit_range_mmhg(ages=(18.0, 100.0)) == pytest.approx(
        (min(every), max(every))
    )
    partial = [vq_drop_upper_limit_mmhg(age_years=a) for a in range(30, 61)]
    assert vq_drop_upper_limit_range_mmhg(ages=(30.0, 60.0)) == pytest.approx(
        (min(partial), max(partial))
    )
