"""Healthy adults' reference values: PaO2 for age, a/A ratio at any FiO2, PaCO2 by altitude."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.exceptions import ImpossibleValueError
from service.physiology import reference as r
from service.physiology.atmosphere import barometric_pressure_west_mmhg
from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.reference import Residence
from tests import titration_reference as tr


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


REFERENCE = r.reference_alveolar_po2_mmhg()
PURE_OXYGEN = alveolar_po2_mmhg(fio2=1.0, paco2_mmhg=40.0, water_vapour_mmhg=47.12)


def test_room_air_aa_limit_for_age_is_consistent_with_published_healthy_ranges() -> None:
    # "Gas exchange in two male age groups…", Upsala J Med Sci (abstract): supine on air, A-a
    # 4.3 (−1 to 14) mmHg at mean age 25 and 23.4 (15–33) at 50. The limits for age lie above
    # the group means, and the 50-year limit within the observed range.
    limit_25 = r.normal_aa_gradient(age_years=25.0, alveolar_po2_mmhg=REFERENCE).upper_limit
    limit_50 = r.normal_aa_gradient(age_years=50.0, alveolar_po2_mmhg=REFERENCE).upper_limit
    assert 4.3 < limit_25 < 23.4
    assert 23.4 < limit_50 <= 33.0


@pytest.mark.parametrize("age", [18.0, 30.0, 45.0, 62.0, 80.0])
def test_at_the_reference_alveolar_po2_the_normal_is_the_room_air_reference(age: float) -> None:
    # By construction of the healthy-lung model: it meets the Cerveri 1995 anchor on air.
    normal = r.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=REFERENCE)
    expected = REFERENCE - r.expected_pao2_mmhg(age_years=age)
    assert normal.expected == pytest.approx(expected, abs=0.05)
    limit = REFERENCE - r.pao2_lower_limit_mmhg(age_years=age)
    assert normal.upper_limit == pytest.approx(limit, abs=0.05)


def test_on_pure_oxygen_the_normal_meets_the_healthy_men_of_50() -> None:
    # Upsala J Med Sci: on 100 % oxygen, A-a 93 (60–108) mmHg at mean age 50. The limit meets
    # the top of the range; the expected value stays within it (the room-air anchor limits the
    # shunt a little, as for the young).
    normal = r.normal_aa_gradient(age_years=50.0, alveolar_po2_mmhg=PURE_OXYGEN)
    assert 60.0 <= normal.expected <= 93.0
    assert normal.upper_limit == pytest.approx(108.0, abs=1.0)


def test_young_adults_keep_the_room_air_anchor_over_the_oxygen_one() -> None:
    # At 25 the published oxygen mean (48 mmHg) needs more shunt than the room-air reference
    # allows; the room-air anchor wins and the expected gradient on oxygen stays below 48,
    # while the upper limit reaches the top of the range (60).
    normal = r.normal_aa_gradient(age_years=25.0, alveolar_po2_mmhg=PURE_OXYGEN)
    assert normal.expected < 48.0
    assert normal.upper_limit == pytest.approx(60.0, abs=1.0)


@pytest.mark.parametrize(("age", "published_mean"), [(25.0, 30.0), (55.0, 55.0)])
def test_published_healthy_gradients_on_oxygen_are_within_the_limit(
    age: float, published_mean: float
) -> None:
    # A-a of normal subjects at FiO2 0.4 and above (journal abstract: mean 30 mmHg in young
    # healthy subjects, 55 in older ones): the limit at FiO2 0.4 must not call them abnormal.
    alveolar = alveolar_po2_mmhg(fio2=0.4, paco2_mmhg=40.0, water_vapour_mmhg=47.12)
    limit = r.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=alveolar).upper_limit
    assert limit > published_mean


def test_the_gradient_plateaus_once_haemoglobin_is_saturated() -> None:
    # 12 healthy men at six alveolar PO2s: the gradient rose from 100 to 174 mmHg and then did
    # not change significantly up to 526 mmHg.
    at_110 = r.normal_aa_gradient(age_years=40.0, alveolar_po2_mmhg=110.0).upper_limit
    at_300 = r.normal_aa_gradient(age_years=40.0, alveolar_po2_mmhg=300.0).upper_limit
    at_526 = r.normal_aa_gradient(age_years=40.0, alveolar_po2_mmhg=526.0).upper_limit
    assert abs(at_526 - at_300) < 0.15 * at_526
    assert at_300 - at_110 > 20.0


def test_at_altitude_the_normal_narrows_with_the_alveolar_po2() -> None:
    # Healthy subjects in controlled hypoxia (J Lab Clin Med 1984;104:685): the A-a gradient
    # narrows as the alveolar PO2 falls; below the reference the a/A ratio is held [calc].
    low = r.normal_aa_gradient(age_years=35.0, alveolar_po2_mmhg=31.3)
    air = r.normal_aa_gradient(age_years=35.0, alveolar_po2_mmhg=REFERENCE)
    assert low.upper_limit == pytest.approx(air.upper_limit * 31.3 / REFERENCE)


@given(age=st.floats(18.0, 100.0), low=st.floats(20.0, 700.0), rise=st.floats(0.5, 300.0))
def test_more_alveolar_oxygen_never_lowers_the_normal_pao2(
    age: float, low: float, rise: float
) -> None:
    # The healthy lung's lowest normal PaO2 (PAO2 minus the limit) rises with the alveolar
    # PO2: oxygen never lowers the PaO2 the rules expect of a healthy person.
    def lowest_normal(alveolar: float) -> float:
        limit = r.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=alveolar).upper_limit
        return alveolar - limit

    assert lowest_normal(low + rise) >= lowest_normal(low) - 1e-6


def test_a_normal_lung_on_a_28_percent_mask_is_not_called_a_defect() -> None:
    # A 40-year-old on FiO2 0.28 with the PaO2 a healthy lung of that age gives [calc]: the
    # A-a gradient exceeds the room-air bedside rule (age/4 + 4 = 14, common practice) but not
    # the limit at this alveolar PO2.
    alveolar = alveolar_po2_mmhg(fio2=0.28, paco2_mmhg=40.0, water_vapour_mmhg=47.12)
    normal = r.normal_aa_gradient(age_years=40.0, alveolar_po2_mmhg=alveolar)
    assert normal.expected > 40.0 / 4 + 4
    assert normal.expected < normal.upper_limit


def test_a_healthy_51_year_old_on_pure_oxygen_is_within_the_limit() -> None:
    # Toffaletti & Zavorsky, Physiol Rep 2026 (abstract): healthy man, 51 y, FiO2 1.0, PB 752,
    # PaO2 587, PaCO2 38 → PAO2 667 [calc], A-a 80.
    alveolar = alveolar_po2_mmhg(fio2=1.0, paco2_mmhg=38.0, barometric_mmhg=752.0)
    limit = r.normal_aa_gradient(age_years=51.0, alveolar_po2_mmhg=alveolar).upper_limit
    assert alveolar - 587.0 < limit


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
        # Pereira-Victorio CJ et al., Rev Peru Med Exp Salud Publica 2014: Cusco (3,350 m),
        # 30.6 mmHg; upper limit the 97.5th centile in Quito (2,800 m), 36.1 mmHg (Moina Veloz
        # AP et al., Univ Med Pinareña 2023).
        (3350.0, 30.6, 36.1),
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


# --- The healthy lung, solved again independently ------------------------------------------
# The same two published anchors (Cerveri 1995 on air; the two male age groups on 100 %
# oxygen, mean 48 and 93 mmHg, ranges up to 60 and 108, at 25 and 50 years) met by a lung with
# a shunt and a V/Q term, solved here with scipy's Brent method over the oxygen cascade of
# tests/titration_reference.py (Severinghaus 1979 eq. 1, content 1.34 Hb S + 0.003 PO2,
# the shunt equation with an a-v difference of 5 mL/dL, Hb 14 g/dL: Benatar, Hewlett & Nunn
# 1973; water vapour from the iapws package), not with the service's bisections.


def _cerveri_mean(age: float) -> float:
    a = max(age, 18.0)
    return 83.4 if a >= 75.0 else 143.6 - 0.39 * a - 0.56 * 25.0 - 0.57 * 40.0


def _cerveri_fifth_centile(age: float) -> float:
    a = max(age, 18.0)
    return 68.4 if a >= 75.0 else _cerveri_mean(a) - 1.645 * 7.48


def _oxygen_anchor(age: float, young: float, old: float) -> float:
    a = min(max(age, 18.0), 50.0)  # a line through the groups at 25 and 50, held from 50
    return young + (old - young) * (a - 25.0) / 25.0


def _independent_lung(age: float, limit: bool) -> tuple[float, float]:
    """(shunt fraction, V/Q term in mm[Hg]) meeting both anchors; the room-air one alone,
    with no V/Q term, where the oxygen anchor's shunt already lowers the room-air PaO2."""
    ph2o = tr.ph2o_37_mmhg()
    air, oxygen = tr.alveolar(0.21, 40.0, 760.0, ph2o), tr.alveolar(1.0, 40.0, 760.0, ph2o)
    if limit:
        air_target = _cerveri_fifth_centile(age)
        oxygen_target = oxygen - _oxygen_anchor(age, 60.0, 108.0)
    else:
        air_target = _cerveri_mean(age)
        oxygen_target = oxygen - _oxygen_anchor(age, 48.0, 93.0)
    return tr.lung_meeting(air, oxygen, air_target, oxygen_target)


