"""The forward model of oxygen exchange against the model written again independently
(``tests/titration_reference.py``: scipy's Brent root finder, no code shared with the service),
over the corners of its domain, and the edges of that domain as the module states them."""

from __future__ import annotations

import pytest
from iapws.iapws97 import _PSat_T

from service.assess.derivation import Computed
from service.assess.normals import room_air_pao2_least, room_air_pao2_most
from service.config import Settings
from service.exceptions import ImpossibleValueError, OutsideModelRangeError
from service.physiology.oxygen_affinity import STANDARD_P50_MMHG, OxygenAffinity
from service.physiology.oxygen_exchange import (
    ArterialPrediction,
    alveolar_terms,
    exchange_conditions,
    exchange_state,
    predict_arterial_oxygen,
)
from service.physiology.oxygen_response import (
    FitModel,
    ModelFit,
    Sensitivity,
    fit_oxygen_response,
)
from tests import titration_reference as ref
from tests.physiology.oxygen_points import generated_points

PB, PH2O, PACO2 = 760.0, 47.0, 40.0


def _reference(
    *, shunt: float, drop: float, fio2: float, hb: float, avd: float, p50: float
) -> ref.Arterial:
    # The service's curve is eq. 1 with PO2 multiplied by 26.86 / P50 (Severinghaus's P50
    # rounded to two decimals); the reference is given the same multiplier on its own P50.
    return ref.arterial(
        shunt=shunt,
        drop=drop,
        fio2=fio2,
        paco2=PACO2,
        pb=PB,
        ph2o=PH2O,
        hb=hb,
        avd=avd,
        p50=ref.p50_eq1() * p50 / STANDARD_P50_MMHG,
    )


# (shunt, ΔPO2 mmHg, FiO2, Hb g/dL, a-v difference mL/dL, P50 mmHg): the corners where the
# content inversion changes method or works hardest: anaemia with a right-shifted curve, where
# dissolved oxygen outweighs the last few percent of saturation (Hb 3-8 g/dL, P50 40-45, both
# inside the accepted ranges), a left-shifted curve (P50 18-20, near foetal blood's) with a
# low cardiac output (a-v difference 12 mL/dL), blood leaving the lung at the foot of the
# curve (SaO2 about 5 %, P50 60 mmHg, the accepted limit), and a plain adult lung.
CORNERS = [
    (0.01, 36.0, 0.30, 8.0, 3.5, 40.0),
    (0.01, 20.0, 0.30, 3.0, 0.5, 44.8),
    (0.10, 20.0, 0.30, 3.0, 0.5, 44.8),
    (0.10, 400.0, 0.80, 26.0, 12.0, 17.9),
    (0.05, 200.0, 0.50, 14.0, 12.0, 17.9),
    (0.20, 150.0, 0.30, 8.0, 0.5, 60.0),
    (0.05, 0.0, 0.35, 14.0, 5.0, STANDARD_P50_MMHG),
    (0.30, 10.0, 1.00, 14.0, 5.0, STANDARD_P50_MMHG),
    (0.02, 0.0, 1.00, 14.0, 5.0, STANDARD_P50_MMHG),
]


@pytest.mark.parametrize(("shunt", "drop", "fio2", "hb", "avd", "p50"), CORNERS)
def test_the_forward_model_is_the_independent_model_at_the_corners_of_its_domain(
    shunt: float, drop: float, fio2: float, hb: float, avd: float, p50: float
) -> None:
    # The module promises PaO2 within 1e-8 mmHg of the content equation's root; the reference
    # solves the same equations (Severinghaus 1979 eq. 1; the shunt equation, Berggren 1942)
    # by Brent's method to 1e-10 mmHg. 1e-6 mmHg leaves room for rounding only.
    predicted = predict_arterial_oxygen(
        shunt_fraction=shunt,
        vq_drop_mmhg=drop,
        fio2=fio2,
        paco2_mmhg=PACO2,
        conditions=exchange_conditions(haemoglobin_g_dl=hb, av_difference_ml_dl=avd),
        affinity=OxygenAffinity(p50, "test curve"),
    )
    expected = _reference(shunt=shunt, drop=drop, fio2=fio2, hb=hb, avd=avd, p50=p50)
    assert predicted.alveolar_po2_mmhg == pytest.approx(expected.alveolar_po2, abs=1e-9)
    assert predicted.arterial_po2_mmhg == pytest.approx(expected.pao2, abs=1e-6)
    assert predicted.arterial_saturation == pytest.approx(expected.sao2, abs=1e-9)


