"""Properties that must hold for every valid input (hypothesis)."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.physiology.gas_exchange import aa_gradient_mmhg, alveolar_po2_mmhg
from service.physiology.saturation import po2_from_saturation, saturation_from_po2

fio2s = st.floats(min_value=0.10, max_value=1.0)
paco2s = st.floats(min_value=5.0, max_value=150.0)
pressures = st.floats(min_value=250.0, max_value=800.0)
quotients = st.floats(min_value=0.6, max_value=1.2)


@given(fio2s, fio2s, paco2s, pressures, quotients)
def test_alveolar_po2_rises_with_fio2(
    f1: float, f2: float, paco2: float, pb: float, rq: float
) -> None:
    low, high = sorted((f1, f2))
    assert alveolar_po2_mmhg(
        fio2=high, paco2_mmhg=paco2, barometric_mmhg=pb, respiratory_quotient=rq
    ) >= alveolar_po2_mmhg(fio2=low, paco2_mmhg=paco2, barometric_mmhg=pb, respiratory_quotient=rq)


@given(fio2s, paco2s, pressures, pressures)
def test_alveolar_po2_rises_with_barometric_pressure(
    fio2: float, paco2: float, p1: float, p2: float
) -> None:
    low, high = sorted((p1, p2))
    assert alveolar_po2_mmhg(fio2=fio2, paco2_mmhg=paco2, barometric_mmhg=high) >= (
        alveolar_po2_mmhg(fio2=fio2, paco2_mmhg=paco2, barometric_mmhg=low)
    )


@given(fio2s, paco2s, paco2s)
def test_alveolar_po2_falls_as_paco2_rises(fio2: float, c1: float, c2: float) -> None:
    low, high = sorted((c1, c2))
    assert alveolar_po2_mmhg(fio2=fio2, paco2_mmhg=high) <= alveolar_po2_mmhg(
        fio2=fio2, paco2_mmhg=low
    )


@given(st.floats(min_value=0.0, max_value=700.0), st.floats(min_value=0.0, max_value=700.0))
def test_aa_gradient_is_positive_exactly_when_alveolar_exceeds_arterial(
    alveolar: float, arterial: float
) -> None:
    aa = aa_gradient_mmhg(alveolar_po2_mmhg=alveolar, arterial_po2_mmhg=arterial)
    assert (aa > 0) == (alveolar > arterial)
    assert aa == -aa_gradient_mmhg(alveolar_po2_mmhg=arterial, arterial_po2_mmhg=alveolar)


@given(st.floats(min_value=0.01, max_value=0.9999))
def test_inverse_curve_inverts_the_curve(saturation: float) -> None:
    po2 = po2_from_saturation(saturation=saturation)
    assert saturation_from_po2(po2_mmhg=po2) == pytest.approx(saturation, abs=1e-10)


@given(st.floats(min_value=1.0, max_value=600.0))
def test_curve_inverts_the_inverse(po2: float) -> None:
    saturation = saturation_from_po2(po2_mmhg=po2)
    if saturation < 0.999999:  # beyond that, float resolution of S limits the inverse
        assert po2_from_saturation(saturation=saturation) == pytest.approx(po2, rel=1e-6)


@given(st.floats(min_value=0.0, max_value=1000.0), st.floats(min_value=0.0, max_value=1000.0))
def test_saturation_never_falls_as_po2_rises(p1: float, p2: float) -> None:
    low, high = sorted((p1, p2))
    assert saturation_from_po2(po2_mmhg=low) <= saturation_from_po2(po2_mmhg=high)
