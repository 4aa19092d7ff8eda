"""Alveolar gas equation, A-a gradient, age limits and oxygenation ratios."""

from __future__ import annotations

import pytest

from service.exceptions import ImpossibleValueError
from service.physiology import gas_exchange as g
from service.physiology.gas_exchange import AaGradientClass


@pytest.mark.parametrize(
    ("fio2", "pio2", "simplified", "full"),
    [
        # Worked values [calc] of the alveolar gas equation: PB 760, PaCO2 40, R 0.8, PH2O 47.
        (0.21, 149.7, 99.7, 101.8),
        (0.2093, 149.2, 99.2, 101.3),
        (0.40, 285.2, 235.2, 239.2),
        (1.00, 713.0, 663.0, 673.0),
    ],
)
def test_alveolar_gas_equation_worked_values(
    fio2: float, pio2: float, simplified: float, full: float
) -> None:
    assert g.inspired_po2_mmhg(fio2=fio2) == pytest.approx(pio2, abs=0.05)
    assert g.alveolar_po2_simplified_mmhg(fio2=fio2, paco2_mmhg=40.0) == pytest.approx(
        simplified, abs=0.05
    )
    assert g.alveolar_po2_mmhg(fio2=fio2, paco2_mmhg=40.0) == pytest.approx(full, abs=0.05)


def test_full_form_on_pure_oxygen_is_pb_minus_water_minus_paco2() -> None:
    # At FiO2 1.0 the bracket [FiO2 + (1 − FiO2)/R] is 1 (West JB, Respiratory Physiology).
    assert g.alveolar_po2_mmhg(fio2=1.0, paco2_mmhg=38.0, barometric_mmhg=752.0) == pytest.approx(
        752.0 - 47.0 - 38.0
    )


def test_simplified_form_is_ten_mmhg_low_on_pure_oxygen() -> None:
    # [calc]: the simplified form understates PAO2 by PaCO2 × 0.25 = 10 mmHg at FiO2 1.0.
    full = g.alveolar_po2_mmhg(fio2=1.0, paco2_mmhg=40.0)
    simplified = g.alveolar_po2_simplified_mmhg(fio2=1.0, paco2_mmhg=40.0)
    assert full - simplified == pytest.approx(10.0)


def test_alveolar_po2_on_the_everest_summit() -> None:
    # AMREE 1981 ("AMREE and alveolar gas sampling: 25 years on", 2007 review, abstract): at PB
    # 253, PACO2 7.5, the expedition calculated PAO2 35 mmHg; the full form with FiO2 0.2095, R 0.8
    # gives 34.1 [CALC].
    pao2 = g.alveolar_po2_mmhg(fio2=0.2095, paco2_mmhg=7.5, barometric_mmhg=253.0)
    assert pao2 == pytest.approx(34.1, abs=0.1)
    assert pao2 == pytest.approx(35.0, abs=1.0)


@pytest.mark.parametrize("simplified", [True, False])
def test_aa_gradient_at_8400_m_matches_grocott_2009(simplified: bool) -> None:
    # Grocott et al., NEJM 2009;360:140 (abstract): PB 272, mean PaO2 24.6, PaCO2 13.3,
    # mean calculated A-a 5.4 mmHg. Our recomputation gives 6.0–6.7 [calc]; ±1.5 mmHg allowed.
    form = g.alveolar_po2_simplified_mmhg if simplified else g.alveolar_po2_mmhg
    pao2 = form(fio2=0.21, paco2_mmhg=13.3, barometric_mmhg=272.0)
    aa = g.aa_gradient_mmhg(alveolar_po2_mmhg=pao2, arterial_po2_mmhg=24.6)
    assert aa == pytest.approx(5.4, abs=1.5)


def test_fever_lowers_alveolar_po2_by_about_one_mmhg_on_room_air() -> None:
    # [calc] with IAPWS-IF97: at 39 °C on room air PAO2 falls by about 1.2 mmHg.
    from service.physiology.water_vapour import water_vapour_pressure_mmhg

    at_37 = g.alveolar_po2_mmhg(
        fio2=0.21,
        paco2_mmhg=40.0,
        water_vapour_mmhg=water_vapour_pressure_mmhg(temperature_cel=37.0),
    )
    at_39 = g.alveolar_po2_mmhg(
        fio2=0.21,
        paco2_mmhg=40.0,
        water_vapour_mmhg=water_vapour_pressure_mmhg(temperature_cel=39.0),
    )
    assert at_37 - at_39 == pytest.approx(1.2, abs=0.1)


@pytest.mark.parametrize(
    ("age", "mellemgaard", "age_rule"),
    # Age-limit table [calc] from Mellemgaard K, Acta Physiol Scand 1966;67:10 (2.5 + 0.21 age) and
    # the age/4 + 4 rule (common practice).
    [(20, 6.7, 9.0), (40, 10.9, 14.0), (60, 15.1, 19.0), (80, 19.3, 24.0)],
)
def test_age_expected_aa_limits(age: float, mellemgaard: float, age_rule: float) -> None:
    assert g.aa_gradient_mean_for_age_mmhg(age_years=age) == pytest.approx(mellemgaard, abs=0.05)
    assert g.aa_gradient_age_rule_mmhg(age_years=age) == pytest.approx(age_rule)
    assert g.aa_gradient_upper_limit_mmhg(age_years=age) == pytest.approx(
        max(mellemgaard, age_rule), abs=0.05
    )


