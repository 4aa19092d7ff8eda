"""Oxygen content, end-capillary content and the shunt equation."""

from __future__ import annotations

import pytest

from service.exceptions import ImpossibleValueError
from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.oxygen_content import (
    compare_shunt_at_two_fio2,
    end_capillary_content_ml_dl,
    oxygen_content_ml_dl,
    shunt_fraction,
)
from service.physiology.saturation import saturation_from_po2
from tests.physiology.iso_shunt import ISO_SHUNT_TABLE, pao2_on_iso_shunt_line


@pytest.mark.parametrize(("hufner", "content"), [(1.34, 19.90), (1.39, 20.63)])
def test_arterial_content_worked_value(hufner: float, content: float) -> None:
    # [calc] from the content equation (k × Hb × SaO2 + 0.003 PaO2): Hb 15, SaO2 0.975, PaO2 100.
    assert oxygen_content_ml_dl(
        haemoglobin_g_dl=15.0, saturation=0.975, po2_mmhg=100.0, hufner_ml_per_g=hufner
    ) == pytest.approx(content, abs=0.005)


def test_arterial_content_at_8400_m_matches_grocott_2009() -> None:
    # Grocott et al., NEJM 2009 (abstract): mean CaO2 145.8 mL/L at 8400 m. Hb 19.3 and
    # SaO2 54.0 % are from memory; with Hüfner 1.39 they give 14.56 mL/dL [calc].
    content = oxygen_content_ml_dl(
        haemoglobin_g_dl=19.3, saturation=0.540, po2_mmhg=24.6, hufner_ml_per_g=1.39
    )
    assert content * 10 == pytest.approx(145.8, abs=1.0)


def _shunt_on_pure_oxygen(*, aa_mmhg: float, av_difference: float) -> float:
    """Shunt for a given A-a on FiO2 1.0 at sea level, PaCO2 40, Hb 15, saturations from the
    curve on both sides (how the table below was computed [calc])."""
    pao2_alv = alveolar_po2_mmhg(fio2=1.0, paco2_mmhg=40.0)
    pao2 = pao2_alv - aa_mmhg
    capillary = end_capillary_content_ml_dl(
        haemoglobin_g_dl=15.0, alveolar_po2_mmhg=pao2_alv, arterial_po2_mmhg=pao2
    )
    arterial = oxygen_content_ml_dl(
        haemoglobin_g_dl=15.0, saturation=saturation_from_po2(po2_mmhg=pao2), po2_mmhg=pao2
    )
    return shunt_fraction(
        end_capillary_content_ml_dl=capillary,
        arterial_content_ml_dl=arterial,
        av_difference_ml_dl=av_difference,
    )


@pytest.mark.parametrize(
    ("aa", "shunt_avd5", "shunt_avd35"),
    # Table [calc] of the Berggren shunt equation on FiO2 1.0. (The "fully saturated" shortcut,
    # 0.003 A-a / (0.003 A-a + avd), gives 0.1–0.3 points less from A-a 200 up; the table
    # itself was computed with curve saturations, as here.)
    [(50, 2.9, 4.1), (100, 5.7, 7.9), (200, 10.8, 14.7), (300, 15.4, 20.6), (400, 19.6, 25.8)],
)
def test_shunt_on_pure_oxygen_matches_the_derivation_table(
    aa: float, shunt_avd5: float, shunt_avd35: float
) -> None:
    assert _shunt_on_pure_oxygen(aa_mmhg=aa, av_difference=5.0) * 100 == pytest.approx(
        shunt_avd5, abs=0.06
    )
    assert _shunt_on_pure_oxygen(aa_mmhg=aa, av_difference=3.5) * 100 == pytest.approx(
        shunt_avd35, abs=0.08
    )
    shortcut = 0.003 * aa / (0.003 * aa + 5.0) * 100
    assert _shunt_on_pure_oxygen(aa_mmhg=aa, av_difference=5.0) * 100 == pytest.approx(
        shortcut, abs=0.3
    )


@pytest.mark.parametrize("aa", [100.0, 200.0, 300.0])
def test_shunt_agrees_with_the_five_percent_per_100_mmhg_rule(aa: float) -> None:
    # Common practice: on FiO2 1.0 at sea level, shunt % ≈ A-a / 20 (valid with avd ≈ 5,
    # PaO2 > 150; the table above shows the gap grows to 0.8 points at A-a 300 [calc]).
    assert _shunt_on_pure_oxygen(aa_mmhg=aa, av_difference=5.0) * 100 == pytest.approx(
        aa / 20.0, abs=1.0
    )


