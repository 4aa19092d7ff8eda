"""The oxygen-response fit as the outputs show it (service/assess/response_view.py): the target
band the rule set chose, the right shift on room air and the one-line summary.

The right shift is checked against the alveolar gas equation written out independently
(``tests.titration_reference``: full form, R 0.8; PH2O at 37 °C from IAPWS-IF97).
"""

from __future__ import annotations

from types import SimpleNamespace
from typing import Any

import pytest

from service.assess import response_view as view
from service.physiology.oxygen_affinity import STANDARD_AFFINITY
from service.physiology.oxygen_exchange import exchange_conditions
from service.physiology.oxygen_prediction import TargetBand
from tests.titration_reference import alveolar, ph2o_37_mmhg


def _assessment(rules: tuple[str, ...], facts: dict[str, object] | None) -> Any:
    findings = [SimpleNamespace(rule=rule) for rule in rules] + [SimpleNamespace(rule=None)]
    titration = None if facts is None else SimpleNamespace(facts=facts)
    return SimpleNamespace(findings=findings, titration=titration)


STANDARD = "fio2-for-target-predicted@3"
HYPERCAPNIC = "fio2-for-hypercapnic-target-predicted@2"
UNREACHABLE = "target-band-unreachable@1"


@pytest.mark.parametrize(
    ("rules", "facts", "band"),
    [
        # The rule that predicted the FiO2 names its band (rule ids carry their version).
        ((HYPERCAPNIC,), None, TargetBand.HYPERCAPNIC_RISK),
        ((STANDARD,), None, TargetBand.STANDARD),
        ((STANDARD, HYPERCAPNIC), None, TargetBand.HYPERCAPNIC_RISK),
        # The unreachable band is the one whose target the curve does not reach.
        (
            (UNREACHABLE,),
            {"predicted_target_reachable": False, "predicted_hypercapnic_target_reachable": True},
            TargetBand.STANDARD,
        ),
        (
            (UNREACHABLE,),
            {"predicted_target_reachable": True, "predicted_hypercapnic_target_reachable": False},
            TargetBand.HYPERCAPNIC_RISK,
        ),
        (
            (UNREACHABLE,),
            {"predicted_target_reachable": False, "predicted_hypercapnic_target_reachable": False},
            None,
        ),
        ((UNREACHABLE,), {"predicted_target_reachable": True}, None),
        ((UNREACHABLE,), {}, None),
        ((UNREACHABLE,), None, None),
        # Without the rule the facts alone choose nothing.
        ((), {"predicted_target_reachable": False}, None),
    ],
)
def test_the_band_is_the_one_the_rules_named(
    rules: tuple[str, ...], facts: dict[str, object] | None, band: TargetBand | None
) -> None:
    assert view.applicable_band(_assessment(rules, facts)).band is band


def _titration(shunt: float, drop: float | None, paco2: float) -> Any:
    two = (
        None
        if drop is None
        else SimpleNamespace(
            shunt=SimpleNamespace(value=shunt), vq_drop_mmhg=SimpleNamespace(value=drop)
        )
    )
    response = SimpleNamespace(
        two_parameter=two,
        prediction_paco2_mmhg=paco2,
        conditions=exchange_conditions(water_vapour_mmhg=ph2o_37_mmhg()),
        prediction_affinity=STANDARD_AFFINITY,
    )
    return SimpleNamespace(response=response)


@pytest.mark.parametrize(("shunt", "drop", "paco2"), [(0.15, 40.0, 40.0), (0.05, 10.0, 55.0)])
def test_the_right_shift_on_room_air(shunt: float, drop: float, paco2: float) -> None:
    # Right shift = PIO2 - Pc'O2 on FiO2 0.21 (Sapsford & Jones 1995; Smith & Jones 2001),
    # with Pc'O2 = PAO2 - ΔPO2 (the two-parameter model): it does not depend on the shunt.
    ph2o = ph2o_37_mmhg()
    inspired = 0.21 * (760.0 - ph2o)
    expected = inspired - (alveolar(0.21, paco2, 760.0, ph2o) - drop)
    got = view.right_shift_mmhg(_titration(shunt, drop, paco2))
    assert got == pytest.approx(expected, abs=1e-6)


def test_no_right_shift_without_a_two_parameter_fit() -> None:
    assert view.right_shift_mmhg(_titration(0.15, None, 40.0)) is None


def _summary(
    fit: Any, *, two: bool, probability: float | None, refusal: str = "too few FiO2 levels"
) -> Any:
    bounds = SimpleNamespace(value=0.15, least=0.10, most=0.20)
    return SimpleNamespace(
        fit=None if fit is None else SimpleNamespace(fit_probability=probability),
        response=SimpleNamespace(points_used=6, fio2_span=0.29, refusal=refusal),
        fio2_levels=4,
        shunt=bounds if two else None,
        vq_drop=SimpleNamespace(value=40.0, least=30.0, most=50.0) if two else None,
        effective_shunt=SimpleNamespace(value=0.22, least=0.18, most=0.26),
    )


def test_the_summary_line_of_each_kind_of_fit() -> None:
    where = "6 points on 4 FiO2 levels (span 0.29)"
    nothing = view.summary_line(_summary(None, two=False, probability=None))
    assert nothing == f"Response to oxygen: nothing to fit (too few FiO2 levels); {where}"
    two = view.summary_line(_summary(object(), two=True, probability=0.43))
    assert two == (
        "Response to oxygen: shunt 15% (10%–20%), V/Q term 40 mmHg (30–50); "
        f"{where}; fit probability 0.43"
    )
    one = view.summary_line(_summary(object(), two=False, probability=None))
    assert one == (
        "Response to oxygen: effective shunt 22% (18%–26%), shunt and V/Q not separated "
        f"(too few FiO2 levels); {where}; no spare points to test the fit"
    )
