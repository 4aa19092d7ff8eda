"""The response to oxygen over a series of gases (service/assess/serial.py).

The gases are built from the Berggren shunt equation with scipy's root finder, so the
expected admixture comes from the equation, not from the code under test.
"""

from __future__ import annotations

from datetime import date

import pytest
from scipy.optimize import brentq

from service.assess.assess import windows
from service.assess.derive import GasFacts, derive_gas_facts
from service.assess.pairing import pair_gases
from service.assess.serial import serial_facts
from service.config import Settings
from service.intake.model import Intake, Measurement
from service.intake.model import Quantity as Q

from .builders import intake, m

HB = 15.0  # g/dL
PACO2 = 40.0
AVD = 5.0  # mL/dL, the assumed arterio-venous difference (common practice)
PB = 760.0
PH2O = 47.0  # at 37 °C
RQ = 0.8


def _severinghaus(po2: float) -> float:
    """Severinghaus JW, J Appl Physiol 1979;46:599, eq. 1."""
    return 1.0 / (23400.0 / (po2**3 + 150.0 * po2) + 1.0)


def _content(po2: float) -> float:
    """Content: 1.34 mL/g x Hb x S + 0.003 x PO2 (common practice)."""
    return 1.34 * HB * _severinghaus(po2) + 0.003 * po2


def pao2_for_shunt(fio2: float, shunt: float) -> float:
    """PaO2 of a lung with a pure shunt and otherwise ideal gas exchange.

    Alveolar gas equation (full form, RQ 0.8) for PAO2; Berggren: Ca = Cc' - s/(1-s) x avd.
    """
    pio2 = fio2 * (PB - PH2O)
    pao2_alv = pio2 - PACO2 * (fio2 + (1 - fio2) / RQ)
    target = _content(pao2_alv) - shunt / (1 - shunt) * AVD
    return float(brentq(lambda p: _content(p) - target, 1.0, pao2_alv))


def gas(
    minutes: float, fio2: float | None, pao2: float, *, cannula_flow: float | None = None
) -> list[Measurement]:
    inspired = (
        [m(Q.FIO2, fio2, minutes)]
        if fio2 is not None
        else [
            m(Q.OXYGEN_DEVICE, "nasal-cannula", minutes),
            m(Q.OXYGEN_FLOW, cannula_flow or 0.0, minutes),
        ]
    )
    return [
        m(Q.ARTERIAL_PO2, pao2, minutes),
        m(Q.ARTERIAL_PCO2, PACO2, minutes),
        m(Q.HAEMOGLOBIN, HB, minutes),
        m(Q.BAROMETRIC_PRESSURE, PB, minutes),
        *inspired,
    ]


def facts_of(data: Intake) -> list[GasFacts]:
    """The gases latest first, as the assessment sees them."""
    settings = Settings()
    pairing = pair_gases(data, windows=windows(settings))
    today = date(2026, 11, 20)
    return [
        derive_gas_facts(g, patient=data.patient, settings=settings, today=today)
        for g in pairing.gases
    ]


def test_a_pure_shunt_keeps_its_admixture_as_fio2_rises() -> None:
    # Benatar SR, Hewlett AM, Nunn JF, Br J Anaesth 1973;45:711: on an iso-shunt line the
    # venous admixture is the same at every FiO2.
    data = intake(
        *gas(-60, 0.4, pao2_for_shunt(0.4, 0.25)), *gas(0, 1.0, pao2_for_shunt(1.0, 0.25))
    )
    facts = serial_facts(facts_of(data), settings=Settings())
    assert facts["fio2_step"] == pytest.approx(0.6)
    assert facts["admixture_at_lower_fio2"] == pytest.approx(25.0, abs=0.5)
    assert facts["admixture_at_higher_fio2"] == pytest.approx(25.0, abs=0.5)
    # Only the a-v difference is uncertain here, and a pure shunt's fall stays near nought
    # over its range: a fixed shunt.
    assert abs(facts["admixture_fall_least"]) < 3.0
    assert facts["admixture_change_largest"] < 8.0


def test_low_vq_admixture_falls_on_oxygen() -> None:
    # Low-V/Q units are corrected by oxygen (Benatar 1973; West JB, Respiratory Physiology,
    # the V/Q chapter): 25 % admixture on 0.3, 5 % true shunt left on 1.0.
    data = intake(
        *gas(-60, 0.3, pao2_for_shunt(0.3, 0.25)), *gas(0, 1.0, pao2_for_shunt(1.0, 0.05))
    )
    facts = serial_facts(facts_of(data), settings=Settings())
    assert facts["admixture_at_lower_fio2"] == pytest.approx(25.0, abs=0.5)
    assert facts["admixture_at_higher_fio2"] == pytest.approx(5.0, abs=0.5)
    assert facts["admixture_fall_least"] > 10.0


