"""The fall of PaO2 below the healthy reference, split into inspired, ventilation, gas exchange."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.physiology import reference as r
from service.physiology.deficit import alveolar_bracket, partition_pao2_deficit
from service.physiology.gas_exchange import alveolar_po2_mmhg
from tests import titration_reference as tr

SEA_LEVEL = 760.0


def _normal_pao2(age: float, fio2: float, pb: float, paco2: float) -> float:
    """PaO2 of a healthy lung of this age at this alveolar PO2 [calc]."""
    alveolar = alveolar_po2_mmhg(
        fio2=fio2, paco2_mmhg=paco2, barometric_mmhg=pb, water_vapour_mmhg=47.12
    )
    return alveolar - r.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=alveolar).expected


def _air_ratio(age: float) -> float:
    return r.expected_pao2_mmhg(age_years=age) / r.reference_alveolar_po2_mmhg()


def test_the_reference_person_has_no_deficit() -> None:
    pao2 = r.expected_pao2_mmhg(age_years=40.0)
    d = partition_pao2_deficit(
        arterial_po2_mmhg=pao2,
        age_years=40.0,
        fio2=0.21,
        barometric_mmhg=SEA_LEVEL,
        expected_paco2_mmhg=40.0,
        paco2_mmhg=40.0,
    )
    for part in (d.fall, d.inspired, d.ventilation, d.gas_exchange, d.unattributed):
        assert part == pytest.approx(0.0, abs=0.05)
    assert d.gross < 0.05


def test_pure_hypoventilation_is_all_ventilation() -> None:
    # Alveolar gas equation (West): PaCO2 70 on air lowers PAO2 by 30 × (0.21 + 0.79/0.8) =
    # 35.9 mmHg; with the a/A ratio held, PaO2 falls by 35.9 × a/A [calc].
    age = 34.0
    pao2 = _normal_pao2(age, 0.21, SEA_LEVEL, 70.0)
    d = partition_pao2_deficit(
        arterial_po2_mmhg=pao2,
        age_years=age,
        fio2=0.21,
        barometric_mmhg=SEA_LEVEL,
        expected_paco2_mmhg=40.0,
        paco2_mmhg=70.0,
    )
    expected = 30.0 * alveolar_bracket(fio2=0.21, respiratory_quotient=0.8)
    assert d.ventilation == pytest.approx(expected * _air_ratio(age), abs=0.01)
    assert d.gas_exchange == pytest.approx(0.0, abs=0.01)
    assert d.inspired == pytest.approx(0.0, abs=0.01)
    assert d.share(d.ventilation) == pytest.approx(1.0, abs=1e-3)


def test_altitude_with_a_healthy_lung_is_all_inspired() -> None:
    # A resident at 2,240 m (PB 587.6, West 1996) with the expected PaCO2 there (30.2, Cid-Juárez
    # 2023) and a normal a/A: the whole fall is the setting's.
    pao2 = _normal_pao2(50.0, 0.21, 587.6, 30.2)
    d = partition_pao2_deficit(
        arterial_po2_mmhg=pao2,
        age_years=50.0,
        fio2=0.21,
        barometric_mmhg=587.6,
        expected_paco2_mmhg=30.2,
        paco2_mmhg=30.2,
    )
    assert d.fall > 15.0
    assert d.inspired == pytest.approx(d.fall, abs=0.01)
    assert d.ventilation == pytest.approx(0.0, abs=0.01)
    assert d.gas_exchange == pytest.approx(0.0, abs=0.01)


def test_oxygen_gives_a_credit_and_hides_a_defect() -> None:
    # On FiO2 0.6 a PaO2 of 90 is "normal" but the a/A ratio is far below the limit: the
    # inspired part is a large credit and the gas-exchange part large and positive [calc].
    d = partition_pao2_deficit(
        arterial_po2_mmhg=90.0,
        age_years=60.0,
        fio2=0.6,
        barometric_mmhg=SEA_LEVEL,
        expected_paco2_mmhg=40.0,
        paco2_mmhg=40.0,
    )
    assert d.fall < 0.0
    assert d.inspired < -200.0
    assert d.gas_exchange is not None and d.gas_exchange > 200.0
    assert d.share(d.gas_exchange) == pytest.approx(1.0)


def test_without_paco2_the_rest_is_unattributed() -> None:
    d = partition_pao2_deficit(
        arterial_po2_mmhg=55.0,
        age_years=60.0,
        fio2=0.21,
        barometric_mmhg=SEA_LEVEL,
        expected_paco2_mmhg=40.0,
        paco2_mmhg=None,
    )
    assert d.ventilation is None and d.gas_exchange is None
    assert d.inspired == pytest.approx(0.0, abs=0.01)
    assert d.unattributed == pytest.approx(d.fall)


@given(
    pao2=st.floats(20.0, 600.0),
    age=st.floats(18.0, 100.0),
    fio2=st.floats(0.15, 1.0),
    pb=st.floats(300.0, 800.0),
    paco2=st.floats(15.0, 120.0),
    expected_paco2=st.floats(13.0, 45.0),
    temperature_ph2o=st.floats(35.0, 60.0),
)
def test_the_parts_always_add_up_to_the_fall(
    pao2: float,
    age: float,
    fio2: float,
    pb: float,
    paco2: float,
    expected_paco2: float,
    temperature_ph2o: float,
) -> None:
    alveolar = alveolar_po2_mmhg(
        fio2=fio2, paco2_mmhg=paco2, barometric_mmhg=pb, water_vapour_mmhg=temperature_ph2o
    )
    if alveolar <= 0.0:
        return
    d = partition_pao2_deficit(
        arterial_po2_mmhg=pao2,
        age_years=age,
        fio2=fio2,
        barometric_mmhg=pb,
        expected_paco2_mmhg=expected_paco2,
        paco2_mmhg=paco2,
        water_vapour_mmhg=temperature_ph2o,
    )
    assert d.ventilation is not None and d.gas_exchange is not None
    assert d.inspired + d.ventilation + d.gas_exchange == pytest.approx(d.fall, abs=1e-6)
    # The gas-exchange part is the A-a gradient above the normal at this PAO2 [calc].
    normal = r.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=alveolar).expected
    assert d.gas_exchange == pytest.approx(alveolar - pao2 - normal, abs=1e-6)


def _at_altitude_by_hand(paco2: float | None) -> dict[str, float]:
    """A 64-year-old at PB 600 mm[Hg] on air, PaO2 50, expected PaCO2 36, worked out from the
    published equations alone [calc]: Cerveri 1995 for the expected PaO2; PH2O at 37 °C from
    the iapws package (IAPWS-IF97); PIO2 = FiO2 (PB − PH2O); the full alveolar gas equation,
    R 0.8 (West); below the reference alveolar PO2 the normal a/A ratio holds (Gilbert &
    Keighley 1974, from memory), so the normal gradient scales with the alveolar PO2."""
    ph2o = tr.ph2o_37_mmhg()
    expected = 143.6 - 0.39 * 64.0 - 0.56 * 25.0 - 0.57 * 40.0
    k = 0.21 + 0.79 / 0.8
    reference_alveolar = tr.alveolar(0.21, 40.0, 760.0, ph2o)
    reference_normal = reference_alveolar - expected

    def normal(alveolar: float) -> float:
        return reference_normal * alveolar / reference_alveolar

    setting_alveolar = tr.alveolar(0.21, 36.0, 600.0, ph2o)
    inspired = (
        (0.21 * (760.0 - ph2o) - 0.21 * (600.0 - ph2o))
        + (36.0 * k - 40.0 * k)
        + (normal(setting_alveolar) - reference_normal)
    )
    fall = expected - 50.0
    if paco2 is None:
        return {"inspired": inspired, "unattributed": fall - inspired}
    alveolar = tr.alveolar(0.21, paco2, 600.0, ph2o)
    ventilation = (paco2 - 36.0) * k + (normal(alveolar) - normal(setting_alveolar))
    gas_exchange = (alveolar - 50.0) - normal(alveolar)
    return {
        "inspired": inspired,
        "ventilation": ventilation,
        "gas_exchange": gas_exchange,
        "unattributed": fall - inspired - ventilation - gas_exchange,
    }


@pytest.mark.parametrize("paco2", [None, 34.0])
def test_the_parts_at_altitude_are_the_worked_ones(paco2: float | None) -> None:
    d = partition_pao2_deficit(
        arterial_po2_mmhg=50.0,
        age_years=64.0,
        fio2=0.21,
        barometric_mmhg=600.0,
        expected_paco2_mmhg=36.0,
        paco2_mmhg=paco2,
    )
    expected = _at_altitude_by_hand(paco2)
    for name, value in expected.items():
        assert getattr(d, name) == pytest.approx(value, abs=1e-4), name  # PH2O to 1e-5
    if paco2 is not None:
        assert d.unattributed == pytest.approx(0.0, abs=1e-9)


def test_no_share_when_nothing_lowers_the_pao2() -> None:
    # PaO2 300 on FiO2 0.5 at sea level, no PaCO2: every part is a credit (negative), so
    # there is nothing to share out.
    d = partition_pao2_deficit(
        arterial_po2_mmhg=300.0,
        age_years=64.0,
        fio2=0.5,
        barometric_mmhg=SEA_LEVEL,
        expected_paco2_mmhg=40.0,
        paco2_mmhg=None,
    )
    assert d.inspired < 0.0 and d.unattributed < 0.0
    assert d.gross == 0.0
    assert d.share(d.inspired) is None
