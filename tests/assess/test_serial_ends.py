"""The response-to-oxygen facts at the ends of their uncertainty (service/assess/serial.py).

The gases are forward-made with the Berggren shunt equation (tests/assess/test_serial.py):
a lung with a pure shunt s, and an assumed a-v difference of 5 mL/dL, has
Cc' - Ca = s/(1-s) x 5. Read back with any other a-v difference d, the same gas gives
Qs/Qt = (Cc' - Ca) / (Cc' - Ca + d) (Berggren SM, Acta Physiol Scand 1942;4 Suppl 11),
so the admixture at each end of the a-v range follows from the equation alone.
"""

from __future__ import annotations

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.serial import SERIAL_FACTS, serial_facts
from service.config import Settings
from service.intake.model import Quantity as Q

from .builders import intake, m
from .test_serial import AVD, PACO2, PB, PH2O, RQ, _content, facts_of, gas, pao2_for_shunt


def _read_back(shunt: float, difference: float) -> float:
    """Percent admixture of a forward-made gas read back with a-v difference ``difference``."""
    gap = shunt / (1.0 - shunt) * AVD
    return 100.0 * gap / (gap + difference)


def _range(name: str) -> tuple[float, float]:
    spec = DEFAULT_CATALOGUE[name]
    assert spec.minimum is not None and spec.maximum is not None
    return spec.minimum, spec.maximum


def test_the_accepted_ranges_are_those_a_pair_of_single_gas_values_spans() -> None:
    # A serial fact is a value of one gas or the difference of two: its accepted range is the
    # single-gas range, or the span of a difference of two values in it (mathematics).
    ranges = {spec.name: (spec.minimum, spec.maximum) for spec in SERIAL_FACTS}
    po2_low, po2_high = _range("arterial_po2")
    mix_low, mix_high = _range("venous_admixture")
    span = mix_high - mix_low
    assert ranges["pao2_change"] == (-(po2_high - po2_low), po2_high - po2_low)
    for one_gas in (
        "admixture_at_lower_fio2",
        "admixture_at_higher_fio2",
        "admixture_at_higher_fio2_least",
        "admixture_at_higher_fio2_most",
    ):
        assert ranges[one_gas] == (mix_low, mix_high)
    assert ranges["admixture_fall_least"] == (-span, span)
    assert ranges["admixture_change_largest"] == (0.0, span)
    # FiO2 is a fraction: a step between two is never above 1, and every step between two
    # accepted FiO2s is accepted.
    fio2_low, fio2_high = _range("fio2")
    step_low, step_high = ranges["fio2_step"]
    assert step_low is not None and step_high is not None
    assert step_low <= 0.0 and fio2_high - fio2_low <= step_high <= 1.0


def test_without_a_venous_sample_the_ends_are_the_a_v_range_ends() -> None:
    # 40 % admixture on FiO2 0.3, 20 % on 0.6; no mixed-venous sample, so the a-v difference
    # runs over the site's range and the ends follow from Berggren's equation.
    settings = Settings()
    data = intake(*gas(-60, 0.3, pao2_for_shunt(0.3, 0.4)), *gas(0, 0.6, pao2_for_shunt(0.6, 0.2)))
    facts = serial_facts(facts_of(data), settings=settings)
    ends = settings.av_difference_range_ml_dl
    highs = [_read_back(0.2, d) for d in ends]
    falls = [_read_back(0.4, d) - _read_back(0.2, d) for d in ends]
    assert facts["admixture_at_lower_fio2"] == pytest.approx(40.0, abs=0.5)
    assert facts["admixture_at_higher_fio2"] == pytest.approx(20.0, abs=0.5)
    assert facts["admixture_at_higher_fio2_least"] == pytest.approx(min(highs), abs=0.5)
    assert facts["admixture_at_higher_fio2_most"] == pytest.approx(max(highs), abs=0.5)
    assert facts["admixture_fall_least"] == pytest.approx(min(falls), abs=0.5)
    assert facts["admixture_change_largest"] == pytest.approx(max(falls), abs=0.5)
    assert max(falls) - min(falls) > 3.0  # the ends are told apart at this tolerance


