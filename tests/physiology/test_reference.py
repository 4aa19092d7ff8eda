"""Healthy adults' reference values: PaO2 for age, a/A ratio at any FiO2, PaCO2 by altitude."""

from __future__ import annotations

import pytest

from service.exceptions import ImpossibleValueError
from service.physiology import reference as r
from service.physiology.atmosphere import barometric_pressure_west_mmhg
from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.reference import Residence


@pytest.mark.parametrize(
    ("age", "expected"),
    [
        # Cerveri I et al., Am J Respir Crit Care Med 1995;152:934 (abstract): PaO2 =
        # 143.6 − 0.39 age − 0.56 BMI − 0.57 PaCO2, here with BMI 25 and PaCO2 40 [calc].
        (40.0, 143.6 - 0.39 * 40 - 0.56 * 25 - 0.57 * 40),
        (60.0, 143.6 - 0.39 * 60 - 0.56 * 25 - 0.57 * 40),
        (74.0, 143.6 - 0.39 * 74 - 0.56 * 25 - 0.57 * 40),
    ],
)
def test_expected_pao2_follows_the_cerveri_regression(age: float, expected: float) -> None:
    assert r.expected_pao2_mmhg(age_years=age) == pytest.approx(expected, abs=1e-9)
    # Lower limit: the one-sided 5th centile, mean − 1.645 × SEE (SEE 7.48 mmHg, Cerveri 1995).
    assert r.pao2_lower_limit_mmhg(age_years=age) == pytest.approx(expected - 12.3046, abs=1e-3)


@pytest.mark.parametrize("age", [75.0, 82.0, 96.0])
def test_from_75_years_the_published_mean_and_fifth_centile_apply(age: float) -> None:
    # Cerveri 1995 (abstract): ≥ 75 years, no dependence on age: 83.4 ± 9.15, 5th centile 68.4.
    assert r.expected_pao2_mmhg(age_years=age) == 83.4
    assert r.pao2_lower_limit_mmhg(age_years=age) == 68.4


def test_a_healthy_85_year_old_with_pao2_72_is_within_normal_limits() -> None:
    # The 5th centile for ≥ 75 years is 68.4 mmHg (Cerveri 1995): PaO2 72 is not hypoxaemia,
    # although it is below the 80 mmHg line of the textbook bands.
    assert r.pao2_lower_limit_mmhg(age_years=85.0) < 72.0 < 80.0


def test_the_reference_falls_with_age_and_stops_at_18() -> None:
    ages = [18.0, 30.0, 45.0, 60.0, 74.0]
    limits = [r.pao2_lower_limit_mmhg(age_years=a) for a in ages]
    assert limits == sorted(limits, reverse=True)
    assert r.expected_pao2_mmhg(age_years=10.0) == r.expected_pao2_mmhg(age_years=18.0)
    with pytest.raises(ImpossibleValueError):
        r.expected_pao2_mmhg(age_years=-1.0)


def test_reference_alveolar_po2_is_the_sea_level_room_air_value() -> None:
    # Full alveolar gas equation, PB 760, FiO2 0.21, PaCO2 40, R 0.8, PH2O 47.12 (IAPWS-IF97
    # at 37 °C): 101.8 mmHg [calc; the textbook table gives 101.8 with PH2O 47].
    assert r.reference_alveolar_po2_mmhg() == pytest.approx(101.8, abs=0.05)


def test_room_air_aa_limit_for_age_is_consistent_with_published_healthy_ranges() -> None:
    # "Gas exchange in two male age groups…", Upsala J Med Sci (abstract): supine on air, A-a
    # 4.3 (−1 to 14) mmHg at mean age 25 and 23.4 (15–33) at 50. The limits for age lie above
    # the group means, and the 50-year limit within the observed range.
    limit_25 = r.reference_alveolar_po2_mmhg() - r.pao2_lower_limit_mmhg(age_years=25.0)
    limit_50 = r.reference_alveolar_po2_mmhg() - r.pao2_lower_limit_mmhg(age_years=50.0)
    assert 4.3 < limit_25 < 23.4
    assert 23.4 < limit_50 <= 33.0


@pytest.mark.parametrize(
    ("age", "pao2", "aa_gradient"),
    [
        # Same study on 100 % oxygen: the lowest PaO2 was 574 (young; A-a 48, range 31–60) and
        # 492 mmHg (middle-aged; A-a 93, range 60–108). PAO2 ≈ PaO2 + A-a of the group mean.
        (25.0, 574.0, 611.0 + 48.0),
        (50.0, 492.0, 573.0 + 93.0),
    ],
)
def test_the_a_a_ratio_limit_accepts_every_healthy_man_on_pure_oxygen(
    age: float, pao2: float, aa_gradient: float
) -> None:
    alveolar = aa_gradient  # the third column holds the group's alveolar PO2
    assert pao2 / alveolar >= r.a_a_ratio_lower_limit(age_years=age) - 0.005


