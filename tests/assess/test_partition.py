"""The PaO2 deficit partition of a gas as the result shows it: what its method says about the
PaO2 and the PaCO2 it used, when it is given once per residence, and why a gas has none."""

from __future__ import annotations

import dataclasses

import pytest

from service.assess import partition as p
from service.assess.assess import assess
from service.config import Settings
from service.intake.model import Quantity as Q
from service.physiology import reference as ref
from service.runtime import Runtime

from .builders import intake, m
from .test_slips import gas

SETTINGS = Settings()
RULESET = Runtime.load().ruleset
WITHOUT_PACO2 = "without a PaCO2, ventilation and gas exchange are reported together"


def test_the_method_names_the_measured_pao2_and_both_references() -> None:
    found = gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    (shown,) = p.partitions(found, SETTINGS)
    assert not shown.imputed and shown.residence is None
    assert "the fall of the PaO2 below" in shown.method
    assert "imputed" not in shown.method
    # The expected PaO2 for age (Cerveri 1995) and the PaCO2 expected at sea level (35-45
    # mmHg, common practice) are the two references the partition stands on: both named.
    expected = found.derived["pao2-expected"].method
    assert expected and f"({expected})" in shown.method
    paco2 = ref.expected_paco2(barometric_mmhg=760.0, residence=ref.Residence.RESIDENT).method
    assert f"({paco2})" in shown.method
    # With a measured PaCO2 the ventilation and gas-exchange parts are apart.
    assert WITHOUT_PACO2 not in shown.method


@pytest.mark.parametrize(
    "measurements",
    [
        (m(Q.ARTERIAL_PO2, 60.0), m(Q.FIO2, 0.21)),
        # An imputed PaO2 (Brown 2016) is not split by a PaCO2 of another sample.
        (m(Q.SPO2, 0.90), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21)),
    ],
)
def test_without_a_paco2_of_its_own_the_rest_is_unattributed(measurements: tuple[object]) -> None:
    (shown,) = p.partitions(gas(*measurements), SETTINGS)
    assert WITHOUT_PACO2 in shown.method


def test_an_imputed_pao2_is_named_in_the_method() -> None:
    found = gas(m(Q.SPO2, 0.90), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    (shown,) = p.partitions(found, SETTINGS)
    assert shown.imputed
    assert "the fall of the PaO2 imputed from SpO2 (Brown 2016) below" in shown.method


def test_an_imputed_pao2_at_altitude_gets_one_partition_per_residence() -> None:
    # 3,350 m: residents' and newcomers' expected PaCO2 differ (Pereira-Victorio 2014; Rahn &
    # Otis 1949), so without the residence the partition is given for each.
    found = gas(m(Q.SPO2, 0.90), m(Q.FIO2, 0.21), m(Q.ALTITUDE, 3350.0))
    assert "arterial_po2" not in found.facts and "imputed_pao2" in found.facts
    shown = p.partitions(found, SETTINGS)
    assert [s.residence for s in shown] == ["resident", "visitor"]
    assert all(s.imputed for s in shown)


def test_why_a_gas_has_no_partition() -> None:
    # An imputed PaO2 without an age: the reason is the age, not a missing PaO2.
    no_age = gas(m(Q.SPO2, 0.90), m(Q.FIO2, 0.21))
    no_age = dataclasses.replace(
        no_age, facts={k: v for k, v in no_age.facts.items() if k != "age"}
    )
    assert p.absent_reason(no_age).startswith("age not known")
    # A barometric pressure refused as impossible (100 mmHg is far above any summit).
    no_pb = gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.FIO2, 0.21), m(Q.BAROMETRIC_PRESSURE, 100.0))
    assert "barometric_pressure" not in no_pb.facts
    assert p.partitions(no_pb, SETTINGS) == ()
    assert p.absent_reason(no_pb) == "barometric pressure not known"
    complete = gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.FIO2, 0.21))
    assert p.absent_reason(complete).startswith("not computable")


def test_without_an_arterial_gas_the_index_is_the_oximetry() -> None:
    a = assess(intake(m(Q.SPO2, 0.90), m(Q.FIO2, 0.21)), ruleset=RULESET, settings=SETTINGS)
    assert not a.gases
    (only,) = p.assessment_partitions(a, SETTINGS)
    assert only.index is True
    assert only.shown and only.shown[0].imputed