def test_aa_gradient_is_raised_only_above_both_age_limits() -> None:
    # Our convention (``classify_aa_gradient``): raised above the higher limit, borderline
    # between the two.
    assert g.classify_aa_gradient(aa_gradient_mmhg=10.0, age_years=40) is AaGradientClass.NORMAL
    assert g.classify_aa_gradient(aa_gradient_mmhg=12.0, age_years=40) is AaGradientClass.BORDERLINE
    assert g.classify_aa_gradient(aa_gradient_mmhg=14.5, age_years=40) is AaGradientClass.RAISED


def test_young_and_middle_aged_men_fall_on_either_side_of_the_limit() -> None:
    # "Gas exchange in two male age groups", Upsala J Med Sci (abstract):
    # mean A-a 4.3 mmHg at 25 y (normal) and 23.4 mmHg at 50 y (above the room-air limit).
    assert g.classify_aa_gradient(aa_gradient_mmhg=4.3, age_years=25) is AaGradientClass.NORMAL
    assert g.classify_aa_gradient(aa_gradient_mmhg=23.4, age_years=50) is AaGradientClass.RAISED


def test_aa_gradient_sign_convention() -> None:
    assert g.aa_gradient_mmhg(alveolar_po2_mmhg=101.8, arterial_po2_mmhg=90.0) == pytest.approx(
        11.8
    )
    assert g.aa_gradient_mmhg(alveolar_po2_mmhg=101.8, arterial_po2_mmhg=120.0) < 0


def test_arterial_alveolar_ratio() -> None:
    # Definition (a/A = PaO2 / PAO2, common practice); 90 / 101.8 = 0.884.
    assert g.arterial_alveolar_ratio(
        arterial_po2_mmhg=90.0, alveolar_po2_mmhg=101.8
    ) == pytest.approx(0.884, abs=0.001)


def test_pf_ratio_and_berlin_altitude_adjustment() -> None:
    # Berlin definition (JAMA 2012;307:2526): P/F in mmHg, × PB/760 above 1000 m.
    pf = g.pf_ratio_mmhg(arterial_po2_mmhg=60.0, fio2=0.4)
    assert pf == pytest.approx(150.0)
    assert g.pf_ratio_altitude_adjusted_mmhg(pf_ratio_mmhg=pf, barometric_mmhg=570.0) == (
        pytest.approx(112.5)
    )


def test_sf_ratio_uses_spo2_in_percent() -> None:
    # Rice et al., Chest 2007: S/F with SpO2 in percent; 94 % on FiO2 0.4 gives 235.
    assert g.sf_ratio(spo2=0.94, fio2=0.4) == pytest.approx(235.0)


@pytest.mark.parametrize(
    ("sf", "pf"),
    [
        # Rice et al., Chest 2007;132:410 (abstract): S/F 235 ↔ P/F 200 and S/F 315 ↔ P/F 300
        # were the cut-offs; through S/F = 64 + 0.84 P/F they map to 203.6 and 298.8 [CALC].
        (235.0, 203.6),
        (315.0, 298.8),
    ],
)
def test_rice_sf_to_pf_anchor_points(sf: float, pf: float) -> None:
    assert g.pf_from_sf(sf_ratio=sf) == pytest.approx(pf, abs=0.05)
    assert g.sf_from_pf(pf_ratio_mmhg=g.pf_from_sf(sf_ratio=sf)) == pytest.approx(sf)


def test_rice_maps_severe_ards_pf_100_to_the_global_definitions_sf_148() -> None:
    # Matthay et al., AJRCCM 2024;209:37 (global ARDS definition): severe P/F ≤ 100 or S/F ≤ 148;
    # 148 = 64 + 0.84 × 100 (Rice TW et al., Chest 2007;132:410) [calc].
    assert g.sf_from_pf(pf_ratio_mmhg=100.0) == pytest.approx(148.0)


@pytest.mark.parametrize(
    ("kwargs", "argument"),
    [
        ({"fio2": 1.2, "paco2_mmhg": 40.0}, "fio2"),
        ({"fio2": 0.21, "paco2_mmhg": -4.0}, "paco2_mmhg"),
        ({"fio2": 0.21, "paco2_mmhg": 40.0, "barometric_mmhg": -760.0}, "barometric_mmhg"),
        ({"fio2": 0.21, "paco2_mmhg": 40.0, "barometric_mmhg": 40.0}, "barometric_mmhg"),
        ({"fio2": 0.21, "paco2_mmhg": 40.0, "respiratory_quotient": 3.0}, "respiratory_quotient"),
    ],
)
def test_alveolar_po2_rejects_impossible_input(kwargs: dict[str, float], argument: str) -> None:
    with pytest.raises(ImpossibleValueError, match=argument):
        g.alveolar_po2_mmhg(**kwargs)


def test_age_limits_reject_impossible_ages() -> None:
    with pytest.raises(ImpossibleValueError, match="age_years"):
        g.aa_gradient_upper_limit_mmhg(age_years=-3)
