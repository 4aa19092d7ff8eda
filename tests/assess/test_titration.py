"""Titration points from the record, the fit in the assessment and the facts the rules read
(service/assess/titration.py).

The readings are made by the model written out independently in ``tests.titration_reference``
(Severinghaus 1979, the alveolar gas equation, the shunt equation, scipy's root finder), so a
recovered parameter is checked against the truth the points came from, not against the code
under test.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from service.assess import titration as titration_module
from service.assess.assess import windows
from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.titration import FITTED_FACTS, TitrationRules, assess_titration
from service.config import Settings
from service.engine.facts import FactOrigin
from service.intake.model import Fio2Source, Intake
from service.intake.model import Quantity as Q
from service.physiology.oxygen_exchange import shunt_from_odds
from service.physiology.reference import healthy_lung
from service.physiology.titration import Fio2Source as PointSource
from tests.titration_reference import arterial, ph2o_37_mmhg

from .builders import T0, intake, m

PB = 760.0


def _reading(shunt: float, drop: float, fio2: float, paco2: float = 40.0) -> tuple[float, float]:
    """(SpO2 as charted, a whole percent, as a fraction; PaO2 in whole mmHg) of the model."""
    found = arterial(shunt=shunt, drop=drop, fio2=fio2, paco2=paco2, pb=PB, ph2o=ph2o_37_mmhg())
    return round(100.0 * found.sao2) / 100.0, float(round(found.pao2))


def _titration(
    record: Intake, *, settings: Settings | None = None, index_minutes: float | None = None
) -> titration_module.Titration | None:
    chosen = settings or Settings()
    times = [x.time for x in record.measurements if x.time is not None]
    index_time = T0 + timedelta(minutes=index_minutes) if index_minutes is not None else max(times)
    return assess_titration(
        record,
        index={"barometric_pressure": PB, "water_vapour_pressure": ph2o_37_mmhg(), "age": 60.0},
        index_time=index_time,
        windows=windows(chosen),
        settings=chosen,
    )


def _steps(shunt: float, drop: float, fio2s: tuple[float, ...], *, gas_at: tuple[int, ...] = ()):  # type: ignore[no-untyped-def]
    """A Venturi titration: each FiO2 charted at 20-minute steps, an SpO2 eight minutes into
    each step, and a gas (with its PaCO2) ten minutes in at the steps named."""
    out = []
    for i, fio2 in enumerate(fio2s):
        start = 20.0 * i
        spo2, pao2 = _reading(shunt, drop, fio2)
        out.append(m(Q.FIO2, fio2, start, fio2_source=Fio2Source.MEASURED))
        out.append(m(Q.SPO2, spo2, start + 8))
        if i in gas_at:
            out += [m(Q.ARTERIAL_PO2, pao2, start + 10), m(Q.ARTERIAL_PCO2, 40.0, start + 10)]
    return out


def test_spo2_readings_alone_on_measured_fio2s_recover_the_shunt_and_vq_term() -> None:
    # Truth: shunt 18 %, V/Q term 50 mmHg (Sapsford & Jones 1995's two effects together).
    record = intake(*_steps(0.18, 50.0, (0.21, 0.24, 0.28, 0.35, 0.40, 0.50)))
    found = _titration(record)
    assert found is not None and found.response.two_parameter is not None
    fit = found.response.two_parameter
    # Readings charted to whole percent: within 3 points of shunt and 10 mmHg (1.3 kPa,
    # inside Rowe 2010's limits of agreement of the right shift).
    assert fit.shunt.value == pytest.approx(0.18, abs=0.03)
    assert fit.vq_drop_mmhg.value == pytest.approx(50.0, abs=10.0)
    facts = found.facts
    assert facts["titration_model"] == "shunt-and-vq"
    assert facts["titration_paco2_assumed"] is True  # no gas: the PaCO2 was assumed
    assert facts["titration_fio2_levels"] == 6.0 and facts["titration_fio2_known_levels"] == 6.0
    assert facts["titration_fio2_span"] == pytest.approx(0.29)


def test_points_are_taken_in_time_order_whichever_came_first_and_gases_lend_their_paco2() -> None:
    # A gas first, then oximetry steps (and the other way round in the fixtures).
    gas = [m(Q.FIO2, 0.28, 0.0, fio2_source=Fio2Source.MEASURED)]
    gas += [m(Q.ARTERIAL_PO2, 62.0, 8.0), m(Q.ARTERIAL_PCO2, 52.0, 8.0)]
    oximetry = [
        m(Q.FIO2, 0.35, 20.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.93, 28.0),
        m(Q.FIO2, 0.40, 40.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.95, 48.0),
    ]
    found = _titration(intake(*oximetry, *gas), index_minutes=8.0)
    assert found is not None
    points = found.series.points
    assert [p.time for p in points] == sorted(p.time for p in points)
    assert [p.kind.value for p in points] == ["pao2", "spo2", "spo2"]
    assert [p.inspired.fio2 for p in points] == [0.28, 0.35, 0.40]
    # The oximetry borrowed the gas's PaCO2 (select_titration_points), so nothing is assumed.
    assert all(p.paco2_mmhg == 52.0 for p in points)
    assert found.facts["titration_paco2_assumed"] is False


def test_a_reading_taken_before_the_new_fio2_settled_is_left_out_and_said_why() -> None:
    # PaO2 reaches 90 % of its new value 4.2 ± 4.1 min after a rise of FiO2 (Cakar N et al.,
    # Intensive Care Med 2001;27:655): the site's settling time is 5 min by default.
    record = intake(
        m(Q.FIO2, 0.28, 0.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.90, 8.0),
        m(Q.FIO2, 0.35, 20.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.91, 22.0),  # two minutes after the change
        m(Q.SPO2, 0.93, 28.0),
        m(Q.FIO2, 0.40, 40.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.94, 48.0),
    )
    found = _titration(record)
    assert found is not None
    assert [round(p.value, 2) for p in found.series.points] == [0.90, 0.93, 0.94]
    (dropped,) = found.dropped
    assert dropped.value == 0.91 and "not yet in steady state" in dropped.reason
    relaxed = _titration(record, settings=Settings(titration_settle_minutes=0.0))
    assert relaxed is not None and len(relaxed.dropped) == 0


def test_a_device_estimate_carries_its_range_and_counts_as_not_known() -> None:
    # A nasal cannula's FiO2 is estimated from its flow, with Wettstein 2005's range.
    record = intake(
        m(Q.OXYGEN_DEVICE, "nasal-cannula", 0.0),
        m(Q.OXYGEN_FLOW, 1.0, 0.0),
        m(Q.SPO2, 0.88, 8.0),
        m(Q.OXYGEN_FLOW, 3.0, 20.0),
        m(Q.SPO2, 0.93, 28.0),
        m(Q.OXYGEN_FLOW, 5.0, 40.0),
        m(Q.SPO2, 0.95, 48.0),
    )
    found = _titration(record)
    assert found is not None
    for point in found.series.points:
        assert point.inspired.source is PointSource.DEVICE_ESTIMATE
        assert point.inspired.low < point.inspired.fio2 < point.inspired.high
    assert found.facts["titration_fio2_known_levels"] == 0.0


def test_readings_without_an_fio2_or_below_the_oximeters_range_or_beside_cohb_are_left_out() -> (
    None
):
    record = [
        m(Q.FIO2, 0.28, 0.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.66, 8.0),  # below 70 %: ISO 80601-2-61 accuracy range (from memory)
        m(Q.SPO2, 0.90, 12.0),
        m(Q.FIO2, 0.40, 20.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.94, 28.0),
        m(Q.SPO2, 0.80, -600.0),  # ten hours earlier, no FiO2 in force
    ]
    found = _titration(intake(*record))
    assert found is not None
    reasons = {round(d.value, 2): d.reason for d in found.dropped}
    assert "oximeter accuracy" in reasons[0.66]
    assert "no FiO2" in reasons[0.80]
    carbon_monoxide = _titration(intake(*record, m(Q.CARBOXYHAEMOGLOBIN, 0.12, 10.0)))
    # COHb above the rule set's 5 % makes every SpO2 unusable: no two levels remain.
    assert carbon_monoxide is None


def test_a_record_on_one_oxygen_setting_costs_no_pairing_at_all(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # The common case: one gas with its SpO2 on one FiO2. Nothing is paired or fitted.
    def refuse(*_: object, **__: object) -> None:
        raise AssertionError("no titration should be looked for")

    monkeypatch.setattr(titration_module, "_candidates", refuse)
    record = intake(
        m(Q.FIO2, 0.35, -5.0, fio2_source=Fio2Source.MEASURED),
        m(Q.ARTERIAL_PO2, 70.0, 0.0),
        m(Q.ARTERIAL_PCO2, 40.0, 0.0),
        m(Q.SPO2, 0.93, 0.0),
    )
    assert _titration(record) is None


def test_the_shunt_range_is_widened_exactly_over_the_assumed_av_difference() -> None:
    # The shunt enters the model only as odds x a-v difference (the shunt equation), so the
    # odds at another a-v difference are odds x avd / avd' exactly.
    record = intake(
        *_steps(0.20, 10.0, (0.21, 0.28, 0.35, 0.50, 0.60), gas_at=(0, 2, 4)),
        m(Q.HAEMOGLOBIN, 14.0, 0.0),
    )
    settings = Settings()
    found = assess_titration(
        record,
        index={
            "barometric_pressure": PB,
            "water_vapour_pressure": ph2o_37_mmhg(),
            "age": 60.0,
            "haemoglobin": 14.0,
        },
        index_time=T0 + timedelta(minutes=90),
        windows=windows(settings),
        settings=settings,
    )
    assert found is not None and found.response.two_parameter is not None
    fit, bounds = found.response.two_parameter, found.shunt
    assert bounds is not None
    low_avd, high_avd = settings.av_difference_range_ml_dl
    avd = settings.assumed_av_difference_ml_dl

    def odds(shunt: float) -> float:
        return shunt / (1.0 - shunt)

    assert bounds.least == pytest.approx(shunt_from_odds(odds(fit.shunt.low) * avd / high_avd))
    assert bounds.most == pytest.approx(shunt_from_odds(odds(fit.shunt.high) * avd / low_avd))
    assert "a-v difference" in bounds.widened_by[0] and len(bounds.widened_by) == 1  # Hb sent


def test_a_sites_av_difference_range_is_the_one_the_fit_states_and_the_rules_read() -> None:
    # One range, one owner: the sensitivity shown with the fit and the widened range the
    # rules grade on both vary the assumed a-v difference over the site's range.
    record = intake(*_steps(0.20, 10.0, (0.21, 0.28, 0.35, 0.50, 0.60), gas_at=(0, 2, 4)))
    for site_range in ((4.0, 6.0), (3.0, 8.0)):
        settings = Settings(av_difference_range_ml_dl=site_range)
        found = _titration(record, settings=settings)
        assert found is not None and found.response.two_parameter is not None
        fit, bounds = found.response.two_parameter, found.shunt
        (avd,) = [s for s in fit.sensitivities if s.assumption == "av_difference_ml_dl"]
        assert (avd.low_value, avd.high_value) == site_range
        assert bounds is not None
        assert bounds.most >= avd.shunt_at_low and bounds.least <= avd.shunt_at_high
        assert f"a-v difference {site_range[0]:g}–{site_range[1]:g} mL/dL" in bounds.widened_by


def test_the_vq_term_is_compared_with_the_healthy_lung_of_the_age_or_every_age() -> None:
    record = intake(*_steps(0.05, 60.0, (0.21, 0.24, 0.28, 0.31), gas_at=(0, 3)))
    known = _titration(record)
    assert known is not None
    limit = healthy_lung(60, True, 0.8).vq_drop_mmhg
    assert known.facts["vq_drop_upper_limit"] == pytest.approx(limit)
    assert known.facts["fitted_vq_drop_excess_least"] == pytest.approx(
        known.facts["fitted_vq_drop_least"] - limit  # type: ignore[operator]
    )
    settings = Settings()
    unknown = assess_titration(
        record,
        index={"barometric_pressure": PB, "water_vapour_pressure": ph2o_37_mmhg()},
        index_time=T0 + timedelta(minutes=70),
        windows=windows(settings),
        settings=settings,
    )
    assert unknown is not None
    # Without an age: the widest limit against the least V/Q term, the narrowest against the
    # most (every end of the uncertainty; 18-100 years by default).
    ages = [healthy_lung(a, True, 0.8).vq_drop_mmhg for a in range(18, 101)]
    assert unknown.facts["fitted_vq_drop_excess_least"] == pytest.approx(
        unknown.facts["fitted_vq_drop_least"] - max(ages)  # type: ignore[operator]
    )
    assert unknown.facts["fitted_vq_drop_excess_most"] == pytest.approx(
        unknown.facts["fitted_vq_drop_most"] - min(ages)  # type: ignore[operator]
    )


def test_every_fitted_fact_is_in_the_catalogue_and_accepted_there() -> None:
    record = intake(*_steps(0.12, 40.0, (0.21, 0.28, 0.35, 0.40), gas_at=(0, 3)))
    found = _titration(record)
    assert found is not None
    names = {spec.name for spec in FITTED_FACTS}
    assert set(found.facts) <= names
    for name, value in found.facts.items():
        spec = DEFAULT_CATALOGUE[name]
        assert spec.origin is FactOrigin.FITTED
        assert spec.problem(value) is None, name


def test_points_beyond_the_window_are_left_out_with_the_reason() -> None:
    early = [
        m(Q.FIO2, 0.21, -400.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.85, -392.0),
    ]
    record = intake(*early, *_steps(0.15, 30.0, (0.28, 0.35, 0.40)))
    found = _titration(record)
    assert found is not None
    assert any("before the window" in d.reason for d in found.dropped)
    assert all(p.time >= T0 for p in found.series.points)


def test_the_titration_rules_come_from_the_rule_set() -> None:
    from service.assess.assess import titration_rules
    from service.runtime import Runtime

    rules = titration_rules(Runtime.load().ruleset)
    assert rules == TitrationRules()  # the shipped parameters are the defaults
    assert dict(rules.bands)  # both bands, from target_low/high and hypercapnic_target_*


def test_a_later_titration_after_the_gas_is_found_within_one_window() -> None:
    gas = [
        m(Q.FIO2, 0.21, -10.0, fio2_source=Fio2Source.MEASURED),
        m(Q.ARTERIAL_PO2, 52.0, 0.0),
        m(Q.ARTERIAL_PCO2, 40.0, 0.0),
    ]
    later = [
        m(Q.FIO2, 0.28, 30.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.92, 38.0),
        m(Q.FIO2, 0.35, 50.0, fio2_source=Fio2Source.MEASURED),
        m(Q.SPO2, 0.95, 58.0),
    ]
    found = _titration(intake(*gas, *later), index_minutes=0.0)
    assert found is not None
    assert found.series.window_end == datetime(2026, 11, 20, 10, 58, tzinfo=UTC)
    assert len(found.series.points) == 3


def test_a_record_of_continuous_oximetry_is_fitted_on_its_latest_points_only() -> None:
    # Budget: a minute-by-minute SpO2 on an FiO2 changed every two minutes for two hours
    # would be 60 steps; the fit takes the latest MAX_POINTS and says so for the rest.
    record = []
    for i in range(60):
        fio2 = (0.28, 0.35)[i % 2]
        spo2, _ = _reading(0.15, 30.0, fio2)
        record += [
            m(Q.FIO2, fio2, 2.0 * i, fio2_source=Fio2Source.MEASURED),
            m(Q.SPO2, spo2, 2.0 * i + 1.0),
        ]
    found = _titration(intake(*record), settings=Settings(titration_settle_minutes=0.0))
    assert found is not None
    assert len(found.series.points) == titration_module.MAX_POINTS
    assert sum("latest points a fit takes" in d.reason for d in found.dropped) == 60 - 40
