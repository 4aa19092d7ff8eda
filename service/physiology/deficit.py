"""Why is this PaO2 lower than a healthy person's? The fall, split into its causes (mm[Hg]).

The reference is a healthy person of the patient's age at sea level, breathing air, PaCO2 40,
at 37 °C: expected PaO2 = reference PAO2 − expected A-a gradient for age (``reference``).
The patient's PaO2 = PAO2 − A-a. Subtracting, the fall from the expected PaO2 splits exactly
into three parts, each in mm[Hg] of PaO2:

* **inspired** — what the setting does to a healthy lung: the inspired PO2 (altitude, FiO2),
  the PaCO2 expected there (residents of high places breathe more), and the change of the
  normal A-a gradient with the alveolar PO2 (``reference.normal_aa_gradient``):

      (PIO2_ref − PIO2) + (PaCO2_expected × k − 40 × k_ref)
          + (A-a_normal(PAO2_setting) − A-a_normal,ref)

  Negative on supplemental oxygen: an oxygen credit.
* **ventilation** — PaCO2 above (or, negative, below) the value expected for the setting,
  through the alveolar gas equation, (PaCO2 − PaCO2_expected) × k, with the change of the
  normal A-a gradient that the lower alveolar PO2 brings.
* **gas exchange** — the A-a gradient above the normal for age at this alveolar PO2:
  A-a − A-a_normal(PAO2).

with k = FiO2 + (1 − FiO2)/R, the bracket of the full alveolar gas equation (West,
Respiratory Physiology; Riley–Fenn form). By construction inspired + ventilation + gas
exchange = expected PaO2 − PaO2. Without a PaCO2, ventilation and gas exchange cannot be told
apart: the inspired part is computed at the expected PaCO2 and the rest is reported as
``unattributed``.
"""

from __future__ import annotations

from dataclasses import dataclass

from service.physiology import constants as c
from service.physiology import reference
from service.physiology.bounds import PARTIAL_PRESSURE_MMHG, require_possible
from service.physiology.gas_exchange import inspired_po2_mmhg
from service.physiology.water_vapour import water_vapour_pressure_mmhg


@dataclass(frozen=True, slots=True)
class DeficitPartition:
    """The fall of PaO2 below the reference, split into its causes (all mm[Hg]).

    ``ventilation`` and ``gas_exchange`` are None when PaCO2 is unknown; ``unattributed`` then
    holds their sum. Otherwise ``unattributed`` is zero to rounding.
    """

    expected_pao2: float
    arterial_po2: float
    inspired: float
    ventilation: float | None
    gas_exchange: float | None
    unattributed: float

    @property
    def fall(self) -> float:
        """Expected minus measured PaO2 (positive when the PaO2 is low)."""
        return self.expected_pao2 - self.arterial_po2

    @property
    def gross(self) -> float:
        """The sum of the parts that lower the PaO2 (credits left out)."""
        parts = (self.inspired, self.ventilation, self.gas_exchange, self.unattributed)
        return sum(p for p in parts if p is not None and p > 0.0)

    def share(self, part: float | None) -> float | None:
        """``part`` as a fraction of ``gross`` (None when nothing lowers the PaO2)."""
        if part is None:
            return None
        gross = self.gross
        return max(part, 0.0) / gross if gross > 0.0 else None


def alveolar_bracket(*, fio2: float, respiratory_quotient: float) -> float:
    """k = FiO2 + (1 − FiO2)/R: mm[Hg] of PAO2 lost per mm[Hg] of PaCO2 (full equation)."""
    return fio2 + (1.0 - fio2) / respiratory_quotient


# The reference's water vapour pressure (37 °C) and inspired PO2 (sea level, air): fixed
# numbers, worked out once here by the same functions rather than on every partition.
_PH2O_37_MMHG = water_vapour_pressure_mmhg(temperature_cel=c.NORMAL_BODY_TEMPERATURE_CEL)
_REFERENCE_PIO2_MMHG = inspired_po2_mmhg(
    fio2=c.ROOM_AIR_FIO2, barometric_mmhg=c.SEA_LEVEL_PRESSURE_MMHG, water_vapour_mmhg=_PH2O_37_MMHG
)


