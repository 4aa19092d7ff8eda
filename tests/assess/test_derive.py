"""Deriving one gas's facts: precedence of sources, flags, and the serial comparison."""

from __future__ import annotations

import dataclasses
from datetime import date
from pathlib import Path

import orjson
import pytest

from service.assess.assess import windows
from service.assess.derivation import Derived
from service.assess.derive import GasFacts, age_years, derive_gas_facts, with_fio2_raised
from service.assess.pairing import pair_gases
from service.config import Settings
from service.fhir.extract import read_bundle
from service.intake.model import Fio2Source, Intake
from service.intake.model import Quantity as Q

from .builders import intake, m

TODAY = date(2026, 11, 20)


def facts_of(data: Intake, **settings: object) -> list[GasFacts]:
    s = Settings(**settings)  # type: ignore[arg-type]
    pairing = pair_gases(data, windows=windows(s))
    return [
        derive_gas_facts(g, patient=data.patient, settings=s, today=TODAY) for g in pairing.gases
    ]


def test_sea_level_room_air_gas_matches_the_worked_alveolar_value() -> None:
    # [calc]: PB 760, FiO2 0.21, PaCO2 40, PH2O 47.12 (IAPWS at 37 °C) → PAO2 101.8.
    (gas,) = facts_of(
        intake(m(Q.ARTERIAL_PO2, 90.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21)),
        site_altitude_m=None,
    )
    assert gas.derived["alveolar-po2"].value == pytest.approx(101.8, abs=0.05)
    assert gas.facts["aa_gradient"] == pytest.approx(11.8, abs=0.05)
    assert gas.facts["barometric_pressure_assumed"] is True
    assert gas.barometric_source == "sea-level-assumed"
    assert gas.fio2_source == "measured"
    # Age 66 on 2026-11-20 (born 1960-05-01). On room air at sea level the upper limit is the
    # alveolar PO2 less the lower limit of PaO2 for age: Cerveri I et al., Am J Respir Crit
    # Care Med 1995;152:934, 143.6 - 0.39 x age - 0.56 x BMI 25 - 0.57 x PaCO2 40, less
    # 1.645 x SEE 7.48 (5th centile).
    assert gas.facts["age"] == 66.0
    lower_limit = 143.6 - 0.39 * 66 - 0.56 * 25 - 0.57 * 40 - 1.645 * 7.48
    limit = 101.8 - lower_limit
    assert gas.facts["aa_gradient_upper_limit"] == pytest.approx(limit, abs=0.1)
    assert gas.facts["aa_gradient_excess"] == pytest.approx(11.8 - limit, abs=0.1)


def test_barometric_pressure_precedence() -> None:
    base = (m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 35.0), m(Q.FIO2, 0.21))
    (measured,) = facts_of(
        intake(*base, m(Q.BAROMETRIC_PRESSURE, 600.0), m(Q.ALTITUDE, 3000.0)),
        site_altitude_m=1000.0,
    )
    assert (measured.barometric_source, measured.facts["barometric_pressure"]) == (
        "measured",
        600.0,
    )
    (model,) = facts_of(intake(*base, m(Q.ALTITUDE, 2500.0)), site_altitude_m=1000.0)
    assert model.barometric_source == "altitude-model"
    # West JB, J Appl Physiol 1996;81:1850 at 2500 m: 569.8 mmHg [calc].
    assert model.facts["barometric_pressure"] == pytest.approx(569.8, abs=0.1)
    assert model.facts["barometric_pressure_estimated"] is True
    (site,) = facts_of(intake(*base), site_altitude_m=1609.0)
    assert site.barometric_source == "site-setting"
    assert site.facts["barometric_pressure"] == pytest.approx(632.6, abs=0.1)


def test_fio2_precedence_and_flags() -> None:
    gas = (m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 35.0))
    (setting,) = facts_of(intake(*gas, m(Q.FIO2, 0.5, fio2_source=Fio2Source.VENTILATOR_SETTING)))
    assert setting.fio2_source == "ventilator-setting"
    (estimate,) = facts_of(intake(*gas, m(Q.OXYGEN_DEVICE, "nasal-cannula"), m(Q.OXYGEN_FLOW, 2.0)))
    assert estimate.fio2_source == "device-estimate"
    assert estimate.facts["fio2"] == pytest.approx(0.29)
    assert estimate.facts["fio2_estimated_from_flow"] is True
    # Wettstein 2005 envelope at 2 L/min: 0.282 (rapid breathing) to 0.316 (rest), widened
    # by the smallest between-patient SD they report at one flow (0.04).
    assert estimate.fio2_range == pytest.approx((0.282 - 0.04, 0.316 + 0.04))
    (missing,) = facts_of(intake(*gas))
    assert "fio2" not in missing.facts
    assert "alveolar_po2" not in missing.facts
    (assumed,) = facts_of(intake(*gas), assume_room_air=True)
    assert assumed.fio2_source == "site-setting"
    (stale,) = facts_of(intake(*gas, m(Q.FIO2, 0.4, -90)))
    assert stale.facts["fio2_time_mismatch"] is True


