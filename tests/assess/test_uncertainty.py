"""Inputs known only as a range (service/assess/uncertainty.py): which ranges a gas has, how
the data narrow them, and which scenarios they make.

The ranges' ends come from published sources the module names (device ranges, West 1996 for
the highest plausible site, the PaCO2 of residents and visitors at altitude); the boundary
cases pin the project's own conventions, each said beside its test.
"""

from __future__ import annotations

from dataclasses import replace

import pytest

from service.assess import uncertainty as u
from service.assess.derive import GasFacts
from service.assess.uncertainty import (
    SETTLE_PRESSURE,
    SETTLE_RESIDENCE,
    input_ranges,
)
from service.config import Settings
from service.engine.vocabulary import Mechanism
from service.intake.model import Quantity as Q
from service.physiology import reference as ref

from .builders import m
from .test_slips import gas

SETTINGS = Settings()
TOLERANCE = 5.0  # mm[Hg] a PaO2 may exceed the alveolar PO2 (the rule set's parameter)


def _settles(ranges: u.Ranges) -> list[object]:
    return [x.settle for x in ranges.uncertainties]


def test_the_residence_is_asked_about_only_where_it_changes_the_paco2_limit() -> None:
    # At sea level residents and visitors share 35-45 mmHg (common practice); at PB 500 mmHg
    # (about 3,500 m, West 1996) residents run about 36 (Pereira-Victorio 2014, Moina Veloz
    # 2023), newly arrived visitors still about 44 (Rahn & Otis 1949, from memory).
    base = (m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    sea = input_ranges(
        gas(*base, m(Q.BAROMETRIC_PRESSURE, 760.0)), tolerance_mmhg=TOLERANCE, settings=SETTINGS
    )
    assert SETTLE_RESIDENCE not in _settles(sea) and sea.scenarios == ()
    high = input_ranges(
        gas(*base, m(Q.BAROMETRIC_PRESSURE, 500.0)), tolerance_mmhg=TOLERANCE, settings=SETTINGS
    )
    assert _settles(high) == [SETTLE_RESIDENCE]
    assert [label for label, _, _ in high.scenarios] == ["resident", "visitor"]
    assert not high.representative_counts  # the representative has no residence
    told = input_ranges(
        gas(*base, m(Q.BAROMETRIC_PRESSURE, 500.0), m(Q.ALTITUDE_RESIDENCE, "resident")),
        tolerance_mmhg=TOLERANCE,
        settings=SETTINGS,
    )
    assert told.scenarios == ()


def test_a_difference_of_exactly_one_mmhg_makes_the_residence_matter(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # The project's convention (assess/normals.py): limits closer than 1 mmHg, below what an
    # analyser reports to, make the residence immaterial; 1 mmHg apart, it is asked.
    def limits(*, barometric_mmhg: float, residence: ref.Residence) -> ref.ExpectedPaCO2:
        upper = 40.0 if residence is ref.Residence.RESIDENT else 41.0
        return ref.ExpectedPaCO2(38.0, upper, "invented")

    monkeypatch.setattr(ref, "expected_paco2", limits)  # the module uses ref.expected_paco2
    found = u._residence_range((600.0,), gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0)))
    assert found is not None and found.ends == ("resident", "visitor")


def test_an_assumed_pressure_varies_with_the_other_ranges_for_a_low_inspired_po2() -> None:
    # No pressure, no altitude, no FiO2: FiO2 0.21-1.0 in every scenario; the pressure's low
    # end (the highest plausible site, West 1996) only in those bearing on a low inspired
    # PO2, where the residence matters too.
    found = input_ranges(
        gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0)),
        tolerance_mmhg=TOLERANCE,
        settings=SETTINGS,
    )
    general = [label for label, _, only in found.scenarios if only is None]
    pressure = [(label, only) for label, _, only in found.scenarios if only is not None]
    assert general == ["FiO2 0.21", "FiO2 1"]
    assert len(pressure) == 4
    assert {only for _, only in pressure} == {frozenset({Mechanism.LOW_INSPIRED_OXYGEN})}
    assert all(label.startswith("FiO2 ") for label, _ in pressure)
    assert {label.split(", ")[1] for label, _ in pressure} == {"resident", "visitor"}
    assert SETTLE_PRESSURE in _settles(found)


def test_a_pao2_only_sea_level_allows_leaves_no_pressure_range() -> None:
    # PaO2 110 on air with PaCO2 40: at sea level the alveolar PO2 is 101.8 mmHg (alveolar gas
    # equation, R 0.8, PH2O 47.1 [calc]), so even 760 mmHg is short of it by more than the
    # tolerance: no lower pressure can be meant.
    found = gas(m(Q.ARTERIAL_PO2, 110.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    assert found.facts["barometric_pressure_assumed"] is True
    ranges = input_ranges(found, tolerance_mmhg=TOLERANCE, settings=SETTINGS)
    assert SETTLE_PRESSURE not in _settles(ranges)


def _cannula() -> GasFacts:
    return gas(
        m(Q.ARTERIAL_PO2, 60.0),
        m(Q.ARTERIAL_PCO2, 40.0),
        m(Q.BAROMETRIC_PRESSURE, 760.0),
        m(Q.OXYGEN_DEVICE, "nasal-cannula"),
        m(Q.OXYGEN_FLOW, 2.0),
    )


def test_a_device_estimate_without_width_is_no_range() -> None:
    estimated = _cannula()
    assert estimated.fio2_range is not None
    fixed = replace(estimated, fio2_range=(0.3, 0.3))
    ranges = input_ranges(fixed, tolerance_mmhg=TOLERANCE, settings=SETTINGS)
    assert ranges.scenarios == () and ranges.representative == {}


@pytest.mark.parametrize("at", ["low", "high"])
def test_the_pao2_raises_a_device_estimate_only_above_its_low_end(
    monkeypatch: pytest.MonkeyPatch, at: str
) -> None:
    # The project's convention: the FiO2 the PaO2 needs raises the estimate's low end only
    # when it lies above it (within the range, up to and including its top).
    estimated = _cannula()
    assert estimated.fio2_range is not None
    low, high = estimated.fio2_range
    needed = low if at == "low" else high
    monkeypatch.setattr(u, "lowest_fio2_for_pao2", lambda **_: needed)
    ranges = input_ranges(estimated, tolerance_mmhg=TOLERANCE, settings=SETTINGS)
    if at == "low":
        assert ranges.representative == {}
        assert [label for label, _, _ in ranges.scenarios] == [
            f"FiO2 {low:.3g}",
            f"FiO2 {high:.3g}",
        ]
    else:
        assert ranges.representative == {
            "fio2_lowest_possible": high,
            "fio2_raised_by_pao2": True,
            "fio2": high,
        }
        assert {changes["fio2"] for _, changes, _ in ranges.scenarios} == {high}


def test_an_fio2_not_sent_that_only_pure_oxygen_explains_is_pure_oxygen(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.setattr(u, "lowest_fio2_for_pao2", lambda **_: 1.0)
    found = gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.BAROMETRIC_PRESSURE, 760.0))
    ranges = input_ranges(found, tolerance_mmhg=TOLERANCE, settings=SETTINGS)
    assert {changes["fio2"] for _, changes, _ in ranges.scenarios} == {1.0}
