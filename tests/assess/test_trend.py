"""The course of oxygenation as the assessment builds it (service/assess/trend.py): which gases
take part, what each contributes, and which titrations are fitted for it.

The fitting itself is the titration's (tests/assess/test_titration.py checks it against the
independent model); here ``assess_titration`` is replaced by a recorder, so that the choice of
windows is seen directly: a fit assumes one shunt and one V/Q term for its whole window, so
the course takes fitted values only from windows that do not overlap.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from types import SimpleNamespace
from typing import Any

import pytest

from service.assess import trend
from service.assess.assess import windows
from service.assess.derive import GasFacts
from service.assess.titration import TitrationRules, record_points
from service.config import Settings
from service.intake.model import Intake
from service.intake.model import Quantity as Q

from .builders import T0, intake, m
from .test_slips import gases

SETTINGS = Settings()
WINDOW_MINUTES = SETTINGS.titration_window_minutes  # 120 by default


def _fit(shunt: float, drop: float) -> Any:
    """A titration whose two-parameter fit gave ``shunt`` and ``drop`` (only what is read)."""
    return SimpleNamespace(
        response=SimpleNamespace(
            two_parameter=SimpleNamespace(
                shunt=SimpleNamespace(value=shunt), vq_drop_mmhg=SimpleNamespace(value=drop)
            )
        )
    )


def _arterial(minutes: float, pao2: float) -> list[Any]:
    return [
        m(Q.ARTERIAL_PO2, pao2, minutes),
        m(Q.ARTERIAL_PCO2, 40.0, minutes),
        m(Q.FIO2, 0.3, minutes),
        m(Q.HAEMOGLOBIN, 14.0, minutes),
    ]


def _latest_first(record: Intake) -> list[GasFacts]:
    found = gases(record)
    return sorted(found, key=lambda g: g.gas.time or T0, reverse=True)


class Recorder:
    """Stands in for ``assess_titration``: records each call and gives a fit by gas time."""

    def __init__(self, fits: dict[datetime, Any]) -> None:
        self.fits = fits
        self.calls: list[dict[str, Any]] = []

    def __call__(self, record: Intake, **kwargs: Any) -> Any:
        self.calls.append(kwargs)
        return self.fits.get(kwargs["index_time"])


def _at(minutes: float) -> datetime:
    return T0 + timedelta(minutes=minutes)


def _measure(found: Any, name: str) -> Any:
    return next(t for t in found.measures if t.measure == name)


def test_fitted_values_come_from_windows_that_do_not_overlap(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # Arterial gases at 0, 60, 140, 200 and 260 minutes (260 the index), and one five hours
    # before any FiO2 was charted, which takes no part (its FiO2 is not known). The index has
    # its own titration; the gas at 140 is exactly one window before it (still overlapping);
    # the gas at 60 is the next beyond, and the gas at 0 overlaps it again.
    record = intake(
        *_arterial(0.0, 62.0),
        *_arterial(60.0, 58.0),
        *_arterial(140.0, 55.0),
        *_arterial(200.0, 52.0),
        *_arterial(260.0, 50.0),
        m(Q.ARTERIAL_PO2, 64.0, -300.0),
    )
    assert _at(260.0) - _at(140.0) == timedelta(minutes=WINDOW_MINUTES)
    assert [g.number("fio2") is None for g in _latest_first(record)][-1]
    recorder = Recorder({_at(60.0): _fit(0.10, 20.0), _at(140.0): _fit(0.30, 60.0)})
    points = record_points(
        record, windows=windows(SETTINGS), settings=SETTINGS, rules=TitrationRules()
    )
    assert points is not None
    monkeypatch.setattr(trend, "assess_titration", recorder)
    found = trend.assessment_trend(
        _latest_first(record),
        titration=_fit(0.20, 40.0),
        intake=record,
        windows=windows(SETTINGS),
        settings=SETTINGS,
        rules=TitrationRules(),
        points=points,
    )
    assert found is not None
    # One titration fitted beside the index's own, ending at its gas, without predictions.
    assert recorder.calls == [
        {
            "index": recorder.calls[0]["index"],
            "index_time": _at(60.0),
            "windows": windows(SETTINGS),
            "settings": SETTINGS,
            "rules": TitrationRules(),
            "ending_at_index": True,
            "predict": False,
            "points": points,  # the record's points, sorted out once for every fit
        }
    ]
    assert _measure(found, "shunt").series == ((_at(60.0), 0.10), (_at(260.0), 0.20))
    assert _measure(found, "vq_drop").series == ((_at(60.0), 20.0), (_at(260.0), 40.0))
    # Every arterial gas gives its P/F (PaO2 / FiO2) and venous admixture (a fraction here,
    # a percentage among the facts); the gas without an FiO2 gives nothing.
    times = [_at(t) for t in (0.0, 60.0, 140.0, 200.0, 260.0)]
    pf = _measure(found, "pf_ratio").series
    assert [t for t, _ in pf] == times
    assert [v for _, v in pf] == pytest.approx([p / 0.3 for p in (62.0, 58.0, 55.0, 52.0, 50.0)])
    by_time = {g.gas.time: g.facts for g in gases(record)}
    admixture = _measure(found, "venous_admixture").series
    assert [t for t, _ in admixture] == times
    for t, value in admixture:
        percent = by_time[t]["venous_admixture"]
        assert isinstance(percent, float) and 0.0 < percent < 100.0
        assert value == pytest.approx(percent / 100.0, rel=1e-12)


@pytest.mark.parametrize(("count", "shown"), [(2, False), (3, True)])
def test_a_course_needs_three_arterial_gases(
    count: int, shown: bool, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Three points are the fewest a direction is read from (physiology.oxygenation_trend).
    record = intake(*(x for i in range(count) for x in _arterial(30.0 * i, 60.0)))
    monkeypatch.setattr(trend, "assess_titration", Recorder({}))
    found = trend.assessment_trend(
        _latest_first(record),
        titration=None,
        intake=record,
        windows=windows(SETTINGS),
        settings=SETTINGS,
        rules=TitrationRules(),
        points=record_points(
            record, windows=windows(SETTINGS), settings=SETTINGS, rules=TitrationRules()
        ),
    )
    assert (found is not None) is shown
