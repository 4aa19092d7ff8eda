"""Predictions for a fitted patient: the curve across FiO2, the FiO2 for a target band."""

from __future__ import annotations

import itertools
from dataclasses import replace

import pytest

from service.physiology.oxygen_exchange import predict_arterial_oxygen
from service.physiology.oxygen_prediction import (
    CAUTION,
    TARGET_BAND_LIMITS,
    OxygenPrediction,
    TargetBand,
    predict_oxygen_response,
)
from service.physiology.oxygen_response import FitModel, OxygenResponse, fit_oxygen_response
from service.physiology.titration import TitrationPoint
from tests.physiology.oxygen_points import START, generated_points, inspired

GAS_FIO2S = (0.25, 0.3, 0.4, 0.6, 0.8)


def _prediction(shunt: float, drop: float) -> tuple[OxygenResponse, OxygenPrediction]:
    points = generated_points(shunt=shunt, vq_drop_mmhg=drop, fio2s=GAS_FIO2S)
    response = fit_oxygen_response(points=points)
    prediction = predict_oxygen_response(response=response)
    assert prediction is not None
    return response, prediction


def test_the_curve_runs_from_room_air_to_pure_oxygen_and_rises() -> None:
    _, prediction = _prediction(0.15, 40.0)
    fio2s = [p.fio2 for p in prediction.curve]
    assert fio2s[0] == 0.21 and fio2s[-1] == 1.0
    assert all(b > a for a, b in itertools.pairwise(fio2s))
    saturations = [p.saturation for p in prediction.curve]
    pao2s = [p.pao2_mmhg for p in prediction.curve]
    assert saturations == sorted(saturations) and pao2s == sorted(pao2s)


def test_the_curve_is_the_forward_model_at_the_fitted_parameters() -> None:
    response, prediction = _prediction(0.15, 40.0)
    fit = response.two_parameter
    assert fit is not None and prediction.model is FitModel.SHUNT_AND_VQ
    for point in prediction.curve[::7]:
        expected = predict_arterial_oxygen(
            shunt_fraction=fit.shunt.value,
            vq_drop_mmhg=fit.vq_drop_mmhg.value,
            fio2=point.fio2,
            paco2_mmhg=40.0,
        )
        assert point.pao2_mmhg == pytest.approx(expected.arterial_po2_mmhg, rel=1e-9)
        assert point.saturation == pytest.approx(expected.arterial_saturation, rel=1e-9)


def test_ranges_hold_the_central_value_and_widen_when_the_fit_is_poor() -> None:
    # The ranges come from the stated measurement errors, scaled up by χ²/ν when the points
    # scatter more than those errors allow: one gas 30 % off the curve widens them.
    points = generated_points(shunt=0.15, vq_drop_mmhg=40.0, fio2s=GAS_FIO2S)
    tidy = predict_oxygen_response(response=fit_oxygen_response(points=points))
    off = points[2].pao2_mmhg
    assert off is not None
    scattered = [*points[:2], replace(points[2], pao2_mmhg=1.3 * off), *points[3:]]
    poor = predict_oxygen_response(response=fit_oxygen_response(points=scattered))
    assert tidy is not None and poor is not None
    for point in poor.curve:
        assert point.saturation_low <= point.saturation <= point.saturation_high
        assert point.pao2_low_mmhg <= point.pao2_mmhg <= point.pao2_high_mmhg
    for a, b in zip(tidy.curve, poor.curve, strict=True):
        assert (b.pao2_high_mmhg - b.pao2_low_mmhg) > (a.pao2_high_mmhg - a.pao2_low_mmhg)