@pytest.mark.parametrize(("shunt", "drop"), [(0.05, 0.0), (0.10, 10.0), (0.20, 10.0)])
def test_a_solve_started_from_a_neighbouring_answer_reaches_the_same_root(
    shunt: float, drop: float
) -> None:
    # The prediction walks up FiO2 starting each solve from the PaO2 of the FiO2 below (the
    # ``start_po2`` of ``exchange_state``); every answer must still be the reference's root.
    conditions = exchange_conditions()
    previous = 0.0
    for step in range(21, 101, 5):
        fio2 = step / 100.0
        alveolar, _, _ = alveolar_terms(fio2, PACO2, conditions)
        state = exchange_state(
            alveolar,
            drop,
            shunt / (1.0 - shunt),
            conditions.carrying_capacity_ml_dl,
            conditions.av_difference_ml_dl,
            1.0,
            previous,
        )
        assert state is not None
        expected = _reference(
            shunt=shunt, drop=drop, fio2=fio2, hb=14.0, avd=5.0, p50=STANDARD_P50_MMHG
        )
        assert state.arterial_po2_mmhg == pytest.approx(expected.pao2, abs=1e-6), fio2
        previous = state.arterial_po2_mmhg


@pytest.mark.parametrize("fio2", [0.21, 0.4, 0.7, 1.0])
def test_the_alveolar_terms_are_the_alveolar_gas_equation_and_its_slopes(fio2: float) -> None:
    # dPAO2/dFiO2 and dPAO2/dPaCO2 of the full alveolar gas equation (R 0.8), checked by a
    # central difference of the reference's equation.
    conditions = exchange_conditions(water_vapour_mmhg=PH2O)
    alveolar, d_fio2, bracket = alveolar_terms(fio2, PACO2, conditions)
    h = 1e-4
    assert alveolar == pytest.approx(ref.alveolar(fio2, PACO2, PB, PH2O), abs=1e-9)
    slope_fio2 = ref.alveolar(fio2 + h, PACO2, PB, PH2O) - ref.alveolar(fio2 - h, PACO2, PB, PH2O)
    assert d_fio2 == pytest.approx(slope_fio2 / (2 * h), rel=1e-7)
    slope_paco2 = (
        ref.alveolar(fio2, PACO2 + h, PB, PH2O) - ref.alveolar(fio2, PACO2 - h, PB, PH2O)
    ) / (2 * h)
    assert -bracket == pytest.approx(slope_paco2, rel=1e-7)


# --- the edges of the model's domain, as the module states them -------------------------------


def _fio2_1_with_capillary_po2(
    capillary_mmhg: float, shunt: float, hb: float, avd: float
) -> ArterialPrediction:
    """predict_arterial_oxygen on FiO2 1.0 (PAO2 = PB − PH2O − PaCO2 exactly, the bracket
    being 1) with ΔPO2 chosen so that the end-capillary PO2 is ``capillary_mmhg``."""
    alveolar = PB - PH2O - PACO2
    return predict_arterial_oxygen(
        shunt_fraction=shunt,
        vq_drop_mmhg=alveolar - capillary_mmhg,
        fio2=1.0,
        paco2_mmhg=PACO2,
        conditions=exchange_conditions(haemoglobin_g_dl=hb, av_difference_ml_dl=avd),
        affinity=OxygenAffinity(10.0, "left-shifted test curve"),
    )


def test_an_end_capillary_po2_of_5_mmhg_is_inside_the_model_and_below_it_outside() -> None:
    # "End-capillary PO2 below 5 mmHg" is where the model stops: with a high Hb, a strongly
    # left-shifted curve (P50 10, the lower limit) and a small a-v difference the blood still
    # carries enough oxygen there for a steady state.
    for capillary in (5.0, 5.2):
        found = _fio2_1_with_capillary_po2(capillary, 0.0, 26.0, 0.5)
        assert found.end_capillary_po2_mmhg == pytest.approx(capillary, abs=1e-9)
        assert found.arterial_po2_mmhg == pytest.approx(capillary, abs=1e-9)
    with pytest.raises(OutsideModelRangeError) as refused:
        _fio2_1_with_capillary_po2(4.8, 0.0, 26.0, 0.5)
    assert refused.value.quantity == "vq_drop_mmhg"


def test_no_steady_state_at_a_capillary_po2_of_5_mmhg_blames_the_mass_balance() -> None:
    # At exactly 5 mmHg the end-capillary limit is not passed; with a normal Hb and a-v
    # difference the venous content would be negative, which is the shunt's error to report.
    with pytest.raises(OutsideModelRangeError) as refused:
        _fio2_1_with_capillary_po2(5.0, 0.0, 14.0, 5.0)
    assert refused.value.quantity == "shunt_fraction"


