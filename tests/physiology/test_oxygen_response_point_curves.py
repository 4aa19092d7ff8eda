"""Which dissociation curve each titration point is fitted on: its own pH and temperature
when it carries them, else the curve the conditions carry."""

from __future__ import annotations

from dataclasses import replace
from datetime import timedelta

import pytest

from service.physiology.oxygen_affinity import oxygen_affinity
from service.physiology.oxygen_exchange import exchange_conditions
from service.physiology.oxygen_response import fit_oxygen_response
from service.physiology.titration import TitrationPoint
from tests.physiology.oxygen_points import START, generated_points, inspired
from tests.titration_reference import arterial, p50_at_ph


def test_points_without_their_own_chemistry_are_fitted_on_the_conditions_curve() -> None:
    # Gases written by the independent model (tests.titration_reference) on blood at pH 7.25
    # (P50 moved by Severinghaus 1979 eq. 4), charted without a pH: fitted with conditions
    # carrying that curve, they give back the shunt and ΔPO2 they were written with.
    p50 = p50_at_ph(7.25)
    points = [
        TitrationPoint(
            START + timedelta(minutes=10 * i),
            inspired(fio2),
            pao2_mmhg=arterial(
                shunt=0.2, drop=30.0, fio2=fio2, paco2=40.0, pb=760.0, ph2o=47.0, p50=p50
            ).pao2,
            paco2_mmhg=40.0,
        )
        for i, fio2 in enumerate((0.25, 0.3, 0.4, 0.6))
    ]
    acid = exchange_conditions(affinity=oxygen_affinity(ph=7.25))
    fit = fit_oxygen_response(points=points, conditions=acid).two_parameter
    assert fit is not None
    # the two codings of eq. 4 agree to about 2e-4 of PaO2 (test_titration_fixtures)
    assert fit.shunt.value == pytest.approx(0.2, abs=1e-3)
    assert fit.vq_drop_mmhg.value == pytest.approx(30.0, abs=0.5)
    standard = fit_oxygen_response(points=points).two_parameter
    assert standard is not None and abs(standard.shunt.value - 0.2) > 0.01  # the curve matters


def test_a_point_with_its_temperature_alone_is_fitted_on_its_warmed_curve() -> None:
    # Gases at 38.5 °C with no pH charted: Severinghaus 1979 eq. 3 moves each point's curve by
    # its temperature; data generated on that curve fit back only if the fit moves it too.
    warm = exchange_conditions(affinity=oxygen_affinity(temperature_cel=38.5))
    points = [
        replace(p, temperature_cel=38.5)
        for p in generated_points(
            shunt=0.15, vq_drop_mmhg=25.0, fio2s=(0.25, 0.3, 0.4, 0.6), conditions=warm
        )
    ]
    fit = fit_oxygen_response(points=points).two_parameter
    assert fit is not None
    assert fit.shunt.value == pytest.approx(0.15, abs=1e-4)
    assert fit.vq_drop_mmhg.value == pytest.approx(25.0, abs=0.05)
