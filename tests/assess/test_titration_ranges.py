"""The fit's conditions and the ranges the rules read (service/assess/titration.py): the
patient's conditions taken from the index gas's facts, and the fitted shunt's and V/Q term's
95 % ranges widened by what was assumed.

Sources, each written out here independently of the service:

* Oxygen content C = k × Hb × S + 0.003 × PO2 (common practice; k the Hüfner factor, 1.34 by
  convention), so the a-v content difference measured from a mixed-venous saturation is
  CaO2 − (k × Hb × SvO2 + 0.003 × PvO2), kept when it lies within 1–12 mL/dL (the rule the
  service states), else the site's assumed value.
* The shunt equation (Berggren SM, Acta Physiol Scand 1942;4 Suppl 11) with the mixed venous
  content CaO2 − avd: Cc'O2 − CaO2 = avd × shunt / (1 − shunt). The shunt enters only as
  odds × avd, so the odds at another a-v difference avd' are odds × avd / avd' exactly; this is
  checked against the independent model ``tests.titration_reference`` below.
* The widening by an assumed Hb (8–17 g/dL) and an assumed PaCO2 (± 10 mmHg) adds each
  assumption's largest fall and largest rise of the fitted value (its sensitivities, linearised
  at the fit) to the fit's own range, one assumption after the other.

The lungs are made by ``tests.titration_reference`` (Severinghaus 1979, the alveolar gas
equation, the shunt equation, scipy's root finder); the values are invented.
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from service.assess.assess import windows
from service.assess.titration import Titration, _conditions, assess_titration
from service.config import Settings
from service.engine.facts import FactValue
from service.intake.model import Fio2Source, Intake, Measurement
from service.intake.model import Quantity as Q
from service.physiology.oxygen_response import ModelFit
from tests.titration_reference import arterial, ph2o_37_mmhg

from .builders import T0, intake, m

HUFNER = 1.34  # mL O2 per g Hb (common practice)
SOLUBILITY = 0.003  # mL O2 per dL blood per mmHg (common practice)
FIO2S = (0.21, 0.24, 0.28, 0.35, 0.40, 0.50)


def _venous_content(hb: float, svo2_percent: float, pvo2: float, k: float = HUFNER) -> float:
    """CvO2 = k × Hb × SvO2 + 0.003 × PvO2 (common practice), mL/dL."""
    return k * hb * (svo2_percent / 100.0) + SOLUBILITY * pvo2


def _odds(shunt: float) -> float:
    return shunt / (1.0 - shunt)


def _shunt(odds: float) -> float:
    return odds / (1.0 + odds)


# --- the conditions from the index gas's facts -----------------------------------------------


def _mixed_venous(measured_avd: float, *, hb: float = 11.0) -> dict[str, FactValue]:
    """Facts of a gas whose a-v difference, measured from SvO2 70 % and PvO2 38 mmHg, is
    ``measured_avd`` (the arterial content is set so)."""
    venous = _venous_content(hb, 70.0, 38.0)
    return {
        "haemoglobin": hb,
        "arterial_o2_content": venous + measured_avd,
        "mixed_venous_so2": 70.0,
        "mixed_venous_po2": 38.0,
    }


def test_the_a_v_difference_is_measured_from_the_mixed_venous_saturation_and_hb() -> None:
    hb, svo2, pvo2, cao2 = 11.0, 70.0, 38.0, 14.6
    venous = 1.34 * 11.0 * 0.70 + 0.003 * 38.0  # 10.318 + 0.114 = 10.432 mL/dL
    conditions = _conditions(
        {
            "haemoglobin": hb,
            "arterial_o2_content": cao2,
            "mixed_venous_so2": svo2,
            "mixed_venous_po2": pvo2,
        },
        Settings(),
    )
    assert conditions.av_difference_measured is True
    assert conditions.av_difference_ml_dl == pytest.approx(cao2 - venous, rel=1e-12)
    assert conditions.av_difference_ml_dl == pytest.approx(4.168, rel=1e-12)
    assert conditions.haemoglobin_g_dl == hb and conditions.haemoglobin_measured is True


def test_the_measured_a_v_difference_uses_the_sites_hufner_factor() -> None:
    # k = 1.39 (the theoretical value, in published use): CvO2 = 1.39 × 12 × 0.65 + 0.003 × 40.
    index: dict[str, FactValue] = {
        "haemoglobin": 12.0,
        "arterial_o2_content": 15.5,
        "mixed_venous_so2": 65.0,
    }
    conditions = _conditions(index, Settings(hufner_ml_per_g=1.39))
    assert conditions.av_difference_measured is True
    # No PvO2 charted: the normal mixed-venous PO2, 40 mmHg (common practice), is taken.
    assert conditions.av_difference_ml_dl == pytest.approx(15.5 - _venous_content(12, 65, 40, 1.39))


def test_without_hb_or_a_mixed_venous_saturation_the_sites_assumed_value_is_taken() -> None:
    settings = Settings(assumed_av_difference_ml_dl=4.5)
    full = _mixed_venous(4.0)
    for missing in ("haemoglobin", "arterial_o2_content", "mixed_venous_so2"):
        index = {k: v for k, v in full.items() if k != missing}
        conditions = _conditions(index, settings)
        assert conditions.av_difference_measured is False, missing
        assert conditions.av_difference_ml_dl == 4.5, missing


@pytest.mark.parametrize(
    ("measured", "kept"),
    [
        (0.95, False),  # below 1 mL/dL: not a plausible measurement, the assumed value is taken
        (1.0, True),  # the ends of 1–12 mL/dL are within it
        (1.05, True),
        (4.0, True),
        (11.0, True),
        (12.0, True),
        (12.5, False),
    ],
)
def test_a_measured_a_v_difference_is_kept_only_within_1_to_12_ml_dl(
    measured: float, kept: bool
) -> None:
    # Hb 18 g/dL puts CvO2 (17.0 mL/dL) in the binade of CvO2 + 12, so the arterial content
    # set to CvO2 + 1 or CvO2 + 12 gives exactly 1 or 12 back: the ends of the range are tested.
    index = _mixed_venous(measured, hb=18.0)
    content = index["arterial_o2_content"]
    assert isinstance(content, float)
    venous = _venous_content(18.0, 70.0, 38.0)
    if measured in (1.0, 12.0):
        assert content - venous == measured
    measured = content - venous
    conditions = _conditions(index, Settings(assumed_av_difference_ml_dl=5.5))
    assert conditions.av_difference_measured is kept
    assert conditions.av_difference_ml_dl == (measured if kept else 5.5)


def test_pressure_and_water_vapour_are_the_index_gass_else_the_standard_values() -> None:
    # 600 mmHg: about 2,000 m (standard atmosphere); PH2O 52.4 mmHg: saturated at 39 °C
    # (common practice, from memory); the fallbacks are 760 and 47 mmHg (West).
    given = _conditions({"barometric_pressure": 600.0, "water_vapour_pressure": 52.4}, Settings())
    assert given.barometric_mmhg == 600.0 and given.water_vapour_mmhg == 52.4
    neither = _conditions({}, Settings())
    assert neither.barometric_mmhg == 760.0 and neither.water_vapour_mmhg == 47.0


# --- the fit through assess_titration ---------------------------------------------------------


def _lung(
    shunt: float,
    drop: float,
    *,
    pb: float,
    ph2o: float,
    hb: float = 14.0,
    avd: float = 5.0,
    gases: bool = False,
) -> Intake:
    """A Venturi titration over ``FIO2S`` (20-minute steps, measured FiO2): an SpO2 (whole
    percent) eight minutes into each step, or a gas (PaO2 whole mmHg, PaCO2 40) ten in."""
    out: list[Measurement] = []
    for i, fio2 in enumerate(FIO2S):
        start = 20.0 * i
        found = arterial(
            shunt=shunt, drop=drop, fio2=fio2, paco2=40.0, pb=pb, ph2o=ph2o, hb=hb, avd=avd
        )
        out.append(m(Q.FIO2, fio2, start, fio2_source=Fio2Source.MEASURED))
        if gases:
            out.append(m(Q.ARTERIAL_PO2, float(round(found.pao2)), start + 10))
            out.append(m(Q.ARTERIAL_PCO2, 40.0, start + 10))
        else:
            out.append(m(Q.SPO2, round(100.0 * found.sao2) / 100.0, start + 8))
    return intake(*out)


def _assessed(record: Intake, index: dict[str, FactValue], settings: Settings) -> Titration:
    found = assess_titration(
        record,
        index={"age": 60.0, **index},
        index_time=T0 + timedelta(minutes=20.0 * (len(FIO2S) - 1) + 10),
        windows=windows(settings),
        settings=settings,
    )
    assert found is not None
    return found


def test_the_shunt_enters_the_model_as_odds_times_the_a_v_difference() -> None:
    # The reference model: a lung with shunt 18 % at avd 5 has the PaO2 of one whose shunt odds
    # are 5/7 as large at avd 7 and 5/3.5 as large at avd 3.5, on every FiO2.
    for avd in (3.5, 7.0):
        moved = _shunt(_odds(0.18) * 5.0 / avd)
        for fio2 in FIO2S:
            common = {"drop": 30.0, "fio2": fio2, "paco2": 40.0, "pb": 760.0, "ph2o": 47.0}
            at_five = arterial(shunt=0.18, avd=5.0, **common)
            there = arterial(shunt=moved, avd=avd, **common)
            assert there.pao2 == pytest.approx(at_five.pao2, abs=1e-6)


def test_a_fit_at_altitude_with_a_measured_a_v_difference_recovers_the_lung() -> None:
    # Truth: shunt 15 %, V/Q term 30 mmHg, Hb 11 g/dL, avd 4 mL/dL, at PB 600 mmHg and PH2O
    # 52.4 mmHg, read as PaO2 (whole mmHg) on six FiO2s. With the index gas's pressure and the
    # a-v difference measured from its SvO2 the fit finds the truth (measured: 14.9 %, 30.4
    # mmHg); the standard 760 mmHg would make it 17.8 % and 64.5 mmHg, the assumed a-v
    # difference (5 mL/dL) 12.3 %.
    record = _lung(0.15, 30.0, pb=600.0, ph2o=52.4, hb=11.0, avd=4.0, gases=True)
    index = {"barometric_pressure": 600.0, "water_vapour_pressure": 52.4, **_mixed_venous(4.0)}
    found = _assessed(record, index, Settings())
    fit = found.response.two_parameter
    assert fit is not None
    assert fit.shunt.value == pytest.approx(0.15, abs=0.01)
    assert fit.vq_drop_mmhg.value == pytest.approx(30.0, abs=3.0)
    # Hb and a-v difference measured, PaCO2 charted: nothing widens the fit's own ranges.
    assert found.shunt is not None and found.vq_drop is not None
    assert (found.shunt.least, found.shunt.most) == (fit.shunt.low, fit.shunt.high)
    assert found.shunt.widened_by == () and found.vq_drop.widened_by == ()
    effective = found.response.effective_shunt
    assert effective is not None and found.effective_shunt is not None
    assert (found.effective_shunt.least, found.effective_shunt.most) == (
        effective.shunt.low,
        effective.shunt.high,
    )
    assert found.effective_shunt.widened_by == ()


# --- the ranges widened by the assumptions ----------------------------------------------------


def _moves(fit: ModelFit, assumption: str) -> tuple[list[float], list[float]]:
    """(shunt changes, ΔPO2 changes) at the low and high ends of one assumption's range."""
    (s,) = [s for s in fit.sensitivities if s.assumption == assumption]
    shunt, drop = fit.shunt.value, fit.vq_drop_mmhg.value
    return (
        [s.shunt_at_low - shunt, s.shunt_at_high - shunt],
        [s.vq_drop_at_low_mmhg - drop, s.vq_drop_at_high_mmhg - drop],
    )


