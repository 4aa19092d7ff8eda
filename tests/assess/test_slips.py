"""The slips a mutation review found no test for, each now caught (invented values).

Each test names what a clinician would have been told had the slip happened.
"""

from __future__ import annotations

from datetime import date

import pytest

from service.assess.assess import windows
from service.assess.derive import GasFacts, derive_gas_facts
from service.assess.pairing import pair_gases
from service.config import Settings
from service.intake.model import Intake
from service.intake.model import Quantity as Q
from service.physiology import constants as c
from service.physiology.oxygen_content import end_capillary_saturation
from service.physiology.oxygen_delivery import OxygenDevice, estimate_fio2
from service.physiology.saturation import saturation_from_po2

from .builders import intake, m

TODAY = date(2026, 11, 20)


def gases(data: Intake, **settings: object) -> list[GasFacts]:
    s = Settings(**settings)  # type: ignore[arg-type]
    pairing = pair_gases(data, windows=windows(Settings()))
    return [
        derive_gas_facts(g, patient=data.patient, settings=s, today=TODAY) for g in pairing.gases
    ]


def gas(*measurements: object, **settings: object) -> GasFacts:
    (found,) = gases(intake(*measurements), **settings)  # type: ignore[arg-type]
    return found


@pytest.mark.parametrize(
    ("fio2", "on_oxygen"),
    [(0.21, False), (0.2149, False), (0.2151, True), (0.22, True), (0.28, True)],
)
def test_room_air_is_not_supplemental_oxygen(fio2: float, on_oxygen: bool) -> None:
    # Room air read as oxygen turns "hypoxaemia unknown" into "present" with a spurious
    # finding. FiO2 is charted in whole percent: 21 % is air, 22 % is oxygen; the line sits
    # half a point above air (ROOM_AIR_FIO2_TOLERANCE, common practice).
    found = gas(m(Q.ARTERIAL_PO2, 70.0), m(Q.FIO2, fio2))
    assert found.facts["on_supplemental_oxygen"] is on_oxygen
    assert pytest.approx(0.215) == c.ROOM_AIR_FIO2 + c.ROOM_AIR_FIO2_TOLERANCE


def test_saturations_reach_the_rules_in_percent() -> None:
    # SaO2 0.97 read as 0.97 % would raise occult hypoxaemia on a normal gas; an exertional
    # nadir read as a fraction would make a 3-point fall look like none.
    found = gas(
        m(Q.ARTERIAL_PO2, 95.0),
        m(Q.ARTERIAL_SO2, 0.97),
        m(Q.SPO2, 0.96),
        m(Q.SPO2_EXERTIONAL_BASELINE, 0.95),
        m(Q.SPO2_EXERTIONAL_NADIR, 0.92),
        m(Q.METHAEMOGLOBIN, 0.05),
        m(Q.CARBOXYHAEMOGLOBIN, 0.02),
        m(Q.MIXED_VENOUS_SO2, 0.70),
        m(Q.DLCO_PERCENT_PREDICTED, 0.55),
    )
    facts = found.facts
    assert facts["arterial_so2"] == pytest.approx(97.0)
    assert facts["spo2"] == pytest.approx(96.0)
    assert facts["spo2_exertional_baseline"] == pytest.approx(95.0)
    assert facts["spo2_exertional_nadir"] == pytest.approx(92.0)
    assert facts["exertional_desaturation"] == pytest.approx(3.0)
    assert facts["spo2_sao2_difference"] == pytest.approx(-1.0)
    assert facts["spo2_sao2_gap"] == pytest.approx(1.0)
    assert facts["methaemoglobin"] == pytest.approx(5.0)
    assert facts["carboxyhaemoglobin"] == pytest.approx(2.0)
    assert facts["mixed_venous_so2"] == pytest.approx(70.0)
    assert facts["dlco_percent_predicted"] == pytest.approx(55.0)