def test_a_mixed_venous_sample_gives_one_end_from_its_content() -> None:
    # Berggren: Qs/Qt = (Cc' - Ca) / (Cc' - Cv), Cv from the sample's saturation (a fraction
    # here, shown in %) and PO2 (content: 1.34 x Hb x S + 0.003 x PO2, common practice).
    pao2_low, pao2_high = pao2_for_shunt(0.3, 0.4), pao2_for_shunt(0.6, 0.2)
    data = intake(
        *gas(-60, 0.3, pao2_low),
        m(Q.MIXED_VENOUS_SO2, 0.7, -60),
        m(Q.MIXED_VENOUS_PO2, 37.0, -60),
        *gas(0, 0.6, pao2_high),
        m(Q.MIXED_VENOUS_SO2, 0.7, 0),
        m(Q.MIXED_VENOUS_PO2, 37.0, 0),
    )
    facts = serial_facts(facts_of(data), settings=Settings())

    def expected(fio2: float, pao2: float) -> float:
        alveolar = fio2 * (PB - PH2O) - PACO2 * (fio2 + (1 - fio2) / RQ)
        capillary, arterial = _content(alveolar), _content(pao2)
        venous = 1.34 * 15.0 * 0.7 + 0.003 * 37.0
        return 100.0 * (capillary - arterial) / (capillary - venous)

    low, high = expected(0.3, pao2_low), expected(0.6, pao2_high)
    assert facts["admixture_at_lower_fio2"] == pytest.approx(low, abs=0.5)
    assert facts["admixture_at_higher_fio2"] == pytest.approx(high, abs=0.5)
    # One a-v difference and exact FiO2s: every end is the nominal value.
    assert facts["admixture_at_higher_fio2_least"] == pytest.approx(high, abs=0.5)
    assert facts["admixture_at_higher_fio2_most"] == pytest.approx(high, abs=0.5)
    assert facts["admixture_fall_least"] == pytest.approx(low - high, abs=0.5)
    assert facts["admixture_change_largest"] == pytest.approx(low - high, abs=0.5)


def test_a_gas_at_the_window_edge_is_compared() -> None:
    # "Within" the oxygen-response window includes its edge (common practice for windows).
    hours = Settings().oxygen_response_window_hours
    data = intake(
        *gas(-60 * hours, 0.21, pao2_for_shunt(0.21, 0.1)),
        *gas(0, 0.6, pao2_for_shunt(0.6, 0.1)),
    )
    facts = serial_facts(facts_of(data), settings=Settings())
    assert facts["fio2_step"] == pytest.approx(0.39)


def test_an_fio2_end_below_the_arterial_po2_gives_no_robust_comparison() -> None:
    # The earlier gas is on an estimated FiO2 (3 L/min by nasal cannula); its PaO2 lies
    # between the alveolar PO2 at the range's low end and at the nominal FiO2: at that end
    # there is no end-capillary to arterial gap, so no least fall or largest change is given.
    probe = facts_of(intake(*gas(-60, None, 80.0, cannula_flow=3.0), *gas(0, 1.0, 100.0)))
    earlier = probe[1]
    nominal = earlier.number("fio2")
    assert nominal is not None and earlier.fio2_range is not None
    low_end = min(earlier.fio2_range)
    between = (low_end + nominal) / 2.0
    pao2 = between * (PB - PH2O) - PACO2 * (between + (1 - between) / RQ)
    data = intake(*gas(-60, None, pao2, cannula_flow=3.0), *gas(0, 1.0, pao2_for_shunt(1.0, 0.2)))
    facts = serial_facts(facts_of(data), settings=Settings())
    assert "admixture_at_lower_fio2" in facts and "admixture_at_higher_fio2" in facts
    assert "admixture_fall_least" not in facts and "admixture_change_largest" not in facts