def test_the_widest_fio2_step_is_compared() -> None:
    data = intake(
        *gas(-120, 0.21, pao2_for_shunt(0.21, 0.1)),
        *gas(-60, 0.4, pao2_for_shunt(0.4, 0.1)),
        *gas(0, 0.6, pao2_for_shunt(0.6, 0.1)),
    )
    facts = serial_facts(facts_of(data), settings=Settings())
    assert facts["fio2_step"] == pytest.approx(0.39)


def test_a_gas_outside_the_oxygen_response_window_is_not_compared() -> None:
    hours = Settings().oxygen_response_window_hours
    data = intake(
        *gas(-60 * hours - 30, 0.21, pao2_for_shunt(0.21, 0.1)),
        *gas(0, 0.6, pao2_for_shunt(0.6, 0.1)),
    )
    assert serial_facts(facts_of(data), settings=Settings()) == {}


def test_an_estimated_fio2_widens_the_least_fall() -> None:
    # A pure shunt on an estimated FiO2 (device range) can look like a fall or a rise;
    # the least fall must be no larger than the nominal fall.
    # 3 L/min by nasal cannula: an estimate with a range (Wettstein 2005).
    low = pao2_for_shunt(0.33, 0.2)
    high = pao2_for_shunt(1.0, 0.2)
    data = intake(*gas(-60, None, low, cannula_flow=3.0), *gas(0, 1.0, high))
    gases = facts_of(data)
    facts = serial_facts(gases, settings=Settings())
    nominal = facts["admixture_at_lower_fio2"] - facts["admixture_at_higher_fio2"]
    assert facts["admixture_fall_least"] <= nominal + 1e-9
    assert facts["admixture_change_largest"] >= abs(nominal) - 1e-9


def test_on_a_tie_in_fio2_step_the_later_pair_is_compared() -> None:
    # Two pairs span the same FiO2 step (0.4 to 0.6): the pair with the later gas decides, the
    # lung nearest the index gas (the module's rule). [calc] The later pair's PaO2 change is
    # PaO2(0.6, 10 %) - PaO2(0.4, 10 %); the earlier pair's, PaO2(0.6, 30 %) - the same.
    latest, middle = pao2_for_shunt(0.6, 0.1), pao2_for_shunt(0.4, 0.1)
    earliest = pao2_for_shunt(0.6, 0.3)
    data = intake(*gas(-120, 0.6, earliest), *gas(-60, 0.4, middle), *gas(0, 0.6, latest))
    facts = serial_facts(facts_of(data), settings=Settings())
    assert facts["fio2_step"] == pytest.approx(0.2)
    assert facts["pao2_change"] == pytest.approx(latest - middle)
    assert facts["admixture_at_higher_fio2"] == pytest.approx(10.0, abs=0.5)
    # The same three gases in the other order: the 30 % gas is now the later one.
    data = intake(*gas(-120, 0.6, latest), *gas(-60, 0.4, middle), *gas(0, 0.6, earliest))
    facts = serial_facts(facts_of(data), settings=Settings())
    assert facts["pao2_change"] == pytest.approx(earliest - middle)
    assert facts["admixture_at_higher_fio2"] == pytest.approx(30.0, abs=0.5)


def test_gases_on_one_fio2_give_no_comparison() -> None:
    data = intake(*gas(-60, 0.4, pao2_for_shunt(0.4, 0.1)), *gas(0, 0.4, pao2_for_shunt(0.4, 0.2)))
    assert serial_facts(facts_of(data), settings=Settings()) == {}


def test_an_earlier_gas_without_admixture_gives_no_admixture_comparison() -> None:
    # The earlier gas has no Hb within the site's (shortened) Hb window, so no admixture of
    # its own: the step and the PaO2 change are still facts, no change of admixture is.
    settings = Settings(haemoglobin_window_hours=1.0)
    low, high = pao2_for_shunt(0.3, 0.2), pao2_for_shunt(0.6, 0.2)
    data = intake(
        m(Q.ARTERIAL_PO2, low, -120),
        m(Q.ARTERIAL_PCO2, PACO2, -120),
        m(Q.FIO2, 0.3, -120),
        m(Q.BAROMETRIC_PRESSURE, PB, -120),
        *gas(0, 0.6, high),  # with its Hb, paired with this gas only
    )
    pairing = pair_gases(data, windows=windows(settings))
    gases = [
        derive_gas_facts(g, patient=data.patient, settings=settings, today=date(2026, 11, 20))
        for g in pairing.gases
    ]
    assert "venous_admixture" in gases[0].facts and "venous_admixture" not in gases[1].facts
    facts = serial_facts(gases, settings=settings)
    assert facts == {"fio2_step": pytest.approx(0.3), "pao2_change": pytest.approx(high - low)}
