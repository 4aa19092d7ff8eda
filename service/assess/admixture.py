"""Derived facts of oxygen content and venous admixture (the shunt equation)."""

from __future__ import annotations

from functools import lru_cache

from service.config import Settings
from service.physiology import constants as c
from service.physiology import oxygen_content as oc
from service.physiology.bounds import PH, require_possible
from service.physiology.oxygen_affinity import OxygenAffinity, oxygen_affinity
from service.physiology.saturation import saturation_from_po2

from .derivation import Computed, DerivedTable

table = DerivedTable()


@lru_cache(maxsize=64)
def _curve(arterial_ph: float | None) -> OxygenAffinity | None:
    """The patient's dissociation curve at 37 °C (where the analyser reports the gases): the
    standard curve shifted for the measured pH (Severinghaus 1979 eq. 4), or None without one.
    Cached: a pure function of the pH, which every scenario of a gas and every admixture fact
    share (an impossible pH raises, and a raise is never cached)."""
    return None if arterial_ph is None else oxygen_affinity(ph=arterial_ph)


@lru_cache(maxsize=64)
def _curve_note(arterial_ph: float) -> str:
    """How the SaO2 was found on the patient's curve at this pH (a fixed text per pH)."""
    curve = _curve(arterial_ph)
    assert curve is not None
    return (
        f"SaO2 from PaO2 on the patient's curve (Severinghaus, P50 {curve.p50_mmhg:.1f} "
        f"mmHg for pH {arterial_ph:.2f}, eq. 4)"
    )


_MEASURED_NOTE = "measured saturation"
_STANDARD_NOTE = "SaO2 from PaO2 on the standard curve (Severinghaus; no pH)"


@lru_cache(maxsize=64)
def _content_method(hufner: float, note: str, corrected: bool) -> str:
    """The CaO2 method text: it depends only on the Hüfner factor (a setting), how the
    saturation was found and whether COHb or MetHb corrected it, so it is written once."""
    if corrected:
        note += ", times (1 − COHb − MetHb)"
    return f"CaO2 = {hufner:g} × Hb × SaO2 + {c.O2_SOLUBILITY_ML_DL_PER_MMHG:g} × PaO2 ({note})"


def _carried(
    functional: float, carboxyhaemoglobin: float | None, methaemoglobin: float | None
) -> float:
    """The fraction of all haemoglobin carrying oxygen (COHb and MetHb carry none)."""
    return oc.fractional_saturation(
        functional_saturation=functional,
        carboxyhaemoglobin=carboxyhaemoglobin or 0.0,
        methaemoglobin=methaemoglobin or 0.0,
    )


@table.quantity(
    "arterial_o2_content",
    "mL/dL",
    (0.0, 40.0),
    1,
    "Oxygen content of arterial blood",
    result="arterial-o2-content",
)
def arterial_o2_content(
    *,
    haemoglobin: float,
    arterial_po2: float,
    settings: Settings,
    arterial_so2_functional: float | None = None,
    carboxyhaemoglobin: float | None = None,
    methaemoglobin: float | None = None,
    arterial_ph: float | None = None,
) -> Computed:
    # The functional saturation is the analyser's SaO2 or a co-oximeter's fractional O2Hb
    # divided by 1 − COHb − MetHb; times that factor again it is the measured O2Hb fraction.
    if arterial_so2_functional is not None:
        # A measured SaO2 needs no curve; a pH is still checked as the curve would check it,
        # so that an impossible pH is refused on every path.
        if arterial_ph is not None:
            require_possible("ph", arterial_ph, *PH, "[pH]")
        functional, note = arterial_so2_functional, _MEASURED_NOTE
    elif arterial_ph is not None:
        curve = _curve(arterial_ph)
        assert curve is not None
        functional = curve.saturation(po2_mmhg=arterial_po2)
        note = _curve_note(arterial_ph)
    else:
        functional = saturation_from_po2(po2_mmhg=arterial_po2)
        note = _STANDARD_NOTE
    hufner = settings.hufner_ml_per_g
    return Computed(
        oc.oxygen_content_ml_dl(
            haemoglobin_g_dl=haemoglobin,
            saturation=_carried(functional, carboxyhaemoglobin, methaemoglobin),
            po2_mmhg=arterial_po2,
            hufner_ml_per_g=hufner,
        ),
        _content_method(hufner, note, bool(carboxyhaemoglobin or methaemoglobin)),
    )


