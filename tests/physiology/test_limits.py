"""Where each physiology function stops: the limits of the possible and of each model.

A limit moved by a few percent changes what the service refuses, so each is pinned here at
its edge: accepted on the limit, refused a little beyond it. Where a limit is a fact of the
world (a saturation cannot exceed 100 %, the Everest summit's pressure, the reach of a
device) the anchor is named; the rest are the project's stated limits of the possible
(``service/physiology/bounds.py``, each with its reason there).
"""

from __future__ import annotations

from collections.abc import Callable

import pytest
from ambiance import Atmosphere

from service.exceptions import ImpossibleValueError, OutsideModelRangeError
from service.physiology import acid_base as ab
from service.physiology import bounds
from service.physiology import gas_exchange as gx
from service.physiology import oxygen_content as oc
from service.physiology import saturation as sat
from service.physiology.atmosphere import (
    barometric_pressure_isa_mmhg,
    barometric_pressure_west_mmhg,
)
from service.physiology.oxygen_delivery import OxygenDevice, estimate_fio2
from service.physiology.water_vapour import water_vapour_pressure_mmhg


def test_the_stated_limits_of_the_possible() -> None:
    # Pinned on purpose: changing one changes what is refused at intake and in the rules.
    assert bounds.PRESSURE_BAROMETRIC_MMHG == (200.0, 1200.0)
    assert bounds.PARTIAL_PRESSURE_MMHG == (0.0, 1200.0)
    assert bounds.CARBON_DIOXIDE_MMHG == (0.0, 250.0)
    assert bounds.HAEMOGLOBIN_G_DL == (1.0, 26.0)
    assert bounds.BODY_TEMPERATURE_CEL == (15.0, 45.0)
    assert bounds.AGE_YEARS == (0.0, 130.0)
    assert bounds.PH == (6.3, 8.0)
    assert bounds.HYDROGEN_ION_NMOL_L == (1.0, 1000.0)
    assert bounds.BICARBONATE_MMOL_L == (1.0, 80.0)
    assert bounds.RESPIRATORY_QUOTIENT == (0.6, 1.2)
    assert bounds.ALTITUDE_M == (-500.0, 9000.0)
    assert bounds.FRACTION == (0.0, 1.0)


def test_pressures_of_the_habitable_world_are_possible() -> None:
    # Everest summit 253 mmHg (West 1983); West 1996 at 9,000 m about 230 mmHg.
    at_9000 = barometric_pressure_west_mmhg(altitude_m=9000.0)
    assert gx.inspired_po2_mmhg(fio2=0.21, barometric_mmhg=at_9000) > 0
    for pb in (bounds.PRESSURE_BAROMETRIC_MMHG[0], 253.0, 1200.0):
        assert gx.inspired_po2_mmhg(fio2=0.21, barometric_mmhg=pb) > 0
    for pb in (190.0, 1250.0):
        with pytest.raises(ImpossibleValueError, match="barometric_mmhg"):
            gx.inspired_po2_mmhg(fio2=0.21, barometric_mmhg=pb)


def test_altitude_models_cover_the_dead_sea_to_everest_and_the_isa_its_troposphere() -> None:
    # ambiance implements ISO 2533: the ISA holds to the tropopause at 11 km geopotential.
    assert barometric_pressure_west_mmhg(altitude_m=-500.0) > 760.0
    assert barometric_pressure_isa_mmhg(altitude_m=-500.0) == pytest.approx(
        float(Atmosphere(-500.0).pressure[0]) / 133.322, rel=1e-4
    )
    assert barometric_pressure_isa_mmhg(altitude_m=10_900.0) == pytest.approx(
        float(Atmosphere(10_900.0).pressure[0]) / 133.322, rel=1e-4
    )
    for call in (barometric_pressure_west_mmhg, barometric_pressure_isa_mmhg):
        with pytest.raises(OutsideModelRangeError):
            call(altitude_m=-530.0)
    with pytest.raises(OutsideModelRangeError):
        barometric_pressure_west_mmhg(altitude_m=9100.0)


def test_saturations_above_100_percent_are_impossible() -> None:
    calls: tuple[Callable[[], float], ...] = (
        lambda: sat.po2_from_saturation(saturation=1.05),
        lambda: sat.impute_pao2_from_spo2(spo2=1.05),
        lambda: gx.sf_ratio(spo2=1.05, fio2=0.21),
        lambda: oc.fractional_saturation(functional_saturation=1.05),
    )
    for call in calls:
        with pytest.raises(ImpossibleValueError):
            call()
    assert gx.sf_ratio(spo2=1.0, fio2=0.21) == pytest.approx(476.2, abs=0.1)


def test_henderson_stays_within_the_ph_a_sample_can_have() -> None:
    # pH = 9 - log10 [H+] (nmol/L): [H+] 1 to 1000 is pH 9 to 6.
    assert ab.ph_from_hydrogen_ion(hydrogen_ion_nmol_l=1000.0) == pytest.approx(6.0)
    assert ab.ph_from_hydrogen_ion(hydrogen_ion_nmol_l=1.0) == pytest.approx(9.0)
    for h in (0.95, 1050.0):
        with pytest.raises(ImpossibleValueError):
            ab.ph_from_hydrogen_ion(hydrogen_ion_nmol_l=h)
    assert ab.expected_hco3_mmol_l(paco2_mmhg=250.0, chronicity=ab.Chronicity.ACUTE) == 45.0
    with pytest.raises(ImpossibleValueError):
        ab.expected_hco3_mmol_l(paco2_mmhg=260.0, chronicity=ab.Chronicity.ACUTE)
    with pytest.raises(ImpossibleValueError):
        ab.hydrogen_ion_nmol_l(paco2_mmhg=260.0, hco3_mmol_l=24.0)