def test_a_healthy_51_year_old_on_pure_oxygen_has_a_normal_ratio() -> None:
    # Toffaletti & Zavorsky, Physiol Rep 2026 (abstract): healthy man, 51 y, FiO2 1.0, PB 752,
    # PaO2 587, PaCO2 38 → PAO2 667 [calc], a/A 0.88.
    alveolar = alveolar_po2_mmhg(fio2=1.0, paco2_mmhg=38.0, barometric_mmhg=752.0)
    assert 587.0 / alveolar > r.a_a_ratio_lower_limit(age_years=51.0)


def test_a_normal_lung_on_a_28_percent_mask_is_not_called_a_defect() -> None:
    # A 40-year-old on FiO2 0.28 with the expected a/A for age [calc from Cerveri 1995]: the
    # A-a gradient (about 16 mmHg) exceeds the room-air limit of the bedside rule (age/4 + 4 =
    # 14, common practice) but not the FiO2-aware limit PAO2 × (1 − a/A limit).
    alveolar = alveolar_po2_mmhg(fio2=0.28, paco2_mmhg=40.0)
    pao2 = alveolar * r.expected_a_a_ratio(age_years=40.0)
    limit = r.aa_gradient_for_ratio_mmhg(
        alveolar_po2_mmhg=alveolar, a_a_ratio=r.a_a_ratio_lower_limit(age_years=40.0)
    )
    assert alveolar - pao2 > 40.0 / 4 + 4
    assert alveolar - pao2 < limit


def test_projected_room_air_pao2_keeps_the_ratio() -> None:
    # Gilbert & Keighley 1974: the a/A ratio predicts PaO2 at another FiO2 [calc].
    assert r.projected_pao2_mmhg(a_a_ratio=0.6, alveolar_po2_mmhg=100.0) == pytest.approx(60.0)
    assert r.projected_pao2_mmhg(a_a_ratio=0.6, alveolar_po2_mmhg=-3.0) == 0.0


@pytest.mark.parametrize(
    ("altitude", "mean", "upper"),
    [
        # Cid-Juárez S et al., Rev Invest Clin 2023: Mexico City (2,240 m), 30.2 ± 3.4 mmHg;
        # upper limit mean + 1.645 SD [calc].
        (2240.0, 30.2, 30.2 + 1.645 * 3.4),
        # Moina Veloz AP et al., Univ Med Pinareña 2023: Quito (2,800 m), men 32.5, women 31.5,
        # 97.5th centile in men 36.1 mmHg.
        (2800.0, 32.0, 36.1),
    ],
)
def test_resident_paco2_at_published_altitudes(altitude: float, mean: float, upper: float) -> None:
    pb = barometric_pressure_west_mmhg(altitude_m=altitude)
    found = r.expected_paco2(barometric_mmhg=pb, residence=Residence.RESIDENT)
    assert found.mean_mmhg == pytest.approx(mean, abs=1e-6)
    assert found.upper_limit_mmhg == pytest.approx(upper, abs=1e-6)


def test_sea_level_paco2_is_the_conventional_range() -> None:
    # Reference range 35–45 mmHg (common practice); BTS: hypercapnic failure above 6 kPa.
    for residence in Residence:
        found = r.expected_paco2(barometric_mmhg=760.0, residence=residence)
        assert (found.mean_mmhg, found.upper_limit_mmhg) == (40.0, 45.0)
        above = r.expected_paco2(barometric_mmhg=790.0, residence=residence)
        assert (above.mean_mmhg, above.upper_limit_mmhg) == (40.0, 45.0)


def test_residents_at_4000_m_run_a_low_paco2_and_visitors_start_higher() -> None:
    # Residents near 4,000 m: about 30–33 mmHg (Pereira-Victorio 2014, Cusco 3,350 m: 30.6);
    # a newly arrived visitor has barely begun to hyperventilate (Rahn & Otis 1949, from memory).
    pb = barometric_pressure_west_mmhg(altitude_m=4000.0)
    resident = r.expected_paco2(barometric_mmhg=pb, residence=Residence.RESIDENT)
    visitor = r.expected_paco2(barometric_mmhg=pb, residence=Residence.VISITOR)
    assert 30.0 <= resident.mean_mmhg <= 34.0
    assert resident.upper_limit_mmhg < 37.0 < visitor.upper_limit_mmhg


def test_acclimatised_climbers_at_8400_m() -> None:
    # Grocott MPW et al., N Engl J Med 2009;360:140: PB 272 mmHg, PaCO2 13.3 (10.3–15.7).
    found = r.expected_paco2(barometric_mmhg=272.0, residence=Residence.VISITOR)
    assert found.mean_mmhg == pytest.approx(13.3, abs=0.5)
    assert found.upper_limit_mmhg == pytest.approx(15.7, abs=0.5)