@lru_cache(maxsize=64)
def _capillary_content(
    haemoglobin: float,
    arterial_po2: float,
    alveolar_po2: float,
    hufner_ml_per_g: float,
    arterial_so2: float | None,
    carboxyhaemoglobin: float | None,
    methaemoglobin: float | None,
    arterial_ph: float | None,
) -> float:
    """The end-capillary O2 content (mL/dL). The end-capillary saturation comes from the same
    curve as the arterial one (the patient's, with a pH). Cached: the three admixture facts
    (at the assumed a-v difference and at both ends of its range) share it."""
    capillary_saturation = oc.end_capillary_saturation(
        alveolar_po2_mmhg=alveolar_po2,
        arterial_po2_mmhg=arterial_po2,
        arterial_saturation=arterial_so2,
        affinity=_curve(arterial_ph),
    )
    return oc.oxygen_content_ml_dl(
        haemoglobin_g_dl=haemoglobin,
        saturation=_carried(capillary_saturation, carboxyhaemoglobin, methaemoglobin),
        po2_mmhg=alveolar_po2,
        hufner_ml_per_g=hufner_ml_per_g,
    )


def venous_admixture_fraction(
    *,
    haemoglobin: float,
    arterial_po2: float,
    alveolar_po2: float,
    arterial_o2_content: float,
    hufner_ml_per_g: float,
    av_difference: float | None,
    arterial_so2: float | None = None,
    carboxyhaemoglobin: float | None = None,
    methaemoglobin: float | None = None,
    mixed_venous_so2: float | None = None,
    mixed_venous_po2: float | None = None,
    arterial_ph: float | None = None,
) -> float | None:
    """Qs/Qt by the shunt equation (a fraction), with a measured mixed-venous content or the
    a-v difference given; None when there is no end-capillary to arterial gap. The
    end-capillary saturation comes from the same curve as the arterial one (the patient's,
    with a pH)."""
    if alveolar_po2 <= arterial_po2:
        return None  # no end-capillary to arterial gap: nothing to apportion
    capillary = _capillary_content(
        haemoglobin,
        arterial_po2,
        alveolar_po2,
        hufner_ml_per_g,
        arterial_so2,
        carboxyhaemoglobin,
        methaemoglobin,
        arterial_ph,
    )
    venous_content: float | None = None
    if mixed_venous_so2 is not None:
        venous_content = oc.oxygen_content_ml_dl(
            haemoglobin_g_dl=haemoglobin,
            saturation=_carried(mixed_venous_so2, carboxyhaemoglobin, methaemoglobin),
            po2_mmhg=(
                mixed_venous_po2 if mixed_venous_po2 is not None else c.NORMAL_MIXED_VENOUS_PO2_MMHG
            ),
            hufner_ml_per_g=hufner_ml_per_g,
        )
        av_difference = None
    return oc.shunt_fraction(
        end_capillary_content_ml_dl=capillary,
        arterial_content_ml_dl=arterial_o2_content,
        mixed_venous_content_ml_dl=venous_content,
        av_difference_ml_dl=av_difference,
    )


def _label(fio2: float, venous: bool, difference: float | None) -> str:
    return _label_text(fio2 >= c.TRUE_SHUNT_MIN_FIO2, venous, difference)


@lru_cache(maxsize=64)
def _label_text(shunt: bool, venous: bool, difference: float | None) -> str:
    # Written once per choice (and the a-v difference, a setting), not on every call.
    kind = "shunt (on near-pure oxygen)" if shunt else "venous admixture"
    how = (
        "measured mixed-venous content"
        if venous
        else f"assumed a-v content difference {difference:g} mL/dL"
    )
    return f"Qs/Qt = (CcO2 − CaO2) / (CcO2 − CvO2), {how}; {kind}"


def _admixture(
    av_difference: float | None,
    haemoglobin: float,
    arterial_po2: float,
    alveolar_po2: float,
    arterial_o2_content: float,
    settings: Settings,
    arterial_so2: float | None,
    carboxyhaemoglobin: float | None,
    methaemoglobin: float | None,
    mixed_venous_so2: float | None,
    mixed_venous_po2: float | None,
    arterial_ph: float | None,
) -> float | None:
    return venous_admixture_fraction(
        haemoglobin=haemoglobin,
        arterial_po2=arterial_po2,
        alveolar_po2=alveolar_po2,
        arterial_o2_content=arterial_o2_content,
        hufner_ml_per_g=settings.hufner_ml_per_g,
        av_difference=av_difference,
        arterial_so2=arterial_so2,
        carboxyhaemoglobin=carboxyhaemoglobin,
        methaemoglobin=methaemoglobin,
        mixed_venous_so2=mixed_venous_so2,
        mixed_venous_po2=mixed_venous_po2,
        arterial_ph=arterial_ph,
    )