def test_the_ratio_needs_a_positive_alveolar_po2() -> None:
    with pytest.raises(ImpossibleValueError, match="positive"):
        gx.arterial_alveolar_ratio(arterial_po2_mmhg=40.0, alveolar_po2_mmhg=0.0)
    assert gx.arterial_alveolar_ratio(arterial_po2_mmhg=600.0, alveolar_po2_mmhg=1200.0) == 0.5
    with pytest.raises(ImpossibleValueError):
        gx.arterial_alveolar_ratio(arterial_po2_mmhg=600.0, alveolar_po2_mmhg=1250.0)


def test_an_aa_gradient_on_an_age_limit_is_not_above_it() -> None:
    # Mellemgaard 1966 mean at 40 years: 2.5 + 0.21 x 40 = 10.9; age/4 + 4 = 14.
    mean = gx.aa_gradient_mean_for_age_mmhg(age_years=40)
    rule = gx.aa_gradient_age_rule_mmhg(age_years=40)
    assert mean == pytest.approx(10.9)
    assert rule == 14.0
    assert gx.classify_aa_gradient(aa_gradient_mmhg=mean, age_years=40) is gx.AaGradientClass.NORMAL
    assert gx.classify_aa_gradient(aa_gradient_mmhg=rule, age_years=40) is (
        gx.AaGradientClass.BORDERLINE
    )


def test_hufner_factors_in_published_use_are_accepted_and_no_others() -> None:
    # 1.306 (measured, lowest in published use) to 1.39 (theoretical); 1.34 convention.
    for hufner in (1.306, 1.34, 1.39):
        oc.oxygen_content_ml_dl(
            haemoglobin_g_dl=15.0, saturation=0.97, po2_mmhg=95.0, hufner_ml_per_g=hufner
        )
    for hufner in (1.25, 1.45):
        with pytest.raises(ImpossibleValueError, match="hufner"):
            oc.oxygen_content_ml_dl(
                haemoglobin_g_dl=15.0, saturation=0.97, po2_mmhg=95.0, hufner_ml_per_g=hufner
            )


def test_assumed_av_differences_from_half_to_fifteen_ml_dl() -> None:
    for difference in (0.5, 15.0):
        oc.shunt_fraction(
            end_capillary_content_ml_dl=21.0,
            arterial_content_ml_dl=20.0,
            av_difference_ml_dl=difference,
        )
    for difference in (0.47, 15.8):
        with pytest.raises(ImpossibleValueError, match="av_difference"):
            oc.shunt_fraction(
                end_capillary_content_ml_dl=21.0,
                arterial_content_ml_dl=20.0,
                av_difference_ml_dl=difference,
            )


def test_venous_content_equal_to_end_capillary_is_impossible() -> None:
    with pytest.raises(ImpossibleValueError, match="below end-capillary"):
        oc.shunt_fraction(
            end_capillary_content_ml_dl=20.0,
            arterial_content_ml_dl=19.0,
            mixed_venous_content_ml_dl=20.0,
        )


def test_each_device_estimate_holds_only_for_its_flows() -> None:
    # Wettstein 2005 (nasal cannula 1-6 L/min); BTS 2017 device table, via secondary summaries
    # (simple mask 5-10, reservoir mask 10-15 L/min); high-flow systems reach 60-80 L/min.
    ranges = {
        OxygenDevice.NASAL_CANNULA: (1.0, 6.0),
        OxygenDevice.SIMPLE_MASK: (5.0, 10.0),
        OxygenDevice.NON_REBREATHER_MASK: (10.0, 15.0),
    }
    for device, (low, high) in ranges.items():
        estimate_fio2(device=device, flow_l_min=low)
        estimate_fio2(device=device, flow_l_min=high)
        for flow in (low * 0.95, high * 1.05):
            with pytest.raises(OutsideModelRangeError):
                estimate_fio2(device=device, flow_l_min=flow)
    with pytest.raises(ImpossibleValueError):
        estimate_fio2(device=OxygenDevice.NASAL_CANNULA, flow_l_min=84.0)
    with pytest.raises(OutsideModelRangeError):
        estimate_fio2(device=OxygenDevice.NASAL_CANNULA, flow_l_min=80.0)  # possible, not modelled


def test_a_simple_mask_estimate_carries_ten_points_either_way() -> None:
    # BTS 2017 (secondary summary): 40-60 % over 5-10 L/min, +/- 10 points.
    estimate = estimate_fio2(device=OxygenDevice.SIMPLE_MASK, flow_l_min=7.5)
    assert (estimate.low, estimate.fio2, estimate.high) == pytest.approx((0.40, 0.50, 0.60))


def test_a_set_fio2_device_names_the_flow_it_was_sent_with() -> None:
    with pytest.raises(OutsideModelRangeError) as caught:
        estimate_fio2(device=OxygenDevice.VENTURI_MASK, flow_l_min=8.0)
    assert caught.value.value == 8.0


def test_water_vapour_is_possible_from_deep_hypothermia_to_hyperpyrexia() -> None:
    for temperature in (15.0, 45.0):
        assert water_vapour_pressure_mmhg(temperature_cel=temperature) > 0
    for temperature in (14.0, 46.0):
        with pytest.raises(ImpossibleValueError):
            water_vapour_pressure_mmhg(temperature_cel=temperature)