def _oximetry_fit() -> tuple[Titration, ModelFit]:
    # Truth: shunt 18 %, V/Q term 50 mmHg; SpO2 alone, so Hb, avd and PaCO2 are all assumed.
    record = _lung(0.18, 50.0, pb=760.0, ph2o=ph2o_37_mmhg())
    found = _assessed(
        record, {"barometric_pressure": 760.0, "water_vapour_pressure": ph2o_37_mmhg()}, Settings()
    )
    fit = found.response.two_parameter
    assert fit is not None
    return found, fit


def test_the_shunt_range_is_widened_by_the_a_v_difference_then_by_hb() -> None:
    found, fit = _oximetry_fit()
    avd, (avd_low, avd_high) = 5.0, Settings().av_difference_range_ml_dl
    low = min(fit.shunt.low, _shunt(_odds(fit.shunt.low) * avd / avd_high))
    high = max(fit.shunt.high, _shunt(_odds(fit.shunt.high) * avd / avd_low))
    by_hb, _ = _moves(fit, "haemoglobin_g_dl")
    # A low Hb lowers the fitted shunt and a high Hb raises it, so both ends move.
    assert min(by_hb) < 0.0 < max(by_hb)
    low += min(by_hb)
    high += max(by_hb)
    assert found.shunt is not None
    assert found.shunt.value == fit.shunt.value
    assert found.shunt.least == pytest.approx(low, rel=1e-12)
    assert found.shunt.most == pytest.approx(high, rel=1e-12)
    assert found.shunt.widened_by == ("a-v difference 3.5–7 mL/dL", "Hb 8–17 g/dL")
    # The assumed PaCO2 moves the shunt too, but only the V/Q term's range takes it.
    by_paco2, _ = _moves(fit, "paco2_mmhg")
    assert by_paco2 != by_hb and any(by_paco2)