def test_methaemoglobin_carries_no_oxygen_in_the_content() -> None:
    # [calc] CaO2 = 1.34 x Hb x SaO2 x (1 - COHb - MetHb) + 0.003 x PaO2 (content equation,
    # fractional saturation; common practice): 1.34 x 15 x 0.97 x 0.90 + 0.003 x 95 = 17.83.
    found = gas(
        m(Q.ARTERIAL_PO2, 95.0),
        m(Q.ARTERIAL_SO2, 0.97),
        m(Q.HAEMOGLOBIN, 15.0),
        m(Q.METHAEMOGLOBIN, 0.10),
    )
    content = found.derived["arterial-o2-content"]
    assert content.value == pytest.approx(1.34 * 15 * 0.97 * 0.90 + 0.003 * 95, abs=1e-9)
    assert "times (1 − COHb − MetHb)" in content.method
    plain = gas(m(Q.ARTERIAL_PO2, 95.0), m(Q.ARTERIAL_SO2, 0.97), m(Q.HAEMOGLOBIN, 15.0))
    assert plain.derived["arterial-o2-content"].value == pytest.approx(19.78, abs=0.005)


def test_the_reservoir_mask_estimate_is_mid_range() -> None:
    # BTS 2017 device table (via secondary summaries): a non-rebreather at 10-15 L/min gives
    # 0.60-0.90; the estimate is the middle, 0.75.
    estimate = estimate_fio2(device=OxygenDevice.NON_REBREATHER_MASK, flow_l_min=12.0)
    assert (estimate.fio2, estimate.low, estimate.high) == (0.75, 0.60, 0.90)
    found = gas(
        m(Q.ARTERIAL_PO2, 90.0),
        m(Q.OXYGEN_DEVICE, "non-rebreather-mask"),
        m(Q.OXYGEN_FLOW, 15.0),
    )
    assert found.facts["fio2"] == 0.75
    assert found.fio2_range == (0.60, 0.90)


@pytest.mark.parametrize(
    ("pao2", "uses_measured"), [(140.0, False), (149.9, False), (150.0, True), (160.0, True)]
)
def test_the_flat_curve_switch_is_at_an_arterial_po2_of_150(
    pao2: float, uses_measured: bool
) -> None:
    # Above a PaO2 of about 150 mmHg the blood is on the flat part of the curve: the
    # end-capillary saturation is the measured SaO2 (common practice), below it the curve at
    # PAO2 (Severinghaus 1979).
    found = end_capillary_saturation(
        alveolar_po2_mmhg=400.0, arterial_po2_mmhg=pao2, arterial_saturation=0.95
    )
    expected = 0.95 if uses_measured else saturation_from_po2(po2_mmhg=400.0)
    assert found == expected
    assert c.FLAT_CURVE_PO2_MMHG == 150.0


def test_a_true_shunt_is_named_only_on_an_fio2_of_about_one() -> None:
    # Below near-pure oxygen the shunt equation measures venous admixture (shunt plus low-V/Q
    # units), which oxygen corrects (Benatar SR, Hewlett AM, Nunn JF, Br J Anaesth
    # 1973;45:711). 2.0 (rules/CHANGELOG.md, docs/clinical-logic.md) files it as
    # `venous-admixture` at every FiO2 and adds a `shunt-fraction` only on FiO2 >= 0.99.
    base = (m(Q.ARTERIAL_PO2, 200.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.HAEMOGLOBIN, 14.0))
    on_air = gas(*base, m(Q.FIO2, 0.6))
    on_oxygen = gas(*base, m(Q.FIO2, 0.99))
    assert on_air.derived["venous-admixture"].method.endswith("; venous admixture")
    assert "shunt-fraction" not in on_air.derived and "shunt_fraction" not in on_air.facts
    assert on_oxygen.derived["venous-admixture"].method.endswith("; shunt (on near-pure oxygen)")
    assert on_oxygen.facts["shunt_fraction"] == on_oxygen.facts["venous_admixture"]
    assert "shunt-fraction" in on_oxygen.derived
    nearly = gas(*base, m(Q.FIO2, 0.95))
    assert nearly.derived["venous-admixture"].method.endswith("; venous admixture")
    assert "shunt_fraction" not in nearly.facts
    assert c.TRUE_SHUNT_MIN_FIO2 == 0.99