def _alveolar(pio2: float, paco2_mmhg: float, k: float) -> float:
    """``alveolar_po2_mmhg`` from its inspired PO2 and bracket, already worked out (and their
    inputs checked): PIO2 − PaCO2 × k, with the PaCO2 checked as there."""
    require_possible("paco2_mmhg", paco2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    return pio2 - paco2_mmhg * k


def partition_pao2_deficit(
    *,
    arterial_po2_mmhg: float,
    age_years: float,
    fio2: float,
    barometric_mmhg: float,
    expected_paco2_mmhg: float,
    paco2_mmhg: float | None,
    water_vapour_mmhg: float | None = None,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
) -> DeficitPartition:
    """Split expected PaO2 (age, sea level, air) minus measured PaO2 into its causes.

    ``expected_paco2_mmhg`` is the PaCO2 of healthy people in this setting
    (``reference.expected_paco2``); ``water_vapour_mmhg`` defaults to the 37 °C value, the
    temperature at which the analyser reports PaO2 and PaCO2.

    Raises:
        ImpossibleValueError: an input outside what the physiology functions accept.
    """
    require_possible("arterial_po2_mmhg", arterial_po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    r = respiratory_quotient
    ph2o = _PH2O_37_MMHG if water_vapour_mmhg is None else water_vapour_mmhg
    expected = reference.expected_pao2_mmhg(age_years=age_years)
    ref_alveolar = reference.reference_alveolar_po2_mmhg(respiratory_quotient=r)
    ref_pio2 = _REFERENCE_PIO2_MMHG
    pio2 = inspired_po2_mmhg(fio2=fio2, barometric_mmhg=barometric_mmhg, water_vapour_mmhg=ph2o)
    k = alveolar_bracket(fio2=fio2, respiratory_quotient=r)
    k_ref = alveolar_bracket(fio2=c.ROOM_AIR_FIO2, respiratory_quotient=r)

    def normal(alveolar: float) -> float:
        # Only the expected gradient is read: the same number as ``normal_aa_gradient``'s
        # ``expected``, without working out the upper limit beside it.
        return reference.normal_aa_gradient_mmhg(
            age_years=age_years, alveolar_po2_mmhg=alveolar, respiratory_quotient=r, limit=False
        )

    # The alveolar PO2 this person would have at the PaCO2 expected here, and the normal A-a
    # gradient that goes with it. PIO2 − PaCO2 × k is ``alveolar_po2_mmhg`` term for term (the
    # same expressions, so the same number); its FiO2, PB, PH2O and R were checked above (R by
    # the reference's alveolar PO2), so only the PaCO2 is checked here.
    setting_alveolar = _alveolar(pio2, expected_paco2_mmhg, k)
    setting_normal_aa = normal(setting_alveolar)
    inspired = (
        (ref_pio2 - pio2)
        + (expected_paco2_mmhg * k - reference.REFERENCE_PACO2_MMHG * k_ref)
        + (setting_normal_aa - (ref_alveolar - expected))
    )
    fall = expected - arterial_po2_mmhg
    if paco2_mmhg is None:
        return DeficitPartition(
            expected_pao2=expected,
            arterial_po2=arterial_po2_mmhg,
            inspired=inspired,
            ventilation=None,
            gas_exchange=None,
            unattributed=fall - inspired,
        )
    alveolar = _alveolar(pio2, paco2_mmhg, k)
    normal_aa = normal(alveolar)
    # A PaCO2 away from the expected value moves the alveolar PO2 by ΔPaCO2 × k, and the
    # normal A-a gradient with it: ventilation takes both, so that the parts add up exactly.
    ventilation = (paco2_mmhg - expected_paco2_mmhg) * k + (normal_aa - setting_normal_aa)
    gas_exchange = (alveolar - arterial_po2_mmhg) - normal_aa
    return DeficitPartition(
        expected_pao2=expected,
        arterial_po2=arterial_po2_mmhg,
        inspired=inspired,
        ventilation=ventilation,
        gas_exchange=gas_exchange,
        unattributed=fall - inspired - ventilation - gas_exchange,
    )