def test_the_vq_term_range_is_widened_by_hb_and_by_the_assumed_paco2() -> None:
    found, fit = _oximetry_fit()
    low, high = fit.vq_drop_mmhg.low, fit.vq_drop_mmhg.high
    for assumption in ("haemoglobin_g_dl", "paco2_mmhg"):
        _, moves = _moves(fit, assumption)
        # Each assumption moves the V/Q term one way at one end and the other at the other.
        assert min(moves) < 0.0 < max(moves), assumption
        low += min(moves)
        high += max(moves)
    assert found.vq_drop is not None
    assert found.vq_drop.value == fit.vq_drop_mmhg.value
    assert found.vq_drop.least == pytest.approx(max(0.0, low), rel=1e-12)
    assert found.vq_drop.most == pytest.approx(high, rel=1e-12)
    assert found.vq_drop.least > 0.0  # the range is not held at zero here
    assert found.vq_drop.widened_by == ("Hb 8–17 g/dL", "PaCO2 ± 10 mmHg")


def test_the_effective_shunt_range_is_widened_over_the_assumed_a_v_difference_exactly() -> None:
    found, _ = _oximetry_fit()
    effective = found.response.effective_shunt
    assert effective is not None and found.effective_shunt is not None
    avd, (avd_low, avd_high) = 5.0, Settings().av_difference_range_ml_dl
    e_low, e_high = effective.shunt.low, effective.shunt.high
    low = min(e_low, _shunt(_odds(e_low) * avd / avd_high))
    high = max(e_high, _shunt(_odds(e_high) * avd / avd_low))
    assert low < e_low and high > e_high  # both ends move
    assert found.effective_shunt.value == effective.shunt.value
    assert found.effective_shunt.least == pytest.approx(low, rel=1e-12)
    assert found.effective_shunt.most == pytest.approx(high, rel=1e-12)
    assert found.effective_shunt.widened_by == ("a-v difference 3.5–7 mL/dL",)


