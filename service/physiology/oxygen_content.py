"""Oxygen content of blood and the shunt (venous admixture) estimate.

Contents in mL O2 per dL of blood, haemoglobin in g/dL, saturations as fractions. At FiO2 below
1.0 the shunt equation measures venous admixture (true shunt plus low-V/Q units); only at FiO2
1.0 does it approach true shunt. Comparing it across two FiO2s separates the two.
"""

from __future__ import annotations

from dataclasses import dataclass

from service.exceptions import ImpossibleValueError
from service.physiology import constants as c
from service.physiology.bounds import (
    FRACTION,
    HAEMOGLOBIN_G_DL,
    PARTIAL_PRESSURE_MMHG,
    require_possible,
)
from service.physiology.oxygen_affinity import OxygenAffinity
from service.physiology.saturation import saturation_from_po2

HUFNER_RANGE_ML_PER_G = (1.30, 1.40)  # 1.306 to the theoretical 1.39 are all in published use
AV_DIFFERENCE_RANGE_ML_DL = (0.5, 15.0)


def oxygen_content_ml_dl(
    *,
    haemoglobin_g_dl: float,
    saturation: float,
    po2_mmhg: float,
    hufner_ml_per_g: float = c.HUFNER_CONVENTIONAL_ML_PER_G,
    solubility_ml_dl_per_mmhg: float = c.O2_SOLUBILITY_ML_DL_PER_MMHG,
) -> float:
    """Oxygen content (mL/dL): bound plus dissolved.

        CO2 = k × Hb × S + 0.003 × PO2

    k is the Hüfner factor: 1.34 by convention, 1.39 in theory, 1.368 ± 0.017 measured
    (Dijkhuizen P et al., Pflügers Arch 1977;369:223). Solubility 0.003 mL/dL/mmHg at 37 °C.
    """
    require_possible("haemoglobin_g_dl", haemoglobin_g_dl, *HAEMOGLOBIN_G_DL, "g/dL")
    require_possible("saturation", saturation, *FRACTION, "1")
    require_possible("po2_mmhg", po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible("hufner_ml_per_g", hufner_ml_per_g, *HUFNER_RANGE_ML_PER_G, "mL/g")
    return hufner_ml_per_g * haemoglobin_g_dl * saturation + solubility_ml_dl_per_mmhg * po2_mmhg


def fractional_saturation(
    *,
    functional_saturation: float,
    carboxyhaemoglobin: float = 0.0,
    methaemoglobin: float = 0.0,
) -> float:
    """Fraction of *total* haemoglobin carrying O2 (FO2Hb) from the functional saturation.

        FO2Hb = sO2 × (1 − FCOHb − FMetHb)

    sO2 = O2Hb / (O2Hb + HHb) is what the dissociation curve and pulse oximetry give (and what
    LOINC 2708-6 names); the content equation needs O2Hb / total Hb, so carboxy- and
    methaemoglobin must come off. Definitions: co-oximetry fractions (common practice;
    LOINC names sO2 and O2Hb / total Hb as different components). All arguments are fractions.

    Raises:
        ImpossibleValueError: a fraction outside 0–1, or COHb + MetHb above 1.
    """
    require_possible("functional_saturation", functional_saturation, *FRACTION, "1")
    require_possible("carboxyhaemoglobin", carboxyhaemoglobin, *FRACTION, "1")
    require_possible("methaemoglobin", methaemoglobin, *FRACTION, "1")
    available = 1.0 - carboxyhaemoglobin - methaemoglobin
    require_possible("1 - carboxyhaemoglobin - methaemoglobin", available, *FRACTION, "1")
    return functional_saturation * available


def end_capillary_saturation(
    *,
    alveolar_po2_mmhg: float,
    arterial_po2_mmhg: float,
    arterial_saturation: float | None,
    affinity: OxygenAffinity | None = None,
) -> float:
    """Saturation of pulmonary end-capillary blood, which leaves the alveoli at PAO2.

    From the Severinghaus curve at PAO2 (shifted to the blood's P50 when ``affinity`` is
    given, the same curve the arterial saturation was taken from), except when the arterial
    blood is itself on the flat part of the curve (PaO2 ≥ 150 mmHg) and SaO2 was measured:
    then ScO2 = SaO2, so that a dyshaemoglobin or an analyser offset is not counted as shunt.
    (Applying that switch on PAO2 instead of PaO2 would cancel the haemoglobin term for a
    hypoxaemic patient on oxygen and hide most of the shunt.)
    """
    if arterial_saturation is not None and arterial_po2_mmhg >= c.FLAT_CURVE_PO2_MMHG:
        return arterial_saturation
    if affinity is not None:
        require_possible("alveolar_po2_mmhg", alveolar_po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
        return affinity.saturation(po2_mmhg=alveolar_po2_mmhg)
    return saturation_from_po2(po2_mmhg=alveolar_po2_mmhg)


def end_capillary_content_ml_dl(
    *,
    haemoglobin_g_dl: float,
    alveolar_po2_mmhg: float,
    arterial_po2_mmhg: float,
    arterial_saturation: float | None = None,
    hufner_ml_per_g: float = c.HUFNER_CONVENTIONAL_ML_PER_G,
) -> float:
    """Pulmonary end-capillary O2 content (mL/dL): at PAO2, ScO2 by ``end_capillary_saturation``.

    Source: the Berggren/Riley shunt model — end-capillary blood equilibrates with alveolar gas.
    """
    saturation = end_capillary_saturation(
        alveolar_po2_mmhg=alveolar_po2_mmhg,
        arterial_po2_mmhg=arterial_po2_mmhg,
        arterial_saturation=arterial_saturation,
    )
    return oxygen_content_ml_dl(
        haemoglobin_g_dl=haemoglobin_g_dl,
        saturation=saturation,
        po2_mmhg=alveolar_po2_mmhg,
        hufner_ml_per_g=hufner_ml_per_g,
    )


def shunt_fraction(
    *,
    end_capillary_content_ml_dl: float,
    arterial_content_ml_dl: float,
    mixed_venous_content_ml_dl: float | None = None,
    av_difference_ml_dl: float | None = None,
) -> float:
    """Shunt fraction (venous admixture), Qs/Qt as a fraction 0–1:

        Qs/Qt = (CcO2 − CaO2) / (CcO2 − CvO2)

    With no mixed-venous sample, pass an assumed arterial–venous content difference instead
    (CvO2 = CaO2 − avd; 5 mL/dL at rest by common practice, 3.5 in the "estimated shunt"
    equations for the critically ill). Give exactly one of the two.
    Source: Berggren SM, Acta Physiol Scand 1942;4(Suppl 11); Riley RL & Cournand A 1949.

    Raises:
        ValueError: both or neither of ``mixed_venous_content_ml_dl`` and ``av_difference_ml_dl``.
        ImpossibleValueError: venous content not below end-capillary content.
    """
    if (mixed_venous_content_ml_dl is None) == (av_difference_ml_dl is None):
        raise ValueError("give exactly one of mixed_venous_content_ml_dl and av_difference_ml_dl")
    if av_difference_ml_dl is not None:
        require_possible(
            "av_difference_ml_dl", av_difference_ml_dl, *AV_DIFFERENCE_RANGE_ML_DL, "mL/dL"
        )
        venous = arterial_content_ml_dl - av_difference_ml_dl
    else:
        assert mixed_venous_content_ml_dl is not None
        venous = mixed_venous_content_ml_dl
    if venous >= end_capillary_content_ml_dl:
        raise ImpossibleValueError(
            "mixed_venous_content_ml_dl",
            venous,
            "venous O2 content must be below end-capillary content "
            f"({end_capillary_content_ml_dl:.2f} mL/dL)",
        )
    return (end_capillary_content_ml_dl - arterial_content_ml_dl) / (
        end_capillary_content_ml_dl - venous
    )


@dataclass(frozen=True, slots=True)
class ShuntComparison:
    """Venous admixture at two FiO2s (the "virtual shunt" test), as fractions."""

    lower_fio2: float
    higher_fio2: float
    shunt_at_lower_fio2: float
    shunt_at_higher_fio2: float

    @property
    def change(self) -> float:
        """Admixture on the higher FiO2 minus on the lower: near 0 for true shunt, clearly
        negative when low-V/Q units (or diffusion limitation) were corrected by oxygen."""
        return self.shunt_at_higher_fio2 - self.shunt_at_lower_fio2


def compare_shunt_at_two_fio2(
    *, fio2_a: float, shunt_a: float, fio2_b: float, shunt_b: float
) -> ShuntComparison:
    """Order two (FiO2, venous admixture) pairs by FiO2 for the two-FiO2 comparison.

    Principle (Benatar SR, Hewlett AM, Nunn JF, "The use of iso-shunt lines for control of oxygen
    therapy", Br J Anaesth 1973;45:711): true shunt is unaffected by FiO2, so an admixture that
    stays constant as FiO2 rises is shunt; one that falls was low-V/Q units. Judging the size
    of the change is left to the rules.

    Raises:
        ImpossibleValueError: the two FiO2s are equal (nothing to compare).
    """
    for name, value in (("shunt_a", shunt_a), ("shunt_b", shunt_b)):
        require_possible(name, value, *FRACTION, "1")
    if fio2_a == fio2_b:
        raise ImpossibleValueError("fio2_b", fio2_b, "the two gases must differ in FiO2")
    (low_f, low_s), (high_f, high_s) = sorted(((fio2_a, shunt_a), (fio2_b, shunt_b)))
    return ShuntComparison(low_f, high_f, low_s, high_s)


def shunt_fraction_dissolved_bound(*, aa_gradient_mmhg: float, av_difference_ml_dl: float) -> float:
    """A lower bound of the shunt fraction on (near) pure oxygen that needs no haemoglobin.

    When end-capillary blood is fully saturated (alveolar PO2 of several hundred mmHg), the
    end-capillary minus arterial content is at least the dissolved-oxygen difference,
    0.003 × (PAO2 − PaO2): the haemoglobin term can only add to it (arterial saturation ≤ 1).
    Qs/Qt = x / (x + avd) rises with x, so

        Qs/Qt ≥ 0.003 × A-a / (0.003 × A-a + avd)

    The same expression, with Hb fully saturated on both sides, is the source of the bedside
    rule "about 5 % shunt per 100 mmHg of A-a on 100 % oxygen" (common practice). The bound
    holds for the a-v difference given; a larger true a-v difference gives a smaller shunt.
    Source: the Berggren shunt equation with the content equation (``shunt_fraction``).
    """
    require_possible("aa_gradient_mmhg", aa_gradient_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible(
        "av_difference_ml_dl", av_difference_ml_dl, *AV_DIFFERENCE_RANGE_ML_DL, "mL/dL"
    )
    dissolved = c.O2_SOLUBILITY_ML_DL_PER_MMHG * aa_gradient_mmhg
    return dissolved / (dissolved + av_difference_ml_dl)