def test_shunt_in_a_healthy_adult_breathing_pure_oxygen() -> None:
    # Toffaletti & Zavorsky, Physiol Rep 2026 (abstract): 51-year-old, FiO2 1.0, PB 752,
    # PaO2 587, PaCO2 38, SaO2 0.993, Hb 15.2: shunt 2.8–5.2 % across four methods.
    # Our recomputation [calc]: 4.6 % by the content method with ScO2 = SaO2 and avd 5.
    pao2_alv = alveolar_po2_mmhg(fio2=1.0, paco2_mmhg=38.0, barometric_mmhg=752.0)
    capillary = end_capillary_content_ml_dl(
        haemoglobin_g_dl=15.2,
        alveolar_po2_mmhg=pao2_alv,
        arterial_po2_mmhg=587.0,
        arterial_saturation=0.993,
    )
    arterial = oxygen_content_ml_dl(haemoglobin_g_dl=15.2, saturation=0.993, po2_mmhg=587.0)
    shunt = shunt_fraction(
        end_capillary_content_ml_dl=capillary,
        arterial_content_ml_dl=arterial,
        av_difference_ml_dl=5.0,
    )
    assert shunt * 100 == pytest.approx(4.6, abs=0.05)
    assert 2.8 <= shunt * 100 <= 5.2


@pytest.mark.parametrize(("shunt", "fio2", "pao2"), ISO_SHUNT_TABLE)
def test_shunt_equation_reproduces_the_iso_shunt_table(
    shunt: float, fio2: float, pao2: float
) -> None:
    # Iso-shunt diagram (Benatar, Hewlett & Nunn, Br J Anaesth 1973;45:711), regenerated [calc]:
    # see tests/physiology/iso_shunt.py for the assumptions.
    assert pao2_on_iso_shunt_line(shunt=shunt, fio2=fio2) == pytest.approx(pao2, abs=1.5)


def test_true_shunt_stays_constant_across_two_fio2() -> None:
    # Iso-shunt principle (Benatar 1973): on one iso-shunt line, raising FiO2 leaves the
    # computed admixture unchanged (the two-FiO2 comparison built on it).
    comparison = compare_shunt_at_two_fio2(fio2_a=1.0, shunt_a=0.30, fio2_b=0.4, shunt_b=0.30)
    assert comparison.lower_fio2 == 0.4
    assert comparison.change == pytest.approx(0.0)
    falling = compare_shunt_at_two_fio2(fio2_a=0.4, shunt_a=0.22, fio2_b=1.0, shunt_b=0.06)
    # An admixture that falls substantially (22 % → 6 %) points to low-V/Q units (iso-shunt
    # principle, Benatar 1973; invented example).
    assert falling.change == pytest.approx(-0.16)


def test_end_capillary_uses_measured_saturation_only_on_the_flat_part_of_the_curve() -> None:
    # Common practice: take ScO2 = SaO2 above a PO2 of about 150 mmHg. Applied to the
    # *arterial* PO2 it keeps dyshaemoglobin out of the shunt; applied to PAO2 it would hide the
    # shunt of a hypoxaemic patient on oxygen. A hypoxaemic patient (PaO2 55, SaO2 0.88) on FiO2
    # 0.6 must still be computed from the curve at PAO2.
    capillary = end_capillary_content_ml_dl(
        haemoglobin_g_dl=15.0,
        alveolar_po2_mmhg=380.0,
        arterial_po2_mmhg=55.0,
        arterial_saturation=0.88,
    )
    assert capillary == pytest.approx(1.34 * 15 * saturation_from_po2(po2_mmhg=380) + 1.14)


def test_shunt_requires_exactly_one_venous_input() -> None:
    with pytest.raises(ValueError, match="exactly one"):
        shunt_fraction(end_capillary_content_ml_dl=20.0, arterial_content_ml_dl=19.0)


def test_shunt_rejects_venous_content_above_capillary() -> None:
    with pytest.raises(ImpossibleValueError, match="below end-capillary"):
        shunt_fraction(
            end_capillary_content_ml_dl=20.0,
            arterial_content_ml_dl=19.0,
            mixed_venous_content_ml_dl=21.0,
        )


def test_content_rejects_impossible_haemoglobin_and_hufner_factor() -> None:
    with pytest.raises(ImpossibleValueError, match="haemoglobin_g_dl"):
        oxygen_content_ml_dl(haemoglobin_g_dl=150.0, saturation=0.97, po2_mmhg=90.0)
    with pytest.raises(ImpossibleValueError, match="hufner_ml_per_g"):
        oxygen_content_ml_dl(
            haemoglobin_g_dl=15.0, saturation=0.97, po2_mmhg=90.0, hufner_ml_per_g=2.0
        )


def test_fractional_saturation_takes_dyshaemoglobins_off_the_functional_value() -> None:
    # Co-oximetry definitions (common practice): FO2Hb = sO2 × (1 − FCOHb − FMetHb).
    # sO2 0.975 with COHb 18 % leaves 0.975 × 0.82 = 0.7995 of total Hb carrying O2 [calc].
    from service.physiology.oxygen_content import fractional_saturation

    assert fractional_saturation(
        functional_saturation=0.975, carboxyhaemoglobin=0.18
    ) == pytest.approx(0.7995)
    assert fractional_saturation(functional_saturation=0.9) == 0.9
    with pytest.raises(ImpossibleValueError):
        fractional_saturation(functional_saturation=0.9, carboxyhaemoglobin=0.7, methaemoglobin=0.5)
