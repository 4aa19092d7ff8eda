"""The course of oxygenation over three or more arterial gases, for the result and explain.

Each gas gives its P/F, a/A and venous admixture (its own derived values) and, when the
titration that ends at it identifies them, the fitted shunt and V/Q term
(``titration.assess_titration`` with the window ending at that gas). A fit assumes one shunt
and one V/Q term for its whole window, so fitted values are taken only from windows that do
not overlap: the index gas's titration, then, going back, each gas more than one titration
window before the last one fitted (a course over several titrations, not the points of one
read twice). The series and their directions are ``physiology.oxygenation_trend``'s, with
its thresholds and sources. The trend informs; it does not enter the verdict.
"""

from __future__ import annotations

from datetime import datetime, timedelta

from service.config import Settings
from service.intake.model import Intake, Quantity
from service.physiology.oxygenation_trend import (
    MIN_POINTS,
    GasSummary,
    OxygenationTrend,
    oxygenation_trend,
)

from .derive import GasFacts
from .pairing import Windows
from .titration import RecordPoints, Titration, TitrationRules, assess_titration

__all__ = ["assessment_trend"]


def _fitted(
    gas: GasFacts,
    intake: Intake,
    windows: Windows,
    settings: Settings,
    rules: TitrationRules,
    index: Titration | None,
    is_index: bool,
    points: RecordPoints | None,
) -> tuple[float | None, float | None]:
    """(shunt, ΔPO2) of the two-parameter fit of the titration ending at ``gas`` (None, None
    when there is none or it is refused); ``points``: the record's points, None when it cannot
    hold a titration."""
    if is_index:  # the assessment's own titration, around the index gas
        titration: Titration | None = index
    elif points is None:
        titration = None
    else:
        titration = assess_titration(
            intake,
            index=gas.facts,
            index_time=gas.gas.time,
            windows=windows,
            settings=settings,
            rules=rules,
            ending_at_index=True,
            predict=False,
            points=points,
        )
    fit = titration.response.two_parameter if titration is not None else None
    if fit is None:
        return None, None
    return fit.shunt.value, fit.vq_drop_mmhg.value


def assessment_trend(
    gases: list[GasFacts],
    *,
    titration: Titration | None,
    intake: Intake,
    windows: Windows,
    settings: Settings,
    rules: TitrationRules,
    points: RecordPoints | None,
) -> OxygenationTrend | None:
    """The trend of the arterial gases (index first in ``gases``), or None with fewer than
    three gases on a known FiO2. ``points``: the record's titration points
    (``titration.record_points``: sorted out once for every fit; None when the record cannot
    hold a titration)."""
    arterial = [
        g
        for g in gases
        if g.gas.anchor is not None
        and g.gas.anchor.quantity is Quantity.ARTERIAL_PO2
        and g.gas.time is not None
        and g.number("fio2") is not None
    ]
    if len(arterial) < MIN_POINTS:
        return None
    summaries = []
    window = timedelta(minutes=settings.titration_window_minutes)
    last_fitted: datetime | None = None
    for i, g in enumerate(arterial):  # latest first
        time, fio2 = g.gas.time, g.number("fio2")
        assert time is not None and fio2 is not None
        admixture = g.number("venous_admixture")
        shunt = drop = None
        if last_fitted is None or last_fitted - time > window:
            shunt, drop = _fitted(g, intake, windows, settings, rules, titration, i == 0, points)
            last_fitted = time
        summaries.append(
            GasSummary(
                time=time,
                fio2=fio2,
                pf_ratio_mmhg=g.number("pf_ratio"),
                arterial_alveolar_ratio=g.number("a_a_ratio"),
                venous_admixture=None if admixture is None else admixture / 100.0,
                shunt=shunt,
                vq_drop_mmhg=drop,
            )
        )
    return oxygenation_trend(summaries=summaries)
