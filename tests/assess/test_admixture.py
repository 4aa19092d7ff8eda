"""The venous admixture and shunt facts as the assessment derives them: their possible
ranges, the a-v content difference at each end of the site's range, and when the
dissolved-oxygen bound applies (the shunt equation: Berggren 1942; content equation with
0.003 mL/dL/mmHg of dissolved oxygen, common practice)."""

from __future__ import annotations

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.derivation import Computed, DerivedFact
from service.assess.derived import DERIVED_FACTS
from service.config import Settings

ENTRIES: dict[str, DerivedFact] = {entry.name: entry for entry in DERIVED_FACTS}
SOLUBILITY_ML_DL_PER_MMHG = 0.003  # dissolved O2 at 37 °C (common practice)


@pytest.mark.parametrize(
    "name",
    ["venous_admixture", "venous_admixture_least", "venous_admixture_most", "shunt_fraction"],
)
def test_an_admixture_is_a_share_of_the_cardiac_output(name: str) -> None:
    # Qs/Qt is the share of the cardiac output that bypasses ventilated alveoli (Berggren
    # 1942): 95 % is a possible (extreme) shunt; above 100 % would need an arterial content
    # below the mixed-venous one. A negative admixture (arterial above end-capillary content)
    # is measurement error, kept down to -100 % so that the rules see it, and refused below.
    spec = DEFAULT_CATALOGUE[name]
    assert spec.problem(95.0) is None and spec.problem(-95.0) is None
    assert spec.problem(105.0) is not None and spec.problem(-105.0) is not None


@pytest.mark.parametrize(
    "name", ["shunt_dissolved_bound", "shunt_dissolved_bound_least", "shunt_dissolved_bound_most"]
)
def test_a_shunt_bound_is_a_share_of_the_cardiac_output(name: str) -> None:
    # A lower bound of a share of the cardiac output: 0 to 100 %.
    spec = DEFAULT_CATALOGUE[name]
    assert spec.problem(0.0) is None and spec.problem(95.0) is None
    assert spec.problem(-1.0) is not None and spec.problem(105.0) is not None


def _bound(avd_ml_dl: float, aa_mmhg: float) -> float:
    # Qs/Qt >= 0.003 A-a / (0.003 A-a + avd): the shunt equation with end-capillary and
    # arterial haemoglobin fully saturated (dissolved oxygen only).
    dissolved = SOLUBILITY_ML_DL_PER_MMHG * aa_mmhg
    return dissolved / (dissolved + avd_ml_dl)


def _value(out: object) -> float:
    assert isinstance(out, Computed)
    assert isinstance(out.value, float)
    return out.value


@pytest.mark.parametrize(
    ("name", "avd"),
    [
        ("shunt_dissolved_bound", 5.0),
        # A larger a-v difference (lower cardiac output) means less shunt for the same gap.
        ("shunt_dissolved_bound_least", 7.0),
        ("shunt_dissolved_bound_most", 3.5),
    ],
)
def test_the_dissolved_bound_at_each_a_v_difference(name: str, avd: float) -> None:
    settings = Settings(av_difference_range_ml_dl=(3.5, 7.0), assumed_av_difference_ml_dl=5.0)
    compute = ENTRIES[name].compute
    got = _value(compute(aa_gradient=400.0, fio2=1.0, settings=settings))
    assert got == pytest.approx(_bound(avd, 400.0), rel=1e-12)


@pytest.mark.parametrize(
    ("fio2", "aa_gradient", "applies"),
    [
        # Near-pure oxygen starts at FiO2 0.9 (the rule set's threshold for the bound).
        (0.9, 300.0, True),
        (0.89, 300.0, False),
        (0.6, 300.0, False),
        # No alveolar-arterial gap: nothing for a bound to say (not a shunt of 0 %).
        (1.0, 0.0, False),
        (1.0, 0.5, True),
    ],
)
def test_the_dissolved_bound_applies_on_near_pure_oxygen_with_a_gap(
    fio2: float, aa_gradient: float, applies: bool
) -> None:
    out = ENTRIES["shunt_dissolved_bound"].compute(
        aa_gradient=aa_gradient, fio2=fio2, settings=Settings()
    )
    assert (out is not None) is applies
