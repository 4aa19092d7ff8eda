"""The affinity of haemoglobin for oxygen (P50) and the dissociation curve shifted to it.

The Severinghaus 1979 curve (``saturation.py``) is the standard human curve: 37 °C, pH 7.40,
PCO2 40 mmHg, P50 26.86 mmHg (the equation's exact P50). Acidaemia, hypercapnia and fever
raise the P50 (the curve moves right); alkalaemia and hypothermia lower it. Here the whole
curve is scaled along the PO2 axis to a patient's P50 (the "virtual PO2" idea: the blood
behaves at PO2 as standard blood does at PO2 × P50_standard / P50):

    S(PO2) = S_standard(PO2 × 26.86 / P50)

P50 from pH and temperature by Severinghaus JW, J Appl Physiol 1979;46:599, eq. 4 (the Bohr
coefficient) and eq. 3 (the temperature coefficient), applied at the P50:

    d ln PO2 / d pH = (PO2 / 26.6)^0.184 − 2.2                            (eq. 4)
    d ln PO2 / d T  = 0.058 / ((0.243 × PO2 / 100)^3.88 + 1) + 0.013      (eq. 3)

Eq. 4 is integrated exactly over the pH change (it has a closed form); eq. 3 is applied with its
coefficient at the P50 reached (it varies by less than 0.1 % between PO2 15 and 45 mmHg). The
two coefficients vary along the curve; one P50 for the whole curve is the usual simplification.
Without a measured pH, a PaCO2 can give a pH by assuming an acute respiratory change from
normal (Henderson, with the acute HCO3 compensation of Narins & Emmett 1980); with neither, the
curve is the standard one. 2,3-DPG and foetal haemoglobin are not modelled: pass the blood's
standardised P50 (pH 7.40, 37 °C), from which the shifts start, or a P50 measured in vivo.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from service.physiology import constants as c
from service.physiology.acid_base import Chronicity, expected_hco3_mmol_l, hydrogen_ion_nmol_l
from service.physiology.acid_base import ph_from_hydrogen_ion as _ph_from_h
from service.physiology.bounds import BODY_TEMPERATURE_CEL, PH, require_possible

STANDARD_P50_MMHG = 26.86  # exact P50 of Severinghaus 1979 eq. 1 ([calc], saturation.py)
STANDARD_PH = 7.40
P50_LIMITS_MMHG = (10.0, 60.0)  # foetal blood (about 19) to extreme right shift

_BOHR_A = 0.184  # eq. 4 exponent
_BOHR_B = 2.2  # eq. 4 constant
_BOHR_REFERENCE_MMHG = 26.6  # eq. 4 reference PO2


@dataclass(frozen=True, slots=True)
class OxygenAffinity:
    """A dissociation curve: the standard curve scaled to ``p50_mmhg``; ``method`` says how the
    P50 was obtained (for the result's explanation). ``standard_p50_mmhg`` is the blood's P50
    at pH 7.40 and 37 °C, from which the pH and temperature shifts start (26.86 for adult
    blood; lower, for example, for foetal haemoglobin); ``in_vivo`` marks a P50 measured at the
    patient's own conditions, which no shift may move."""

    p50_mmhg: float
    method: str
    standard_p50_mmhg: float = STANDARD_P50_MMHG
    in_vivo: bool = False

    @property
    def scale(self) -> float:
        """The factor PO2 is multiplied by before the standard curve: 26.86 / P50."""
        return STANDARD_P50_MMHG / self.p50_mmhg

    def saturation(self, *, po2_mmhg: float) -> float:
        """Saturation (fraction) at ``po2_mmhg`` on this curve (no input checks: a kernel)."""
        return standard_saturation(self.scale * po2_mmhg)

    def po2_mmhg(self, *, saturation: float) -> float:
        """PO2 (mm[Hg]) at ``saturation`` (0 < S < 1) on this curve (no input checks)."""
        return standard_po2(saturation) / self.scale


def standard_saturation(po2_mmhg: float) -> float:
    """Severinghaus 1979 eq. 1 without input checks, for inner loops: S = x / (x + 23400),
    x = PO2³ + 150 PO2 (the same curve as ``saturation.saturation_from_po2``)."""
    if po2_mmhg <= 0.0:
        return 0.0
    x = po2_mmhg * (po2_mmhg * po2_mmhg + c.SEVERINGHAUS_B)
    return x / (x + c.SEVERINGHAUS_A)


def standard_saturation_slope(po2_mmhg: float) -> float:
    """dS/dPO2 (per mm[Hg]) of eq. 1: 23400 (3 PO2² + 150) / (PO2³ + 150 PO2 + 23400)²."""
    if po2_mmhg <= 0.0:
        return c.SEVERINGHAUS_A * c.SEVERINGHAUS_B / c.SEVERINGHAUS_A**2
    x = po2_mmhg * (po2_mmhg * po2_mmhg + c.SEVERINGHAUS_B)
    d = x + c.SEVERINGHAUS_A
    return c.SEVERINGHAUS_A * (3.0 * po2_mmhg * po2_mmhg + c.SEVERINGHAUS_B) / (d * d)


_CARDANO_Q = (c.SEVERINGHAUS_B / 3.0) ** 3


def standard_po2(saturation: float) -> float:
    """Exact inverse of eq. 1 (Cardano; Ellis 1989) without input checks; 0 < S < 1."""
    a = (c.SEVERINGHAUS_A / 2.0) / (1.0 / saturation - 1.0)
    q = _CARDANO_Q
    b = math.sqrt(q + a * a)
    # b − a = q / (b + a): the same number without the cancellation that costs b − a most of
    # its digits near full saturation (PO2 above about 300 mmHg).
    return math.cbrt(b + a) - math.cbrt(q / (b + a))


STANDARD_AFFINITY = OxygenAffinity(
    STANDARD_P50_MMHG, "standard curve (Severinghaus 1979 eq. 1: 37 °C, pH 7.40, PCO2 40)"
)


def _p50_after_ph_change(p50_mmhg: float, delta_ph: float) -> float:
    """Integrate eq. 4 exactly: with v = (P / 26.6)^a, dv/dpH = a v (v − b), whose solution is
    v(x) = b / (1 − (1 − b / v0) e^(a b x))."""
    v0 = math.pow(p50_mmhg / _BOHR_REFERENCE_MMHG, _BOHR_A)
    v = _BOHR_B / (1.0 - (1.0 - _BOHR_B / v0) * math.exp(_BOHR_A * _BOHR_B * delta_ph))
    return _BOHR_REFERENCE_MMHG * math.pow(v, 1.0 / _BOHR_A)


def temperature_coefficient_per_cel(*, po2_mmhg: float) -> float:
    """d ln PO2 / dT at constant saturation (per °C), Severinghaus 1979 eq. 3."""
    return 0.058 / (math.pow(0.243 * po2_mmhg / 100.0, 3.88) + 1.0) + 0.013


def bohr_coefficient(*, po2_mmhg: float) -> float:
    """d ln PO2 / d pH at constant saturation, Severinghaus 1979 eq. 4 (about −1.2 at P50,
    i.e. Δlog10 P50 / ΔpH ≈ −0.52)."""
    return math.pow(po2_mmhg / _BOHR_REFERENCE_MMHG, _BOHR_A) - _BOHR_B


def oxygen_affinity(
    *,
    ph: float | None = None,
    paco2_mmhg: float | None = None,
    temperature_cel: float | None = None,
    measured_p50_mmhg: float | None = None,
    standard_p50_mmhg: float = STANDARD_P50_MMHG,
) -> OxygenAffinity:
    """The dissociation curve for a patient's blood, from what is known of it.

    A P50 measured at the patient's own pH and temperature (``measured_p50_mmhg``) wins.
    Otherwise ``standard_p50_mmhg`` (the P50 at pH 7.40 and 37 °C: 26.86 for adult blood, or a
    laboratory's standardised P50) is moved by eq. 4 for the pH (measured, or implied by PaCO2
    for an acute respiratory change) and by eq. 3 for the body temperature. The ``method``
    string names what was used.

    Raises:
        ImpossibleValueError: pH, PaCO2, temperature or a P50 outside their possible ranges.
    """
    if measured_p50_mmhg is not None:
        require_possible("measured_p50_mmhg", measured_p50_mmhg, *P50_LIMITS_MMHG, "mm[Hg]")
        return OxygenAffinity(measured_p50_mmhg, "measured P50", measured_p50_mmhg, in_vivo=True)
    require_possible("standard_p50_mmhg", standard_p50_mmhg, *P50_LIMITS_MMHG, "mm[Hg]")
    base = "" if standard_p50_mmhg == STANDARD_P50_MMHG else f" from P50 {standard_p50_mmhg:.1f}"
    if ph is None and paco2_mmhg is None and temperature_cel is None:
        if not base:
            return STANDARD_AFFINITY
        return OxygenAffinity(
            standard_p50_mmhg, f"standard P50 {standard_p50_mmhg:.1f} given", standard_p50_mmhg
        )
    parts: list[str] = []
    p50 = standard_p50_mmhg
    if ph is not None:
        require_possible("ph", ph, *PH, "[pH]")
        parts.append(f"pH {ph:.2f} (eq. 4)")
    elif paco2_mmhg is not None:
        # The change in pH from normal blood (PaCO2 40, HCO3 24), so that Henderson's constant
        # (which puts normal at 7.398) does not offset it.
        hco3 = expected_hco3_mmol_l(paco2_mmhg=paco2_mmhg, chronicity=Chronicity.ACUTE)
        h = hydrogen_ion_nmol_l(paco2_mmhg=paco2_mmhg, hco3_mmol_l=hco3)
        h_normal = hydrogen_ion_nmol_l(
            paco2_mmhg=c.NORMAL_PACO2_MMHG, hco3_mmol_l=c.NORMAL_HCO3_MMOL_L
        )
        ph = (
            STANDARD_PH
            + _ph_from_h(hydrogen_ion_nmol_l=h)
            - _ph_from_h(hydrogen_ion_nmol_l=h_normal)
        )
        parts.append(f"pH {ph:.2f} implied by PaCO2 {paco2_mmhg:.0f} mmHg, acute (eq. 4)")
    if ph is not None:
        p50 = _p50_after_ph_change(p50, ph - STANDARD_PH)
    if temperature_cel is not None:
        require_possible("temperature_cel", temperature_cel, *BODY_TEMPERATURE_CEL, "Cel")
        coefficient = temperature_coefficient_per_cel(po2_mmhg=p50)
        p50 *= math.exp(coefficient * (temperature_cel - c.NORMAL_BODY_TEMPERATURE_CEL))
        parts.append(f"{temperature_cel:.1f} °C (eq. 3)")
    method = f"Severinghaus 1979 eqs. 3-4 at the P50{base}: " + ", ".join(parts)
    return OxygenAffinity(p50, method, standard_p50_mmhg)