@pytest.mark.parametrize("limit", [False, True])
@pytest.mark.parametrize("age", [18, 25, 40, 50, 60, 74, 80])
def test_the_healthy_lung_meets_both_anchors_as_an_independent_solve_does(
    age: int, limit: bool
) -> None:
    shunt, drop = _independent_lung(float(age), limit)
    lung = r.healthy_lung(age, limit, 0.8)
    assert lung.shunt_odds / (1.0 + lung.shunt_odds) == pytest.approx(shunt, abs=1e-6)
    assert lung.vq_drop_mmhg == pytest.approx(drop, abs=1e-3)
    assert r.vq_drop_upper_limit_mmhg(age_years=float(age)) == pytest.approx(
        _independent_lung(float(age), True)[1], abs=1e-3
    )


@pytest.mark.parametrize("fio2", [0.3, 0.6, 1.0])
@pytest.mark.parametrize("age", [30.0, 50.0, 65.0])
def test_the_normal_gradient_on_oxygen_is_the_independent_lungs(age: float, fio2: float) -> None:
    alveolar = tr.alveolar(fio2, 40.0, 760.0, tr.ph2o_37_mmhg())
    mean, limit = _independent_lung(age, False), _independent_lung(age, True)
    normal = r.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=alveolar)
    assert normal.expected == pytest.approx(alveolar - tr.pao2_at(alveolar, *mean), abs=0.01)
    assert normal.upper_limit == pytest.approx(alveolar - tr.pao2_at(alveolar, *limit), abs=0.01)