def test_shunt_uses_measured_mixed_venous_content_when_present() -> None:
    data = intake(
        m(Q.ARTERIAL_PO2, 80.0),
        m(Q.ARTERIAL_PCO2, 40.0),
        m(Q.ARTERIAL_SO2, 0.95),
        m(Q.FIO2, 0.6),
        m(Q.HAEMOGLOBIN, 12.0),
        m(Q.MIXED_VENOUS_SO2, 0.65),
        m(Q.MIXED_VENOUS_PO2, 35.0),
    )
    (gas,) = facts_of(data)
    assert "measured mixed-venous" in gas.derived["venous-admixture"].method
    assert "venous admixture" in gas.derived["venous-admixture"].method
    (assumed,) = facts_of(intake(*data.measurements[:5]))
    assert "assumed a-v content difference 5 mL/dL" in assumed.derived["venous-admixture"].method


def test_spo2_only_gives_sf_ratio_and_an_imputed_pao2() -> None:
    (gas,) = facts_of(intake(m(Q.SPO2, 0.94), m(Q.FIO2, 0.4)))
    assert gas.facts["arterial_gas_present"] is False
    assert gas.facts["sf_ratio"] == pytest.approx(235.0)  # Rice 2007 anchor: 94 % on 0.4
    # Exact inverse of Severinghaus 1979 eq. 1 [calc]: S 0.94 → 70.87 mmHg.
    assert gas.facts["imputed_pao2"] == pytest.approx(70.87, abs=0.01)
    (high,) = facts_of(intake(m(Q.SPO2, 0.98), m(Q.FIO2, 0.21)))
    assert "imputed_pao2" not in high.facts  # Brown 2016: not above 96 %


def test_age_is_counted_in_whole_years_at_the_time_of_the_gas() -> None:
    assert age_years(date(1960, 5, 1), date(2026, 4, 30)) == 65.0
    assert age_years(date(1960, 5, 1), date(2026, 5, 1)) == 66.0


def test_a_raised_fio2_recomputes_every_filed_value_and_keeps_none_from_the_old_fio2() -> None:
    """A PaO2 that proves a higher FiO2 than the device estimate: every value the result files
    is computed again on the new FiO2 (alveolar gas equation, West JB, Respiratory Physiology,
    10th ed., 2016: PIO2 = FiO2 × (PB − PH2O), so it scales with the FiO2), and one that can
    no longer be computed is gone, not kept from the old FiO2."""
    settings = Settings()
    bundle = Path(__file__).resolve().parents[2] / "fixtures/demo/altitude-visitor.bundle.json"
    intake = read_bundle(orjson.loads(bundle.read_bytes()))
    gas = derive_gas_facts(
        pair_gases(intake, windows=windows(settings)).index,
        patient=intake.patient,
        settings=settings,
        today=date(2026, 12, 5),
    )
    assert "shunt-fraction" not in gas.derived  # no Hb on this record
    stale = Derived(12.0, "%", "computed on the old FiO2", ())
    gas = dataclasses.replace(gas, derived={**gas.derived, "shunt-fraction": stale})
    raised = with_fio2_raised(gas, 0.42, settings=settings)
    assert raised.derived["fio2"].value == 0.42
    # The FiO2 keeps how it was first estimated, and its sources, and says why it was raised.
    first = gas.derived["fio2"]
    assert raised.derived["fio2"].method.startswith(first.method + "; raised to 0.42")
    assert raised.derived["fio2"].inputs == first.inputs
    assert "shunt-fraction" not in raised.derived
    before, after = gas.derived["inspired-po2"].value, raised.derived["inspired-po2"].value
    fio2_before = gas.facts["fio2"]
    assert isinstance(fio2_before, float)
    assert after == pytest.approx(before * 0.42 / fio2_before, rel=1e-9)
    assert raised.derived["barometric-pressure"] == gas.derived["barometric-pressure"]
