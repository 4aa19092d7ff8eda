"""The oxygen-response fit's objective written out again, for the tests that check the fit.

Independent of ``service/``: the two-parameter model comes from ``tests/titration_reference.py``
(Severinghaus 1979 eq. 1, the alveolar gas equation, the shunt equation; scipy's Brent root
finder), and the minimisers, roots and matrix algebra from scipy and numpy. What is restated
here is the fit's documented definition (``service/physiology/oxygen_response.py``, module
docstring):

* the weighted χ² in the units measured: PaO2 weighted by √(2² + (5 % of PaO2)²) mmHg, SpO2 by
  0.02, SaO2 by 0.01 (the module's stated defaults), every FiO2 exact here;
* the linearised covariance (JᵀJ)⁻¹, scaled by χ²/ν when that exceeds 1;
* the content-space objective of the profile ranges (each observation carried into arterial
  oxygen content with its error by the delta method), in which the 95 % profile range of a
  parameter is where the least χ² over the other rises by the χ²(1) 95 % point, 3.841459
  (Venzon DJ & Moolgavkar SH, Appl Stat 1988;37:87).

Standard conditions: PB 760, PH2O 47 mmHg (West, Respiratory Physiology), Hb 14 g/dL,
Hüfner 1.34 mL/g, a-v difference 5 mL/dL, R 0.8, the eq. 1 curve, PaCO2 40 mmHg where a point
has none (common practice).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, least_squares, minimize_scalar

from service.physiology.titration import TitrationPoint
from tests import titration_reference as ref

PB = 760.0
PH2O = 47.0
HB = 14.0
KH = ref.HUFNER * HB
AVD = 5.0
ASSUMED_PACO2 = 40.0
MAX_ODDS = 0.95 / 0.05  # shunt limit 0.95 (the module's)
DELTA_95 = 3.841459  # χ²(1) upper 5 % point
Z_95 = 1.959964


@dataclass(frozen=True)
class Obs:
    """One point: FiO2, PaCO2, what was measured and its value."""

    fio2: float
    paco2: float
    kind: str  # "pao2" | "spo2" | "sao2"
    value: float

    @property
    def sd(self) -> float:
        if self.kind == "pao2":
            return math.hypot(2.0, 0.05 * self.value)
        return 0.02 if self.kind == "spo2" else 0.01

    @property
    def alveolar(self) -> float:
        return ref.alveolar(self.fio2, self.paco2, PB, PH2O)


def observations(points: Sequence[TitrationPoint]) -> list[Obs]:
    """The points' data read as plain observations (the data class only; no service code)."""
    out = []
    for p in points:
        fio2 = p.inspired.fio2
        paco2 = p.paco2_mmhg if p.paco2_mmhg is not None else ASSUMED_PACO2
        if p.pao2_mmhg is not None:
            out.append(Obs(fio2, paco2, "pao2", p.pao2_mmhg))
        elif p.spo2 is not None:
            out.append(Obs(fio2, paco2, "spo2", p.spo2))
        else:
            assert p.sao2 is not None
            out.append(Obs(fio2, paco2, "sao2", p.sao2))
    return out


def residuals(obs: Sequence[Obs], odds: float, drop: float) -> np.ndarray:
    """Standardised residuals (predicted − observed) / SD of the two-parameter model."""
    shunt = odds / (1.0 + odds)
    out = []
    for o in obs:
        a = ref.arterial(
            shunt=shunt, drop=drop, fio2=o.fio2, paco2=o.paco2, pb=PB, ph2o=PH2O, hb=HB, avd=AVD
        )
        predicted = a.pao2 if o.kind == "pao2" else a.sao2
        out.append((predicted - o.value) / o.sd)
    return np.array(out)


@dataclass(frozen=True)
class Minimum:
    odds: float
    drop: float
    chi_square: float
    covariance: np.ndarray  # linearised (JᵀJ)⁻¹, not scaled


