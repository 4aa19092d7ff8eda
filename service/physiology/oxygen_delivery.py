"""FiO2 estimated from a low-flow oxygen device and its flow.

An estimate, never a measurement: delivered FiO2 falls with high minute ventilation and rises
with mouth closure, so each estimate comes with a range, and results built on it are flagged.
Devices that deliver a set FiO2 (Venturi masks, high-flow nasal oxygen, ventilators) have no
flow-based estimate: their FiO2 must be sent.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

from service.exceptions import ImpossibleValueError, OutsideModelRangeError
from service.physiology import constants as c
from service.physiology.bounds import require_in_model, require_possible


class OxygenDevice(StrEnum):
    """Codes of the project CodeSystem ``oxygen-device``."""

    NASAL_CANNULA = "nasal-cannula"
    SIMPLE_MASK = "simple-mask"
    VENTURI_MASK = "venturi-mask"
    NON_REBREATHER_MASK = "non-rebreather-mask"
    HIGH_FLOW_NASAL = "high-flow-nasal"
    VENTILATOR = "ventilator"
    NONE_ROOM_AIR = "none-room-air"


# Wettstein RB, Shelledy DC, Peters JI, Respir Care 2005;50:604: the smallest between-patient
# SD of the pharyngeal FiO2 at one flow of a nasal cannula.
NASAL_CANNULA_SPREAD = 0.04


@dataclass(frozen=True, slots=True)
class Fio2Estimate:
    """An estimated FiO2 (fraction) with the range it may plausibly take, and its basis."""

    fio2: float
    low: float
    high: float
    basis: str


def _interpolate(flow: float, flow_lo: float, flow_hi: float, at_lo: float, at_hi: float) -> float:
    return at_lo + (at_hi - at_lo) * (flow - flow_lo) / (flow_hi - flow_lo)


def estimate_fio2(*, device: OxygenDevice, flow_l_min: float | None) -> Fio2Estimate:
    """Estimate FiO2 from a low-flow device and its oxygen flow (L/min).

    - Nasal cannula, 1–6 L/min: FiO2 ≈ 0.21 + 0.04 × flow (common practice, the "4 % per litre"
      rule); range: the mean pharyngeal FiO2 measured by Wettstein RB, Shelledy DC, Peters JI,
      Respir Care 2005;50:604 — 0.24–0.45 breathing fast to 0.26–0.54 at rest over 1–6 L/min.
    - Simple face mask, 5–10 L/min: 0.40 at 5 rising to 0.60 at 10 L/min, ± 0.10 (BTS 2017
      guideline device table, via secondary summaries).
    - Non-rebreather (reservoir) mask, 10–15 L/min: 0.60–0.90 (BTS 2017); estimate mid-range.
    - No device (room air): 0.21 exactly.

    Raises:
        OutsideModelRangeError: a flow outside the device's range, or a device (Venturi,
            high-flow nasal, ventilator) whose FiO2 is set, not estimated from flow.
        ImpossibleValueError: a negative flow, or no flow for a flow-based device.
    """
    if device is OxygenDevice.NONE_ROOM_AIR:
        return Fio2Estimate(c.ROOM_AIR_FIO2, c.ROOM_AIR_FIO2, c.ROOM_AIR_FIO2, "room air")
    if device in (OxygenDevice.VENTURI_MASK, OxygenDevice.HIGH_FLOW_NASAL, OxygenDevice.VENTILATOR):
        raise OutsideModelRangeError(
            "flow_l_min",
            flow_l_min if flow_l_min is not None else float("nan"),
            f"{device.value} delivers a set FiO2; there is no flow-based estimate, send the FiO2",
        )
    if flow_l_min is None:
        raise ImpossibleValueError("flow_l_min", float("nan"), f"{device.value} needs its flow")
    require_possible("flow_l_min", flow_l_min, 0.0, 80.0, "L/min")
    if device is OxygenDevice.NASAL_CANNULA:
        require_in_model("flow_l_min", flow_l_min, 1.0, 6.0, "L/min", "the nasal-cannula estimate")
        estimate = c.ROOM_AIR_FIO2 + 0.04 * flow_l_min
        # Wettstein 2005 measured 0.24-0.45 (rapid breathing) to 0.26-0.54 (at rest) over 1-6
        # L/min, with a spread between patients of SD 0.04-0.15 at each flow: the range at a
        # flow is the two lines widened by the smallest SD reported.
        low = _interpolate(flow_l_min, 1.0, 6.0, 0.24, 0.45) - NASAL_CANNULA_SPREAD
        high = _interpolate(flow_l_min, 1.0, 6.0, 0.26, 0.54) + NASAL_CANNULA_SPREAD
        return Fio2Estimate(
            estimate,
            max(min(low, estimate), c.ROOM_AIR_FIO2),
            max(high, estimate),
            "nasal cannula",
        )
    if device is OxygenDevice.SIMPLE_MASK:
        require_in_model("flow_l_min", flow_l_min, 5.0, 10.0, "L/min", "the simple-mask estimate")
        estimate = _interpolate(flow_l_min, 5.0, 10.0, 0.40, 0.60)
        return Fio2Estimate(estimate, estimate - 0.10, estimate + 0.10, "simple face mask")
    require_in_model("flow_l_min", flow_l_min, 10.0, 15.0, "L/min", "the reservoir-mask estimate")
    return Fio2Estimate(0.75, 0.60, 0.90, "non-rebreather mask")
