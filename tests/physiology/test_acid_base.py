"""Henderson consistency and expected compensation."""

from __future__ import annotations

import pytest

from service.exceptions import ImpossibleValueError
from service.physiology.acid_base import (
    Chronicity,
    expected_hco3_mmol_l,
    henderson_check,
    hydrogen_ion_from_ph,
    hydrogen_ion_nmol_l,
    ph_from_hydrogen_ion,
)


def test_normal_gas_has_40_nmol_of_hydrogen_ion() -> None:
    # Kassirer & Bleich, NEJM 1965: [H+] = 24 × PaCO2 / HCO3; 24 × 40 / 24 = 40 nmol/L,
    # pH 7.40 (common practice: "40 nmol/L at pH 7.40").
    assert hydrogen_ion_nmol_l(paco2_mmhg=40.0, hco3_mmol_l=24.0) == pytest.approx(40.0)
    assert ph_from_hydrogen_ion(hydrogen_ion_nmol_l=40.0) == pytest.approx(7.398, abs=0.001)


def test_grocott_summit_gas_is_internally_consistent() -> None:
    # Grocott MPW et al., N Engl J Med 2009;360:140 at 8400 m; PaCO2 13.3 from the abstract, pH
    # 7.53 and HCO3 10.8 from memory: HCO3 10.8 → [H+] 29.6 nmol/L, pH 7.53 [CALC].
    check = henderson_check(ph=7.53, paco2_mmhg=13.3, hco3_mmol_l=10.8)
    assert check.ph_implied == pytest.approx(7.53, abs=0.005)
    assert abs(check.ph_difference) < 0.01


def test_inconsistent_gas_shows_a_large_difference() -> None:
    # A transcription slip (HCO3 34 instead of 24 with pH 7.40, PaCO2 40) [CALC]:
    # implied [H+] = 24 × 40 / 34 = 28.2 nmol/L, pH 7.549; implied HCO3 from pH 7.40 = 24.1.
    check = henderson_check(ph=7.40, paco2_mmhg=40.0, hco3_mmol_l=34.0)
    assert check.ph_difference == pytest.approx(-0.149, abs=0.002)
    assert check.hco3_difference_mmol_l == pytest.approx(9.9, abs=0.1)


def test_hydrogen_ion_and_ph_round_trip() -> None:
    assert ph_from_hydrogen_ion(hydrogen_ion_nmol_l=hydrogen_ion_from_ph(ph=7.21)) == (
        pytest.approx(7.21)
    )


@pytest.mark.parametrize(
    ("paco2", "chronicity", "hco3"),
    [
        # [calc] from Narins & Emmett, Medicine 1980;59:161 / Berend et al. NEJM 2014;371:1434:
        # PaCO2 60 → HCO3 26 acute, 31–32 chronic.
        (60.0, Chronicity.ACUTE, 26.0),
        (60.0, Chronicity.CHRONIC, 31.0),
        # Respiratory alkalosis: −2 per 10 acute, −4 to −5 per 10 chronic (same sources).
        (30.0, Chronicity.ACUTE, 22.0),
        (30.0, Chronicity.CHRONIC, 19.5),
    ],
)
def test_expected_hco3_for_respiratory_disturbances(
    paco2: float, chronicity: Chronicity, hco3: float
) -> None:
    assert expected_hco3_mmol_l(paco2_mmhg=paco2, chronicity=chronicity) == pytest.approx(hco3)


def test_henderson_rejects_impossible_values() -> None:
    with pytest.raises(ImpossibleValueError, match="hco3_mmol_l"):
        hydrogen_ion_nmol_l(paco2_mmhg=40.0, hco3_mmol_l=0.0)
    with pytest.raises(ImpossibleValueError, match="ph"):
        hydrogen_ion_from_ph(ph=9.1)
