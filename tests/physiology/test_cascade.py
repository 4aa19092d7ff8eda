"""The normal oxygen cascade: each step from the inspired gas to the arterial blood for a
healthy person of the same age breathing the same gas."""

from __future__ import annotations

import pytest

from service.physiology import constants as c
from service.physiology.cascade import normal_cascade
from service.physiology.gas_exchange import alveolar_po2_mmhg


@pytest.mark.parametrize(
    ("fio2", "pio2", "pao2"),
    [
        # Worked values of the alveolar gas equation [calc]: PB 760, PaCO2 40, R 0.8, PH2O 47 →
        # FiO2 0.21: PIO2 149.7, PAO2 (full form) 101.8; 0.40: 285.2, 239.2; 1.00: 713.0, 673.0.
        (0.21, 149.7, 101.8),
        (0.40, 285.2, 239.2),
        (1.00, 713.0, 673.0),
    ],
)
def test_normal_line_matches_the_alveolar_gas_equation_worked_values(
    fio2: float, pio2: float, pao2: float
) -> None:
    normal = normal_cascade(
        fio2=fio2, barometric_mmhg=760.0, age_years=None, water_vapour_mmhg=47.0
    )
    assert normal.inspired_mmhg == pytest.approx(pio2, abs=0.05)
    assert normal.alveolar_mmhg == pytest.approx(pao2, abs=0.05)


def test_normal_arterial_is_a_healthy_persons_pao2_for_age() -> None:
    normal = normal_cascade(
        fio2=0.21, barometric_mmhg=760.0, age_years=68.0, water_vapour_mmhg=47.0
    )
    # A healthy 68-year-old on air at sea level: Cerveri I et al., Am J Respir Crit Care Med
    # 1995;152:934, PaO2 = 143.6 - 0.39 x 68 - 0.56 x BMI 25 - 0.57 x PaCO2 40 = 80.28 mmHg.
    cerveri = 143.6 - 0.39 * 68 - 0.56 * 25 - 0.57 * 40
    assert normal.arterial_mmhg == pytest.approx(cerveri, abs=0.3)
    assert normal.aa_limit_mmhg == pytest.approx(101.8 - cerveri, abs=0.3)
    assert normal.mixed_venous_mmhg == c.NORMAL_MIXED_VENOUS_PO2_MMHG == 40.0


def test_normal_line_breathes_the_same_gas_at_altitude() -> None:
    # Same PB and FiO2 as the patient: at 570 mmHg the normal inspired PO2 is low too.
    normal = normal_cascade(
        fio2=0.21, barometric_mmhg=570.0, age_years=30.0, water_vapour_mmhg=47.0
    )
    assert normal.inspired_mmhg == pytest.approx(0.21 * (570.0 - 47.0))
    assert normal.alveolar_mmhg == pytest.approx(
        alveolar_po2_mmhg(fio2=0.21, paco2_mmhg=40.0, barometric_mmhg=570.0)
    )
    # Below the sea-level alveolar PO2 the healthy a/A ratio holds (Gilbert R, Keighley JF
    # 1974, from memory): arterial = alveolar x Cerveri's PaO2 at 30 / the reference PAO2.
    cerveri = 143.6 - 0.39 * 30 - 0.56 * 25 - 0.57 * 40
    assert normal.alveolar_mmhg is not None
    reference = alveolar_po2_mmhg(fio2=0.21, paco2_mmhg=40.0, barometric_mmhg=760.0)
    expected = normal.alveolar_mmhg * cerveri / reference
    assert normal.arterial_mmhg == pytest.approx(expected, abs=0.3)


def test_no_age_no_normal_arterial_and_it_says_why() -> None:
    normal = normal_cascade(fio2=0.21, barometric_mmhg=760.0, age_years=None)
    assert normal.arterial_mmhg is None
    assert "age not known" in normal.missing["arterial"]


def test_no_fio2_no_normal_line() -> None:
    normal = normal_cascade(fio2=None, barometric_mmhg=760.0, age_years=50.0)
    assert (normal.inspired_mmhg, normal.alveolar_mmhg, normal.arterial_mmhg) == (None, None, None)
    assert normal.missing["inspired"] == "FiO2 not known"


def test_no_normal_line_where_paco2_40_would_leave_no_alveolar_oxygen() -> None:
    # PB 272 mmHg (about 8,400 m), room air: 0.21 × (272 − 47) − 40 × 1.2 < 0.
    normal = normal_cascade(
        fio2=0.21, barometric_mmhg=272.0, age_years=36.0, water_vapour_mmhg=47.0
    )
    assert normal.inspired_mmhg == pytest.approx(47.25)
    assert normal.alveolar_mmhg is None and normal.arterial_mmhg is None
    assert "no alveolar oxygen is left" in normal.missing["alveolar"]