@pytest.mark.parametrize("band", list(TargetBand))
def test_the_fio2_for_a_target_reaches_the_bands_lower_edge(band: TargetBand) -> None:
    # BTS guideline (O'Driscoll et al., Thorax 2017;72 Suppl 1): 94–98 % for most, 88–92 % at
    # risk of hypercapnic failure. The estimated FiO2 must give the band's lower edge on the
    # forward model at the fitted parameters, to the stated 0.001.
    response, prediction = _prediction(0.12, 55.0)
    fit = response.preferred
    assert fit is not None
    (target,) = [t for t in prediction.targets if t.band is band]
    low, high = TARGET_BAND_LIMITS[band]
    assert (target.target_low, target.target_high) == (low, high)
    assert target.fio2 is not None and target.fio2 > 0.21

    def saturation(fio2: float) -> float:
        return predict_arterial_oxygen(
            shunt_fraction=fit.shunt.value,
            vq_drop_mmhg=fit.vq_drop_mmhg.value,
            fio2=fio2,
            paco2_mmhg=40.0,
        ).arterial_saturation

    assert saturation(target.fio2) >= low > saturation(target.fio2 - 0.002)
    assert target.fio2_low is not None and target.fio2_high is not None
    assert target.fio2_low <= target.fio2 <= target.fio2_high
    assert target.fio2_ceiling is not None and target.fio2_ceiling > target.fio2
    assert saturation(target.fio2_ceiling) > high >= saturation(target.fio2_ceiling - 0.002)


def test_a_large_shunt_cannot_reach_the_target_on_oxygen() -> None:
    # Iso-shunt lines (Benatar 1973): with 40 % shunt, PaO2 on FiO2 1.0 is about 64 mmHg and
    # SaO2 about 92 % [calc] — the 94–98 % band is out of reach whatever the FiO2.
    points = generated_points(shunt=0.40, vq_drop_mmhg=0.0, fio2s=(0.4, 0.6, 0.8, 1.0))
    prediction = predict_oxygen_response(response=fit_oxygen_response(points=points))
    assert prediction is not None
    standard = next(t for t in prediction.targets if t.band is TargetBand.STANDARD)
    assert standard.fio2 is None and standard.fio2_high is None
    assert "even on FiO2 1.0" in standard.note


def test_a_patient_at_the_band_on_room_air_needs_no_oxygen_by_the_model() -> None:
    points = generated_points(shunt=0.05, vq_drop_mmhg=5.0, fio2s=(0.21, 0.3, 0.4))
    prediction = predict_oxygen_response(response=fit_oxygen_response(points=points))
    assert prediction is not None
    hypercapnic = next(t for t in prediction.targets if t.band is TargetBand.HYPERCAPNIC_RISK)
    assert hypercapnic.fio2 == 0.21 and "on room air" in hypercapnic.note
    assert hypercapnic.fio2_ceiling == 0.21 and "passes 92%" in hypercapnic.note


def test_predictions_carry_the_caution_and_say_which_model() -> None:
    _, prediction = _prediction(0.15, 40.0)
    assert prediction.caution == CAUTION
    assert "does not replace titration to the measured SpO2" in CAUTION
    assert "not a diagnosis" in CAUTION and "clinical judgement" in CAUTION
    assert "two parameters" in prediction.model_label


def test_an_effective_shunt_alone_still_predicts_and_says_so() -> None:
    one = TitrationPoint(START, inspired(0.4), pao2_mmhg=70.0, paco2_mmhg=40.0)
    prediction = predict_oxygen_response(response=fit_oxygen_response(points=[one]))
    assert prediction is not None and prediction.model is FitModel.EFFECTIVE_SHUNT
    assert "not separated" in prediction.model_label


def test_nothing_fitted_predicts_nothing_and_a_bad_step_is_refused() -> None:
    from service.exceptions import ImpossibleValueError

    empty = fit_oxygen_response(points=[])
    assert predict_oxygen_response(response=empty) is None
    _, _ = _prediction(0.1, 10.0)
    with pytest.raises(ImpossibleValueError, match="fio2_step"):
        predict_oxygen_response(response=empty, fio2_step=0.0)