def test_the_measured_a_v_difference_counts_cohb_and_methb_in_both_contents_alike() -> None:
    # COHb and MetHb carry no oxygen (common practice), so the contents of a gas with COHb 4 %
    # and MetHb 1.5 % (below the titration's limits) are k × Hb × SO2 × (1 − 0.04 − 0.015)
    # + 0.003 × PO2, arterial and mixed venous alike, as the service's arterial content and its
    # shunt equation count them.
    hb, carried = 14.0, 1.0 - 0.04 - 0.015
    arterial_content = HUFNER * hb * 0.97 * carried + SOLUBILITY * 90.0
    venous = HUFNER * hb * 0.70 * carried + SOLUBILITY * 40.0
    index: dict[str, FactValue] = {
        "haemoglobin": hb,
        "carboxyhaemoglobin": 4.0,
        "methaemoglobin": 1.5,
        "arterial_o2_content": arterial_content,
        "mixed_venous_so2": 70.0,
        "mixed_venous_po2": 40.0,
    }
    conditions = _conditions(index, Settings())
    # 4.94 mL/dL; with SvO2 taken as all carrying, 4.21 (15 % less, and the shunt odds so).
    assert conditions.av_difference_ml_dl == pytest.approx(arterial_content - venous, rel=1e-9)