def test_a_mixed_venous_content_of_zero_is_outside_the_model() -> None:
    # Without shunt the arterial content is the end-capillary content; an a-v difference equal
    # to it leaves a mixed venous content of exactly zero: "at or below zero" is refused.
    capillary = predict_arterial_oxygen(
        shunt_fraction=0.0,
        vq_drop_mmhg=0.0,
        fio2=0.21,
        paco2_mmhg=PACO2,
        conditions=exchange_conditions(haemoglobin_g_dl=8.0),
    ).end_capillary_content_ml_dl
    assert 0.5 < capillary < 15.0  # inside the accepted a-v differences
    with pytest.raises(OutsideModelRangeError):
        predict_arterial_oxygen(
            shunt_fraction=0.0,
            vq_drop_mmhg=0.0,
            fio2=0.21,
            paco2_mmhg=PACO2,
            conditions=exchange_conditions(haemoglobin_g_dl=8.0, av_difference_ml_dl=capillary),
        )


def test_the_vq_term_is_accepted_up_to_700_mmhg() -> None:
    # VQ_DROP_LIMITS_MMHG: 0–700 mmHg, nearly the whole alveolar PO2 on FiO2 1.0 at sea level
    # (713 − PaCO2). 700 itself is a valid input; beyond it is refused as impossible.
    pao2 = predict_arterial_oxygen(
        shunt_fraction=0.0,
        vq_drop_mmhg=700.0,
        fio2=1.0,
        paco2_mmhg=5.0,
        conditions=exchange_conditions(haemoglobin_g_dl=26.0, av_difference_ml_dl=0.5),
        affinity=OxygenAffinity(10.0, "left-shifted test curve"),
    ).arterial_po2_mmhg
    assert pao2 == pytest.approx(PB - PH2O - 5.0 - 700.0, abs=1e-9)
    with pytest.raises(ImpossibleValueError):
        predict_arterial_oxygen(shunt_fraction=0.0, vq_drop_mmhg=705.0, fio2=1.0, paco2_mmhg=5.0)


def test_water_vapour_up_to_a_feverish_45_degrees_is_accepted_at_the_lowest_pressure() -> None:
    # Intake accepts PB down to 200 mmHg and body temperatures to 45 °C; saturated water
    # vapour at 45 °C (IAPWS-IF97, ``iapws``) is about 72 mmHg, more than a third of 200.
    ph2o_45 = float(_PSat_T(318.15)) * 1e6 / ref.PA_PER_MMHG
    assert 71.0 < ph2o_45 < 73.0
    conditions = exchange_conditions(barometric_mmhg=200.0, water_vapour_mmhg=ph2o_45)
    assert conditions.dry_pressure_mmhg == pytest.approx(200.0 - ph2o_45)


@pytest.mark.parametrize("fraction", [0.6, 1.0, 1.5])
def test_water_vapour_at_or_above_the_barometric_pressure_is_refused(fraction: float) -> None:
    # A partial pressure cannot reach the total pressure (it would leave no dry gas for the
    # FiO2 to act on); the module refuses anything above half of PB.
    with pytest.raises(ImpossibleValueError):
        exchange_conditions(barometric_mmhg=300.0, water_vapour_mmhg=fraction * 300.0)


def test_an_assumed_paco2_is_accepted_from_1_to_250_mmhg() -> None:
    for paco2 in (1.0, 250.0):
        assert exchange_conditions(assumed_paco2_mmhg=paco2).assumed_paco2_mmhg == paco2
    for paco2 in (0.95, 260.0):
        with pytest.raises(ImpossibleValueError):
            exchange_conditions(assumed_paco2_mmhg=paco2)


# --- the ranges over which an assumed value is varied -----------------------------------------


def test_the_room_air_projection_ranges_over_an_assumed_hb_of_8_to_17() -> None:
    # The least and most room-air PaO2 are taken over Hb 8–17 g/dL (anaemia to the upper
    # normal, common practice; docs/oxygen-response.md and the rule catalogue say so): each
    # edge is the reference's effective-shunt projection (Karbing 2007) at that Hb.
    gas = {
        "arterial_po2": 80.0,
        "fio2": 0.6,
        "arterial_pco2": PACO2,
        "barometric_pressure": PB,
        "water_vapour_pressure": PH2O,
        "settings": Settings(),
    }
    least, most = room_air_pao2_least.compute(**gas), room_air_pao2_most.compute(**gas)
    assert isinstance(least, Computed) and isinstance(most, Computed)
    projections = [
        ref.room_air_projection(pao2=80.0, fio2=0.6, paco2=PACO2, pb=PB, ph2o=PH2O, hb=hb)
        for hb in (8.0, 14.0, 17.0)
    ]
    assert least.value == pytest.approx(min(projections), abs=1e-3)
    assert most.value == pytest.approx(max(projections), abs=1e-3)


