"""The oxygen-exchange model written out again, independently of the service, for the
titration fixtures and the tests that check them.

Every function here is the published equation coded afresh, with general-purpose numerics
from the package registry (``scipy``'s Brent root finder and ODE integrator, ``iapws`` for
the water vapour pressure) rather than the service's own solvers:

* Severinghaus JW, J Appl Physiol 1979;46:599: eq. 1, S = 1 / (23400 / (P³ + 150 P) + 1);
  eq. 4, the Bohr coefficient d ln PO2 / d pH = (PO2 / 26.6)^0.184 − 2.2, integrated
  numerically from pH 7.40 and the curve's own P50 (the PO2 at which eq. 1 gives 0.5).
* Oxygen content, C = 1.34 × Hb × S + 0.003 × PO2 (common practice; mL/dL).
* The alveolar gas equation, full form: PAO2 = FiO2 (PB − PH2O) − PaCO2 [FiO2 + (1 − FiO2)/R],
  R 0.8 (West, Respiratory Physiology); PH2O at 37 °C from IAPWS-IF97 (``iapws``).
* The two-parameter model (Sapsford DJ & Jones JG, Eur J Anaesthesiol 1995;12:375; Kjærgaard
  S et al., Intensive Care Med 2003;29:727): end-capillary PO2 = PAO2 − ΔPO2, and the shunt
  equation (Berggren SM, Acta Physiol Scand 1942;4 Suppl 11) with the mixed venous content
  CaO2 − avd: CaO2 = Cc'O2 − avd × shunt / (1 − shunt).
* The effective shunt carried to room air (Karbing DS et al., Crit Care 2007;11:R118): the
  content deficit Cc'O2 − CaO2 of the gas, held on FiO2 0.21.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

from iapws.iapws97 import _PSat_T
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

PA_PER_MMHG = 133.322387415  # BIPM SI Brochure: 1 mmHg = 133.322 387 415 Pa
HUFNER = 1.34  # mL O2 per g Hb (common practice)
ALPHA = 0.003  # mL O2 per dL blood per mmHg (common practice)
R = 0.8  # respiratory exchange ratio (West)
STANDARD_PH = 7.40


def ph2o_37_mmhg() -> float:
    """Saturated water vapour pressure at 37 °C, IAPWS-IF97 (``iapws``), in mm[Hg]."""
    return float(_PSat_T(310.15)) * 1e6 / PA_PER_MMHG


def saturation_eq1(po2: float) -> float:
    """Severinghaus 1979 eq. 1 (standard blood: 37 °C, pH 7.40)."""
    if po2 <= 0.0:
        return 0.0
    return 1.0 / (23400.0 / (po2**3 + 150.0 * po2) + 1.0)


@lru_cache(maxsize=1)
def p50_eq1() -> float:
    """The PO2 at which eq. 1 gives a saturation of 0.5 (Brent's method)."""
    return float(brentq(lambda p: saturation_eq1(p) - 0.5, 10.0, 50.0, xtol=1e-12))


@lru_cache(maxsize=64)
def p50_at_ph(ph: float) -> float:
    """The P50 moved from pH 7.40 by Severinghaus 1979 eq. 4, integrated numerically."""
    if ph == STANDARD_PH:
        return p50_eq1()
    solution = solve_ivp(
        lambda _, y: [(math.exp(y[0]) / 26.6) ** 0.184 - 2.2],
        (STANDARD_PH, ph),
        [math.log(p50_eq1())],
        rtol=1e-12,
        atol=1e-12,
    )
    return float(math.exp(solution.y[0][-1]))


def saturation(po2: float, p50: float) -> float:
    """The curve scaled along the PO2 axis to the blood's P50."""
    return saturation_eq1(po2 * p50_eq1() / p50)


def content(po2: float, hb: float, p50: float) -> float:
    """Oxygen content (mL/dL) at ``po2`` on the blood's curve."""
    return HUFNER * hb * saturation(po2, p50) + ALPHA * po2


def po2_for_content(target: float, hb: float, p50: float, upper: float) -> float:
    """The PO2 in (0, upper] whose content is ``target`` (Brent's method)."""
    return float(brentq(lambda p: content(p, hb, p50) - target, 1e-6, upper, xtol=1e-10))


def alveolar(fio2: float, paco2: float, pb: float, ph2o: float) -> float:
    """The alveolar gas equation, full form, R 0.8."""
    return fio2 * (pb - ph2o) - paco2 * (fio2 + (1.0 - fio2) / R)


@dataclass(frozen=True)
class Arterial:
    """What the two-parameter model gives on one FiO2."""

    alveolar_po2: float
    pao2: float
    sao2: float


def arterial(
    *,
    shunt: float,
    drop: float,
    fio2: float,
    paco2: float,
    pb: float,
    ph2o: float,
    hb: float = 14.0,
    avd: float = 5.0,
    p50: float | None = None,
) -> Arterial:
    """PaO2 and SaO2 of a lung with ``shunt`` and V/Q term ``drop`` (mm[Hg]) on ``fio2``."""
    p50 = p50_eq1() if p50 is None else p50
    pa = alveolar(fio2, paco2, pb, ph2o)
    capillary = pa - drop
    ca = content(capillary, hb, p50) - avd * shunt / (1.0 - shunt)
    pao2 = po2_for_content(ca, hb, p50, capillary)
    return Arterial(pa, pao2, saturation(pao2, p50))


def room_air_projection(
    *,
    pao2: float,
    fio2: float,
    paco2: float,
    pb: float,
    ph2o: float,
    hb: float = 14.0,
    p50: float | None = None,
) -> float:
    """The PaO2 this gas's effective shunt gives on FiO2 0.21 (same PB, PaCO2, curve)."""
    p50 = p50_eq1() if p50 is None else p50
    pa = alveolar(fio2, paco2, pb, ph2o)
    deficit = content(pa, hb, p50) - content(min(pao2, pa), hb, p50)
    pa_air = alveolar(0.21, paco2, pb, ph2o)
    return po2_for_content(content(pa_air, hb, p50) - deficit, hb, p50, pa_air)


def fio2_for_saturation(
    target: float,
    *,
    shunt: float,
    drop: float,
    paco2: float,
    pb: float,
    ph2o: float,
    hb: float = 14.0,
    avd: float = 5.0,
    p50: float | None = None,
) -> float | None:
    """The FiO2 in 0.21–1.0 at which the model's SaO2 reaches ``target`` (Brent's method);
    None when FiO2 1.0 does not reach it."""

    def gap(fio2: float) -> float:
        found = arterial(
            shunt=shunt,
            drop=drop,
            fio2=fio2,
            paco2=paco2,
            pb=pb,
            ph2o=ph2o,
            hb=hb,
            avd=avd,
            p50=p50,
        )
        return found.sao2 - target

    if gap(1.0) < 0.0:
        return None
    if gap(0.21) >= 0.0:
        return 0.21
    return float(brentq(gap, 0.21, 1.0, xtol=1e-9))
