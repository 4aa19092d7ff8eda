"""Normal values and the room-air projection as derived facts (service/assess/normals.py).

The room-air PaO2 is checked against the one-parameter model written out independently in
``tests.titration_reference`` (the effective shunt's content deficit held from the gas's FiO2
to 0.21: Karbing DS et al., Crit Care 2007;11:R118; Severinghaus 1979 eq. 1 and eq. 4; the
alveolar gas equation, full form), at the precision the fact is stated to (0.1 mmHg).
"""

from __future__ import annotations

import pytest
from scipy.optimize import brentq

from service.assess import normals
from service.assess.derivation import Computed, DerivedFact
from service.config import Settings
from service.physiology import reference as ref
from service.physiology.gas_exchange import inspired_po2_mmhg
from tests.titration_reference import p50_at_ph, p50_eq1, ph2o_37_mmhg, room_air_projection

ENTRIES: dict[str, DerivedFact] = {entry.name: entry for entry in normals.FACTS}
PB = 760.0
DISPLAY = 0.05  # the facts are stated to 0.1 mm[Hg]


def _value(out: object) -> float:
    assert isinstance(out, Computed)
    assert isinstance(out.value, float)
    return out.value


def _room_air(name: str, **facts: float | None) -> Computed | None:
    out = ENTRIES[name].compute(
        barometric_pressure=PB, water_vapour_pressure=ph2o_37_mmhg(), settings=Settings(), **facts
    )
    assert out is None or isinstance(out, Computed)
    return out


@pytest.mark.parametrize(
    ("pao2", "fio2", "paco2", "hb", "ph"),
    [
        (100.0, 0.4, 40.0, 10.0, None),
        (70.0, 0.6, 50.0, 15.0, 7.25),
        (80.0, 0.35, 35.0, 12.0, 7.50),
    ],
)
def test_the_room_air_pao2_is_the_effective_shunt_carried_to_air(
    pao2: float, fio2: float, paco2: float, hb: float, ph: float | None
) -> None:
    facts = {"arterial_po2": pao2, "fio2": fio2, "arterial_pco2": paco2}
    p50 = p50_eq1() if ph is None else p50_at_ph(ph)
    expected = room_air_projection(
        pao2=pao2, fio2=fio2, paco2=paco2, pb=PB, ph2o=ph2o_37_mmhg(), hb=hb, p50=p50
    )
    out = _room_air("room_air_pao2", **facts, haemoglobin=hb, arterial_ph=ph)
    assert out is not None and _value(out) == pytest.approx(expected, abs=DISPLAY)
    assert expected < pao2  # less oxygen, less PaO2
    # The method says what was measured: the Hb, and the pH that moved the curve.
    assert "measured Hb" in out.method and "Hb 14 g/dL assumed" not in out.method
    assert ("the curve moved for the pH" in out.method) is (ph is not None)


def test_on_room_air_the_projection_is_the_gas_itself() -> None:
    out = _room_air("room_air_pao2", arterial_po2=55.0, fio2=0.21, arterial_pco2=40.0)
    assert out is not None and out.value == 55.0


def test_without_an_hb_the_projection_spans_the_assumed_range() -> None:
    # Hb not measured: 14 g/dL assumed, and the least and the most over 8-17 g/dL.
    facts = {"arterial_po2": 90.0, "fio2": 0.5, "arterial_pco2": 40.0}
    by_hb = [
        room_air_projection(pb=PB, ph2o=ph2o_37_mmhg(), hb=hb, pao2=90.0, fio2=0.5, paco2=40.0)
        for hb in (8.0, 14.0, 17.0)
    ]
    assert len({round(v, 1) for v in by_hb}) == 3  # the Hb moves it
    value = _room_air("room_air_pao2", **facts)
    least = _room_air("room_air_pao2_least", **facts)
    most = _room_air("room_air_pao2_most", **facts)
    assert value is not None and least is not None and most is not None
    assert _value(value) == pytest.approx(by_hb[1], abs=DISPLAY)
    assert _value(least) == pytest.approx(min(by_hb), abs=DISPLAY)
    assert _value(most) == pytest.approx(max(by_hb), abs=DISPLAY)
    assert "Hb 14 g/dL assumed" in value.method


@pytest.mark.parametrize(
    ("alveolar", "upper", "expected"),
    [(100.0, 20.0, 0.8), (400.0, 100.0, 0.75), (30.0, 45.0, 0.0), (0.0, 10.0, None)],
)
def test_the_a_a_ratio_limit_is_the_gradient_limit_restated(
    alveolar: float, upper: float, expected: float | None
) -> None:
    # PaO2 >= PAO2 - limit  <=>  PaO2 / PAO2 >= 1 - limit / PAO2: the same bound; a ratio is
    # not below zero, and there is none to an alveolar PO2 of zero.
    got = ENTRIES["a_a_ratio_lower_limit"].compute(
        alveolar_po2=alveolar, aa_gradient_upper_limit=upper
    )
    assert got == (None if expected is None else pytest.approx(expected, rel=1e-12))


def test_no_room_air_alveolar_po2_at_or_below_zero() -> None:
    # R 1.0 makes the PaCO2 term PaCO2 x (0.21 + 0.79) = PaCO2 exactly: a PaCO2 equal to the
    # inspired PO2 leaves an alveolar PO2 of exactly zero, which is no alveolar PO2.
    settings = Settings(respiratory_quotient=1.0)
    pio2 = inspired_po2_mmhg(fio2=0.21, barometric_mmhg=PB, water_vapour_mmhg=47.0)
    compute = ENTRIES["room_air_alveolar_po2"].compute
    common = {"barometric_pressure": PB, "water_vapour_pressure": 47.0, "settings": settings}
    assert compute(arterial_pco2=pio2, **common) is None
    assert compute(arterial_pco2=pio2 - 1.0, **common) is not None


def _residence_gap(pb: float) -> float:
    resident, visitor = (ref.expected_paco2(barometric_mmhg=pb, residence=r) for r in ref.Residence)
    return abs(resident.upper_limit_mmhg - visitor.upper_limit_mmhg)


@pytest.mark.parametrize(("gap", "asked"), [(0.95, False), (1.05, True)])
def test_the_residence_is_asked_only_when_it_moves_the_paco2_limit_by_1_mmhg(
    gap: float, asked: bool
) -> None:
    # An analyser reports PaCO2 to 1 mmHg (common practice): limits closer than that are the
    # same limit, and the residence is not asked (the PaCO2 expected is given without it).
    pb = brentq(lambda p: _residence_gap(p) - gap, 700.0, 760.0, xtol=1e-9)
    found = ENTRIES["paco2_expected"].compute(barometric_pressure=pb)
    assert (found is None) is asked
