"""The tolerances around expected values and bounds: the ±2 mmHg of the alkalosis
compensation, a tolerance on the lowest barometric pressure, the FiO2 from which the
dissolved-oxygen shunt bound is offered, and the normal cascade where no alveolar oxygen is
left."""

from __future__ import annotations

import pytest

from service.intake.model import Quantity as Q
from service.physiology import acid_base as ab
from service.physiology import gas_exchange as g
from service.physiology.cascade import normal_cascade
from tests.assess.builders import m
from tests.assess.test_slips import gas


@pytest.mark.parametrize(("hco3", "expected"), [(24.0, 40.0), (34.0, 47.0), (40.0, 51.2)])
def test_the_alkalosis_compensation_is_two_mmhg_either_side(hco3: float, expected: float) -> None:
    # Berend, de Vries & Gans, N Engl J Med 2014;371:1434: PaCO2 = 40 + 0.7 (HCO3 − 24) ± 2.
    found = ab.expected_paco2_metabolic_alkalosis_mmhg(hco3_mmol_l=hco3)
    assert (found.low, found.high) == pytest.approx((expected - 2.0, expected + 2.0))


@pytest.mark.parametrize("tolerance", [3.0, 8.0])
def test_the_lowest_pressure_leaves_the_alveolar_po2_a_tolerance_below_the_arterial(
    tolerance: float,
) -> None:
    # The full alveolar gas equation written out (R 0.8): PAO2 = FiO2 (PB − PH2O) −
    # PaCO2 (FiO2 + (1 − FiO2) / R); at the lowest PB it equals PaO2 − tolerance [calc].
    pb = g.lowest_barometric_for_pao2(
        arterial_po2_mmhg=58.0,
        paco2_mmhg=50.0,
        fio2=0.21,
        water_vapour_mmhg=47.12,
        tolerance_mmhg=tolerance,
    )
    alveolar = 0.21 * (pb - 47.12) - 50.0 * (0.21 + 0.79 / 0.8)
    assert alveolar == pytest.approx(58.0 - tolerance, abs=1e-9)


def _sea_level_alveolar(fio2: float) -> float:
    # PB 760, PaCO2 40, PH2O 47 (West, Respiratory Physiology), R 0.8.
    return fio2 * (760.0 - 47.0) - 40.0 * (fio2 + (1.0 - fio2) / 0.8)


@pytest.mark.parametrize("fio2", [0.85, 0.89, 0.90, 0.95, 1.0])
def test_the_dissolved_shunt_bound_is_offered_where_the_capillary_blood_is_saturated(
    fio2: float,
) -> None:
    # The bound counts only dissolved oxygen, so it needs fully saturated end-capillary blood
    # and low-V/Q units oxygenated: an alveolar PO2 of about 600 mmHg, reached at sea level
    # with a normal PaCO2 from FiO2 0.90 (600.7 mmHg; 593.5 at 0.89) [calc].
    found = gas(m(Q.ARTERIAL_PO2, 250.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, fio2))
    offered = found.facts.get("shunt_dissolved_bound") is not None
    assert offered is (_sea_level_alveolar(fio2) >= 600.0)


def test_with_exactly_no_alveolar_oxygen_left_there_is_no_normal_line() -> None:
    # FiO2 0.25, R 1, PB 207, PH2O 47: PAO2 = 0.25 × 160 − 40 × 1 = 0 exactly (the alveolar
    # gas equation); no oxygen is left for a normal arterial PO2.
    cascade = normal_cascade(
        fio2=0.25,
        barometric_mmhg=207.0,
        water_vapour_mmhg=47.0,
        respiratory_quotient=1.0,
        age_years=50.0,
    )
    assert cascade.alveolar_mmhg is None and cascade.arterial_mmhg is None
    assert "no alveolar oxygen is left" in cascade.missing["alveolar"]
    assert cascade.inspired_mmhg == pytest.approx(0.25 * 160.0)
