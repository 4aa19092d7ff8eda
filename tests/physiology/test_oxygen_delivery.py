"""FiO2 estimated from low-flow devices."""

from __future__ import annotations

import pytest

from service.exceptions import ImpossibleValueError, OutsideModelRangeError
from service.physiology.oxygen_delivery import OxygenDevice, estimate_fio2


@pytest.mark.parametrize(("flow", "fio2"), [(1.0, 0.25), (2.0, 0.29), (4.0, 0.37), (6.0, 0.45)])
def test_nasal_cannula_four_percent_per_litre(flow: float, fio2: float) -> None:
    # Common practice: FiO2 ≈ 21 % + 4 % per L/min, 1–6 L/min (no primary source known).
    assert estimate_fio2(device=OxygenDevice.NASAL_CANNULA, flow_l_min=flow).fio2 == (
        pytest.approx(fio2)
    )


@pytest.mark.parametrize(("flow", "rapid", "rest"), [(1.0, 0.24, 0.26), (6.0, 0.45, 0.54)])
def test_nasal_cannula_range_spans_the_measured_pharyngeal_fio2(
    flow: float, rapid: float, rest: float
) -> None:
    # Wettstein, Shelledy & Peters, Respir Care 2005;50:604 (abstract): mean pharyngeal FiO2
    # 0.24–0.45 with rapid breathing and 0.26–0.54 at rest over 1–6 L/min, with a spread
    # between patients of SD 0.04–0.15: the range is the two lines widened by 0.04, and never
    # below room air.
    estimate = estimate_fio2(device=OxygenDevice.NASAL_CANNULA, flow_l_min=flow)
    assert estimate.low == pytest.approx(max(rapid - 0.04, 0.21))
    assert estimate.high == pytest.approx(rest + 0.04)
    assert estimate.low <= estimate.fio2 <= estimate.high


def test_reservoir_mask_range_is_the_guideline_range() -> None:
    # O'Driscoll BR et al., BTS guideline, Thorax 2017;72 Suppl 1, device table (read only in
    # secondary summaries): reservoir mask at 15 L/min ≈ 60–90 %.
    estimate = estimate_fio2(device=OxygenDevice.NON_REBREATHER_MASK, flow_l_min=15.0)
    assert (estimate.low, estimate.high) == (0.60, 0.90)


def test_simple_mask_spans_forty_to_sixty_percent() -> None:
    # BTS 2017 (secondary summary): simple face mask 5–10 L/min ≈ 40–60 %.
    assert estimate_fio2(device=OxygenDevice.SIMPLE_MASK, flow_l_min=5.0).fio2 == 0.40
    assert estimate_fio2(device=OxygenDevice.SIMPLE_MASK, flow_l_min=10.0).fio2 == 0.60


def test_room_air_is_exact() -> None:
    estimate = estimate_fio2(device=OxygenDevice.NONE_ROOM_AIR, flow_l_min=None)
    assert estimate.fio2 == estimate.low == estimate.high == 0.21


@pytest.mark.parametrize(
    "device", [OxygenDevice.VENTURI_MASK, OxygenDevice.HIGH_FLOW_NASAL, OxygenDevice.VENTILATOR]
)
def test_devices_with_a_set_fio2_have_no_flow_estimate(device: OxygenDevice) -> None:
    with pytest.raises(OutsideModelRangeError, match="send the FiO2"):
        estimate_fio2(device=device, flow_l_min=40.0)


def test_nasal_cannula_refuses_flows_outside_one_to_six() -> None:
    with pytest.raises(OutsideModelRangeError, match="nasal-cannula"):
        estimate_fio2(device=OxygenDevice.NASAL_CANNULA, flow_l_min=10.0)


def test_flow_devices_need_a_flow_and_a_possible_one() -> None:
    with pytest.raises(ImpossibleValueError, match="needs its flow"):
        estimate_fio2(device=OxygenDevice.NASAL_CANNULA, flow_l_min=None)
    with pytest.raises(ImpossibleValueError, match="flow_l_min"):
        estimate_fio2(device=OxygenDevice.SIMPLE_MASK, flow_l_min=-2.0)
