"""Expected PaCO2 for a metabolic disturbance, and bounds the data put on FiO2, PB and shunt."""

from __future__ import annotations

import pytest

from service.physiology import acid_base as ab
from service.physiology import gas_exchange as g
from service.physiology import oxygen_content as oc


@pytest.mark.parametrize(("hco3", "expected"), [(10.0, 23.0), (18.0, 35.0), (4.0, 14.0)])
def test_winters_formula(hco3: float, expected: float) -> None:
    # Albert, Dell & Winters, Ann Intern Med 1967;66:312: PaCO2 = 1.5 HCO3 + 8 ± 2.
    found = ab.expected_paco2_metabolic_acidosis_mmhg(hco3_mmol_l=hco3)
    assert found.expected == pytest.approx(expected)
    assert (found.low, found.high) == pytest.approx((expected - 2.0, expected + 2.0))


@pytest.mark.parametrize(("hco3", "expected"), [(24.0, 40.0), (34.0, 47.0), (40.0, 51.2)])
def test_metabolic_alkalosis_compensation(hco3: float, expected: float) -> None:
    # Berend, de Vries & Gans, N Engl J Med 2014;371:1434: PaCO2 = 40 + 0.7 (HCO3 − 24) ± 2.
    found = ab.expected_paco2_metabolic_alkalosis_mmhg(hco3_mmol_l=hco3)
    assert found.expected == pytest.approx(expected)


def test_lowest_fio2_makes_the_alveolar_po2_equal_the_arterial() -> None:
    # Inverting the full alveolar gas equation [calc]: at that FiO2, PAO2 = PaO2 − tolerance.
    for pao2, paco2, tol in ((150.0, 40.0, 0.0), (95.0, 65.0, 5.0), (300.0, 30.0, 5.0)):
        fio2 = g.lowest_fio2_for_pao2(
            arterial_po2_mmhg=pao2,
            paco2_mmhg=paco2,
            barometric_mmhg=760.0,
            water_vapour_mmhg=47.12,
            tolerance_mmhg=tol,
        )
        alveolar = g.alveolar_po2_mmhg(fio2=fio2, paco2_mmhg=paco2, water_vapour_mmhg=47.12)
        assert alveolar == pytest.approx(pao2 - tol, abs=1e-9)


def test_lowest_barometric_pressure_makes_the_alveolar_po2_equal_the_arterial() -> None:
    pb = g.lowest_barometric_for_pao2(
        arterial_po2_mmhg=58.0, paco2_mmhg=70.0, fio2=0.21, water_vapour_mmhg=47.12
    )
    alveolar = g.alveolar_po2_mmhg(
        fio2=0.21, paco2_mmhg=70.0, barometric_mmhg=pb, water_vapour_mmhg=47.12
    )
    assert alveolar == pytest.approx(58.0, abs=1e-9)
    # PaO2 58 with PaCO2 70 on air could not be drawn above about 500 m (PB < 722) [calc].
    assert 715.0 < pb < 730.0


@pytest.mark.parametrize(
    ("aa", "avd", "shunt"),
    [
        # The dissolved-oxygen shunt on 100 % oxygen, 0.003 A-a / (0.003 A-a + avd): the
        # bedside table of shunt against A-a on FiO2 1.0 (common practice; values [calc]).
        (100.0, 5.0, 0.0566),
        (200.0, 5.0, 0.1071),
        (400.0, 5.0, 0.1935),
        (400.0, 3.5, 0.2553),
    ],
)
def test_dissolved_oxygen_shunt_bound(aa: float, avd: float, shunt: float) -> None:
    bound = oc.shunt_fraction_dissolved_bound(aa_gradient_mmhg=aa, av_difference_ml_dl=avd)
    assert bound == pytest.approx(shunt, abs=5e-4)
    # About 5 % per 100 mmHg of A-a (common practice) within 1 point up to A-a 400.
    assert abs(bound * 100.0 - aa / 20.0) < 1.0 or avd != 5.0


def test_the_dissolved_bound_never_exceeds_the_content_equation_shunt() -> None:
    # With Hb 14 and PaO2 below the flat part of the curve, the full content equation gives a
    # larger shunt than the dissolved-oxygen bound (Berggren shunt equation [calc]).
    for pao2 in (60.0, 100.0, 300.0):
        alveolar = 673.0
        capillary = oc.oxygen_content_ml_dl(
            haemoglobin_g_dl=14.0, saturation=1.0, po2_mmhg=alveolar
        )
        from service.physiology.saturation import saturation_from_po2

        arterial = oc.oxygen_content_ml_dl(
            haemoglobin_g_dl=14.0, saturation=saturation_from_po2(po2_mmhg=pao2), po2_mmhg=pao2
        )
        full = oc.shunt_fraction(
            end_capillary_content_ml_dl=capillary,
            arterial_content_ml_dl=arterial,
            av_difference_ml_dl=5.0,
        )
        bound = oc.shunt_fraction_dissolved_bound(
            aa_gradient_mmhg=alveolar - pao2, av_difference_ml_dl=5.0
        )
        assert bound <= full + 1e-12