def minimum(obs: Sequence[Obs], start: tuple[float, float], *, fit_drop: bool = True) -> Minimum:
    """scipy.optimize.least_squares (trust-region reflective) on the same χ²; the Jacobian
    at its minimum by central differences."""
    if fit_drop:
        result = least_squares(
            lambda x: residuals(obs, x[0], x[1]),
            start,
            bounds=([0.0, 0.0], [MAX_ODDS, np.inf]),
            x_scale=[0.05, 10.0],
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        odds, drop = float(result.x[0]), float(result.x[1])
    else:
        result = least_squares(
            lambda x: residuals(obs, x[0], 0.0),
            [start[0]],
            bounds=([0.0], [MAX_ODDS]),
            x_scale=[0.05],
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        odds, drop = float(result.x[0]), 0.0
    chi2 = float(np.sum(residuals(obs, odds, drop) ** 2))
    return Minimum(odds, drop, chi2, covariance(obs, odds, drop, fit_drop=fit_drop))


def covariance(obs: Sequence[Obs], odds: float, drop: float, *, fit_drop: bool) -> np.ndarray:
    """(JᵀJ)⁻¹ at (odds, ΔPO2), the Jacobian by central differences."""
    # Central differences, moved inwards from a lower limit (odds or ΔPO2 at 0).
    o, d = max(odds, 1e-6), max(drop, 1e-4)
    columns = [_derivative(lambda h: residuals(obs, o + h, drop), 1e-6)]
    if fit_drop:
        columns.append(_derivative(lambda h: residuals(obs, odds, d + h), 1e-4))
    jac = np.column_stack(columns)
    return np.asarray(np.linalg.inv(jac.T @ jac))


def _derivative(f: Callable[[float], np.ndarray], h: float) -> np.ndarray:
    return np.asarray((f(h) - f(-h)) / (2.0 * h))


# --- the content-space objective of the profile ranges ----------------------------------------


def _slope(po2: float) -> float:
    """dS/dPO2 of Severinghaus 1979 eq. 1 (differentiated by hand)."""
    x = po2**3 + 150.0 * po2
    return 23400.0 * (3.0 * po2**2 + 150.0) / (x + 23400.0) ** 2


def _capillary_content(po2: float) -> float:
    return ref.content(po2, HB, ref.p50_eq1())


class ContentProfile:
    """χ²(odds, ΔPO2) = Σ ((Cc'O2(PAO2 − ΔPO2) − odds × avd − C_observed) / SD_content)²."""

    def __init__(self, obs: Sequence[Obs]) -> None:
        self.rows = []
        for o in obs:
            if o.kind == "pao2":
                po2 = o.value
                sat = ref.saturation_eq1(po2)
                sd = (KH * _slope(po2) + ref.ALPHA) * o.sd
            else:
                sat = min(max(o.value, 0.01), 0.999)
                po2 = brentq(lambda p, s=sat: ref.saturation_eq1(p) - s, 1e-6, 2000.0, xtol=1e-13)
                sd = (KH + ref.ALPHA / _slope(po2)) * o.sd
            self.rows.append((o.alveolar, KH * sat + ref.ALPHA * po2, sd))

    def feasible(self, drop: float) -> bool:
        return all(
            pa - drop >= 5.0 and _capillary_content(pa - drop) > AVD for pa, _, _ in self.rows
        )

    def odds_max(self, drop: float) -> float:
        return min(
            MAX_ODDS, *((_capillary_content(pa - drop) - AVD) / AVD for pa, _, _ in self.rows)
        )

    def chi_square(self, odds: float, drop: float) -> float:
        return sum(
            ((_capillary_content(pa - drop) - odds * AVD - content) / sd) ** 2
            for pa, content, sd in self.rows
        )

    def argmin(self, drop: float) -> float:
        result = minimize_scalar(
            lambda x: self.chi_square(x, drop),
            bounds=(0.0, self.odds_max(drop)),
            method="bounded",
            options={"xatol": 1e-12},
        )
        return float(result.x)

    def profile(self, drop: float) -> float:
        """The least χ² over the odds at ``drop`` (inf where some point has no steady state)."""
        if not self.feasible(drop):
            return math.inf
        return self.chi_square(self.argmin(drop), drop)

    def odds_interval(self, drop: float, threshold: float) -> tuple[float, float] | None:
        """The odds at ``drop`` with χ² ≤ ``threshold``, within 0 … the steady-state limit."""
        if not self.feasible(drop):
            return None
        best = self.argmin(drop)
        if self.chi_square(best, drop) > threshold:
            return None
        top = self.odds_max(drop)

        def excess(x: float) -> float:
            return self.chi_square(x, drop) - threshold

        low = 0.0 if excess(0.0) <= 0.0 else brentq(excess, 0.0, best, xtol=1e-14)
        high = top if excess(top) <= 0.0 else brentq(excess, best, top, xtol=1e-14)
        return low, high


def max_drop(obs: Sequence[Obs], hb: float = HB) -> float:
    """The largest ΔPO2 with a steady state at every point without a shunt (the saturation
    alone carrying the a-v difference, the end-capillary PO2 at least 5 mmHg), less 1 mmHg,
    within 0 … 700 mmHg (the module's definition)."""
    needed: float = brentq(
        lambda p: ref.saturation_eq1(p) - min(0.999, AVD / (ref.HUFNER * hb)),
        1e-6,
        2000.0,
        xtol=1e-13,
    )
    room = min(o.alveolar - max(5.0, needed) for o in obs)
    return max(0.0, min(700.0, room - 1.0))