@pytest.mark.parametrize(
    ("age", "method"),
    [
        # Cerveri 1995 studied 40–74 years; from 75 a separate mean and centile; adults from 18.
        (17.0, "Cerveri 1995 adult reference, age 18 used"),
        (18.0, "Cerveri 1995 regression, extrapolated below 40 years"),
        (38.0, "Cerveri 1995 regression, extrapolated below 40 years"),
        (40.0, "Cerveri 1995 regression (40–74 years)"),
        (42.0, "Cerveri 1995 regression (40–74 years)"),
        (74.5, "Cerveri 1995 regression (40–74 years)"),
        (75.0, "Cerveri 1995, 75 years and over"),
    ],
)
def test_the_reference_method_names_the_age_band_cerveri_studied(age: float, method: str) -> None:
    assert r.reference_method(age) == method


def _west_mmhg(altitude_m: float) -> float:
    # West JB, J Appl Physiol 1996;81:1850: PB = exp(6.63268 − 0.1112 h − 0.00149 h²), h in km.
    h = altitude_m / 1000.0
    return math.exp(6.63268 - 0.1112 * h - 0.00149 * h * h)


def _between(pb: float, high: tuple[float, float, float], low: tuple[float, float, float]) -> float:
    """Linear in barometric pressure between (altitude, mean, upper) anchors [calc]; the mean."""
    t = (_west_mmhg(high[0]) - pb) / (_west_mmhg(high[0]) - _west_mmhg(low[0]))
    return high[1] + t * (low[1] - high[1])


def test_resident_paco2_between_and_beyond_the_published_towns() -> None:
    # Mexico City 2,240 m, 30.2 (Cid-Juárez 2023); Cusco 3,350 m, 30.6 (Pereira-Victorio 2014),
    # upper limit 36.1 (Moina Veloz 2023, Quito); held level to 4,500 m and beyond.
    pb = _west_mmhg(2800.0)
    found = r.expected_paco2(barometric_mmhg=pb, residence=Residence.RESIDENT)
    assert found.mean_mmhg == pytest.approx(
        _between(pb, (2240.0, 30.2, 0.0), (3350.0, 30.6, 0.0)), abs=1e-9
    )
    for altitude in (4000.0, 4500.0, 5200.0):
        high = r.expected_paco2(barometric_mmhg=_west_mmhg(altitude), residence=Residence.RESIDENT)
        assert (high.mean_mmhg, high.upper_limit_mmhg) == pytest.approx((30.6, 36.1), abs=1e-9)


def test_visitor_paco2_stays_at_sea_level_to_3000_m_then_falls_towards_the_climbers() -> None:
    # Rahn & Otis 1949 (from memory): little hyperventilation below about 3,000 m; Grocott
    # 2009: 13.3 (upper 15.7) mmHg at 8,400 m; linear in pressure between [calc].
    for altitude in (1500.0, 3000.0):
        low = r.expected_paco2(barometric_mmhg=_west_mmhg(altitude), residence=Residence.VISITOR)
        assert (low.mean_mmhg, low.upper_limit_mmhg) == pytest.approx((40.0, 45.0), abs=1e-9)
    pb = _west_mmhg(6000.0)
    found = r.expected_paco2(barometric_mmhg=pb, residence=Residence.VISITOR)
    assert found.mean_mmhg == pytest.approx(
        _between(pb, (3000.0, 40.0, 0.0), (8400.0, 13.3, 0.0)), abs=1e-9
    )
    summit = r.expected_paco2(barometric_mmhg=_west_mmhg(8400.0), residence=Residence.VISITOR)
    assert (summit.mean_mmhg, summit.upper_limit_mmhg) == pytest.approx((13.3, 15.7), abs=1e-9)


def test_the_method_names_the_anchor_a_pressure_falls_on() -> None:
    sea = r.expected_paco2(barometric_mmhg=_west_mmhg(0.0), residence=Residence.RESIDENT)
    assert sea.method == r.SEA_LEVEL_PACO2.source
    mexico = r.expected_paco2(barometric_mmhg=_west_mmhg(2240.0), residence=Residence.RESIDENT)
    assert mexico.mean_mmhg == pytest.approx(30.2, abs=1e-9)
    assert mexico.method.endswith(r.RESIDENT_PACO2[1].source)