def _fitted(
    kinds: tuple[str, ...],
    *,
    haemoglobin_g_dl: float | None = None,
    av_difference_ml_dl: float | None = None,
    assumed_paco2_mmhg: float = PACO2,
) -> ModelFit:
    points = generated_points(
        shunt=0.10, vq_drop_mmhg=60.0, fio2s=(0.21, 0.25, 0.3, 0.35, 0.4, 0.5), kinds=kinds
    )
    conditions = exchange_conditions(
        haemoglobin_g_dl=haemoglobin_g_dl,
        av_difference_ml_dl=av_difference_ml_dl,
        assumed_paco2_mmhg=assumed_paco2_mmhg,
    )
    fit = fit_oxygen_response(points=points, conditions=conditions)
    assert fit.preferred is not None and fit.preferred.model is FitModel.SHUNT_AND_VQ
    return fit.preferred


def _sensitivity(fit: ModelFit, assumption: str) -> Sensitivity:
    (found,) = [s for s in fit.sensitivities if s.assumption == assumption]
    return found


def test_the_fit_reports_an_assumed_av_difference_at_3_5_and_7_exactly() -> None:
    # 3.5 mL/dL, the "estimated shunt" equations' value for the critically ill, to a low-output
    # 7 mL/dL (common practice; docs/oxygen-response.md), the range the site's settings hold
    # by default. The shunt enters only as odds × avd, so each edge is exactly the fit made
    # with that a-v difference measured.
    av = _sensitivity(_fitted(("pao2", "spo2")), "av_difference_ml_dl")
    assert av.method == "exact"
    assert (av.low_value, av.high_value) == (3.5, 7.0)
    for avd, shunt in ((3.5, av.shunt_at_low), (7.0, av.shunt_at_high)):
        refit = _fitted(("pao2", "spo2"), av_difference_ml_dl=avd)
        assert shunt == pytest.approx(refit.shunt.value, rel=1e-6)


def test_the_fit_reports_an_assumed_hb_at_8_and_17() -> None:
    # Hb 8–17 g/dL (common practice; docs/oxygen-response.md), linearised at the fit: each
    # edge's shunt is within 0.001 of the fit made with that Hb measured (a tenth of a g/dL
    # moves it by about 0.0004 here).
    hb = _sensitivity(_fitted(("pao2", "spo2")), "haemoglobin_g_dl")
    for haemoglobin, shunt in ((8.0, hb.shunt_at_low), (17.0, hb.shunt_at_high)):
        refit = _fitted(("pao2", "spo2"), haemoglobin_g_dl=haemoglobin)
        assert shunt == pytest.approx(refit.shunt.value, abs=1e-3)


def test_the_fit_reports_an_assumed_paco2_moved_by_10_mmhg() -> None:
    # Oximetry alone: the PaCO2 is assumed (40 mmHg) and moved by ± 10 mmHg (common practice;
    # docs/oxygen-response.md). ΔPO2 absorbs a wrong PaCO2 almost linearly, so each linearised
    # edge is within 0.05 mmHg of the fit made with that PaCO2 assumed (1 mmHg of PaCO2 moves
    # ΔPO2 by about 1.2 mmHg).
    paco2 = _sensitivity(_fitted(("spo2",)), "paco2_mmhg")
    for assumed, drop in ((30.0, paco2.vq_drop_at_low_mmhg), (50.0, paco2.vq_drop_at_high_mmhg)):
        refit = _fitted(("spo2",), assumed_paco2_mmhg=assumed)
        assert drop == pytest.approx(refit.vq_drop_mmhg.value, abs=0.05)


@pytest.mark.parametrize("hb", [1.0, 2.0])
@pytest.mark.parametrize("fraction", [0.1, 0.3, 0.5, 0.7])
def test_a_solve_started_far_left_of_the_root_still_finds_it(hb: float, fraction: float) -> None:
    # Severe anaemia with a right-shifted curve (Hb 1-2 g/dL and P50 60 mmHg, both accepted
    # limits): dissolved oxygen carries much of the content, and a Newton step from well below
    # the answer (the PaO2 of a much lower FiO2) overshot past saturation 1 and settled on a
    # negative PaO2. Every start must give the reference's root.
    conditions = exchange_conditions(haemoglobin_g_dl=hb, av_difference_ml_dl=0.5)
    expected = _reference(shunt=0.05, drop=0.0, fio2=0.3, hb=hb, avd=0.5, p50=60.0)
    alveolar, _, _ = alveolar_terms(0.3, PACO2, conditions)
    state = exchange_state(
        alveolar,
        0.0,
        0.05 / 0.95,
        conditions.carrying_capacity_ml_dl,
        0.5,
        STANDARD_P50_MMHG / 60.0,
        fraction * expected.pao2,
    )
    assert state is not None
    assert state.arterial_po2_mmhg == pytest.approx(expected.pao2, abs=1e-6)
