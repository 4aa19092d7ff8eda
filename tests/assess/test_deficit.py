"""The shares of the PaO2 deficit (service/assess/deficit.py), by their definitions: the
inspired part as a share of everything that lowers the PaO2, and ventilation and gas
exchange as shares of what lowers it beyond the setting; credits (negative parts) lower
nothing and count as zero. The arithmetic is done here by hand, in percent as the catalogue
states the shares."""

from __future__ import annotations

import pytest

from service.assess import deficit
from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.derivation import FactValue, compute_derived
from service.config import Settings
from service.intake.model import Quantity as Q

from .builders import m
from .test_slips import gas

SHARES = tuple(e for e in deficit.FACTS if e.name.startswith("share_"))


def _shares(
    inspired: float, ventilation: float, gas_exchange: float, unattributed: float
) -> dict[str, FactValue]:
    facts: dict[str, FactValue] = {
        "deficit_inspired": inspired,
        "deficit_ventilation": ventilation,
        "deficit_gas_exchange": gas_exchange,
        "deficit_unattributed": unattributed,
    }
    _, problems = compute_derived(SHARES, facts, {}, DEFAULT_CATALOGUE, Settings())
    assert problems == []
    return {k: v for k, v in facts.items() if k.startswith("share_")}


def test_every_share_is_a_percentage_of_what_lowers_the_pao2() -> None:
    # 10 + 5 + 15 mmHg lower the PaO2: the setting 1/3 of all; beyond the setting,
    # ventilation 5/20 and gas exchange 15/20.
    got = _shares(10.0, 5.0, 15.0, 0.0)
    assert got == pytest.approx(
        {"share_inspired": 100 / 3, "share_ventilation": 25.0, "share_gas_exchange": 75.0},
        rel=1e-12,
    )


def test_a_credit_lowers_nothing_and_one_cause_is_the_whole() -> None:
    # Oxygen gives a credit of 20 mmHg; a gas-exchange part of -2 is better than normal: the
    # 5 mmHg of ventilation are all that lowers the PaO2, 100 % of it (a share may be whole).
    got = _shares(-20.0, 5.0, -2.0, 0.0)
    assert got == pytest.approx(
        {"share_inspired": 0.0, "share_ventilation": 100.0, "share_gas_exchange": 0.0}
    )
    got = _shares(12.0, -1.0, -3.0, 0.0)
    assert got["share_inspired"] == pytest.approx(100.0)
    assert "share_ventilation" not in got and "share_gas_exchange" not in got


def test_no_share_when_nothing_lowers_the_pao2() -> None:
    # Every part a credit or nothing (on oxygen, a healthy lung): no fraction of zero.
    assert _shares(-30.0, 0.0, -1.0, 0.0) == {}


def test_an_imputed_pao2_is_not_split_by_a_paco2_of_another_sample() -> None:
    # Without an arterial PO2 the PaO2 is imputed from SpO2 (Brown 2016); the PaCO2 sent
    # beside it does not belong to that PaO2, so ventilation and gas exchange stay together.
    imputed = gas(m(Q.SPO2, 0.90), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    assert "arterial_po2" not in imputed.facts and "arterial_pco2" in imputed.facts
    assert "deficit_ventilation" not in imputed.facts
    assert "deficit_gas_exchange" not in imputed.facts
    assert "deficit_unattributed" in imputed.facts
    assert "imputed from SpO2 (Brown 2016)" in imputed.derived["pao2-fall"].method
    measured = gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    assert "deficit_ventilation" in measured.facts and "deficit_gas_exchange" in measured.facts
    method = measured.derived["pao2-fall"].method
    assert "fall of PaO2 below" in method and "imputed" not in method