@table.quantity(
    "venous_admixture",
    "%",
    (-100.0, 100.0),
    0,
    "Venous admixture (shunt plus low-V/Q units) by the shunt equation",
    result="venous-admixture",
)
def venous_admixture(
    *,
    haemoglobin: float,
    arterial_po2: float,
    alveolar_po2: float,
    arterial_o2_content: float,
    fio2: float,
    settings: Settings,
    arterial_so2_functional: float | None = None,
    carboxyhaemoglobin: float | None = None,
    methaemoglobin: float | None = None,
    mixed_venous_so2: float | None = None,
    mixed_venous_po2: float | None = None,
    arterial_ph: float | None = None,
) -> Computed | None:
    difference = settings.assumed_av_difference_ml_dl
    value = _admixture(
        difference,
        haemoglobin,
        arterial_po2,
        alveolar_po2,
        arterial_o2_content,
        settings,
        arterial_so2_functional,
        carboxyhaemoglobin,
        methaemoglobin,
        mixed_venous_so2,
        mixed_venous_po2,
        arterial_ph,
    )
    if value is None:
        return None
    return Computed(value, _label(fio2, mixed_venous_so2 is not None, difference))


def _admixture_at_end(end: int) -> object:
    def compute(
        *,
        haemoglobin: float,
        arterial_po2: float,
        alveolar_po2: float,
        arterial_o2_content: float,
        settings: Settings,
        arterial_so2_functional: float | None = None,
        carboxyhaemoglobin: float | None = None,
        methaemoglobin: float | None = None,
        mixed_venous_so2: float | None = None,
        mixed_venous_po2: float | None = None,
        arterial_ph: float | None = None,
    ) -> float | None:
        # A larger a-v difference (a low cardiac output) gives a smaller admixture: the least
        # admixture is at the top of the range, the most at the bottom.
        difference = settings.av_difference_range_ml_dl[end]
        return _admixture(
            difference,
            haemoglobin,
            arterial_po2,
            alveolar_po2,
            arterial_o2_content,
            settings,
            arterial_so2_functional,
            carboxyhaemoglobin,
            methaemoglobin,
            mixed_venous_so2,
            mixed_venous_po2,
            arterial_ph,
        )

    return compute


table.quantity(
    "venous_admixture_least",
    "%",
    (-100.0, 100.0),
    0,
    "Venous admixture at the largest plausible a-v content difference (unless measured)",
)(_admixture_at_end(1))  # type: ignore[arg-type]
table.quantity(
    "venous_admixture_most",
    "%",
    (-100.0, 100.0),
    0,
    "Venous admixture at the smallest plausible a-v content difference (unless measured)",
)(_admixture_at_end(0))  # type: ignore[arg-type]


@table.quantity(
    "shunt_fraction",
    "%",
    (-100.0, 100.0),
    0,
    "Shunt fraction: the venous admixture on near-pure oxygen",
    result="shunt-fraction",
)
def shunt_fraction(*, venous_admixture: float, fio2: float) -> Computed | None:
    if fio2 < c.TRUE_SHUNT_MIN_FIO2:
        return None  # below near-pure oxygen it is venous admixture, not shunt
    return Computed(venous_admixture, "venous admixture on near-pure oxygen (FiO2 ≥ 0.99)")


def _bound_at(end: int | None) -> object:
    def compute(
        *,
        aa_gradient: float,
        fio2: float,
        settings: Settings,
        mixed_venous_so2: float | None = None,
    ) -> Computed | None:
        del mixed_venous_so2  # read so that a measured content is not second-guessed below
        if fio2 < c.DISSOLVED_SHUNT_BOUND_MIN_FIO2 or aa_gradient <= 0.0:
            return None
        difference = (
            settings.assumed_av_difference_ml_dl
            if end is None
            else settings.av_difference_range_ml_dl[end]
        )
        return Computed(
            oc.shunt_fraction_dissolved_bound(
                aa_gradient_mmhg=aa_gradient, av_difference_ml_dl=difference
            ),
            _bound_method(difference),
        )

    return compute


@lru_cache(maxsize=16)
def _bound_method(difference: float) -> str:
    # Depends only on the a-v difference (a setting): written once, not on every call.
    return (
        "dissolved-oxygen bound on near-pure oxygen: 0.003 × A-a / (0.003 × A-a + avd), "
        f"avd {difference:g} mL/dL (no Hb needed)"
    )


table.quantity(
    "shunt_dissolved_bound",
    "%",
    (0.0, 100.0),
    0,
    "Least shunt the A-a gradient means on near-pure oxygen (dissolved O2; no Hb needed)",
    result="shunt-dissolved-bound",
)(_bound_at(None))  # type: ignore[arg-type]
table.quantity(
    "shunt_dissolved_bound_least",
    "%",
    (0.0, 100.0),
    0,
    "The dissolved-oxygen shunt bound at the largest plausible a-v content difference",
)(_bound_at(1))  # type: ignore[arg-type]
table.quantity(
    "shunt_dissolved_bound_most",
    "%",
    (0.0, 100.0),
    0,
    "The dissolved-oxygen shunt bound at the smallest plausible a-v content difference",
)(_bound_at(0))  # type: ignore[arg-type]


FACTS = tuple(table.facts)
