"""The oxygen-response fit's objective written out again, independently of the service.

The weighted χ² of docs/oxygen-response.md §3 over the independent model of
``tests.titration_reference`` (Severinghaus 1979 eq. 1, the alveolar gas equation, the shunt
equation with end-capillary PO2 = PAO2 − ΔPO2; Sapsford & Jones 1995, Kjærgaard 2003), with
general-purpose numerics from the package registry: the model's slope in FiO2 by a central
difference, the minimum by ``scipy.optimize.least_squares``, profile χ² by
``scipy.optimize.minimize_scalar``. The weights are the documented ones: SpO2 0.02, SaO2
0.01, PaO2 √(2² + (5 % of PaO2)²) mmHg, each combined with the error the point's FiO2
uncertainty causes through the model's slope (effective variance; Orear J, Am J Phys
1982;50:912, from memory), an FiO2 range read as a 95 % interval
(``scipy.stats.norm.ppf(0.975)``).

Standard conditions as the service's defaults: PB 760 mmHg, PH2O 47 mmHg (West), Hb 14 g/dL,
a-v difference 5 mL/dL, PaCO2 40 mmHg where a point has none.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, least_squares, minimize_scalar
from scipy.stats import norm

from service.physiology.titration import TitrationPoint
from tests.titration_reference import alveolar as ref_alveolar
from tests.titration_reference import arterial
from tests.titration_reference import content as ref_content
from tests.titration_reference import p50_at_ph as ref_p50_at_ph
from tests.titration_reference import saturation as ref_saturation

PB_MMHG = 760.0
PH2O_MMHG = 47.0
SPO2_SD = 0.02
SAO2_SD = 0.01
PAO2_SD_FLOOR_MMHG = 2.0
PAO2_SD_RELATIVE = 0.05
SPO2_INFORMATIVE_MAX = 0.97
Z_975 = float(norm.ppf(0.975))
_FIO2_STEP = 1e-5  # central difference for the slope in FiO2


@dataclass(frozen=True)
class Row:
    """One informative point: what was measured, on which FiO2, with what stated errors."""

    kind: str  # "spo2", "sao2" or "pao2"
    fio2: float
    paco2_mmhg: float
    observed: float
    measurement_sd: float
    fio2_sd: float
    p50: float | None = None  # the point's own curve (its pH), None for standard blood


def rows_of(points: Sequence[TitrationPoint]) -> list[Row]:
    """The informative points (SpO2 above 0.97 left out) with their documented errors."""
    rows = []
    for p in points:
        if p.spo2 is not None and p.spo2 > SPO2_INFORMATIVE_MAX:
            continue
        paco2 = 40.0 if p.paco2_mmhg is None else p.paco2_mmhg
        fio2_sd = p.inspired.half_range / Z_975
        p50 = None if p.ph is None else ref_p50_at_ph(p.ph)
        if p.pao2_mmhg is not None:
            sd = math.hypot(PAO2_SD_FLOOR_MMHG, PAO2_SD_RELATIVE * p.pao2_mmhg)
            rows.append(Row("pao2", p.inspired.fio2, paco2, p.pao2_mmhg, sd, fio2_sd, p50))
        elif p.spo2 is not None:
            rows.append(Row("spo2", p.inspired.fio2, paco2, p.spo2, SPO2_SD, fio2_sd, p50))
        else:
            assert p.sao2 is not None
            rows.append(Row("sao2", p.inspired.fio2, paco2, p.sao2, SAO2_SD, fio2_sd, p50))
    return rows


def predicted(row: Row, odds: float, drop: float, fio2: float | None = None) -> float:
    """PaO2 (mm[Hg]) or saturation (fraction) the independent model gives for the point."""
    found = arterial(
        shunt=odds / (1.0 + odds),
        drop=drop,
        fio2=row.fio2 if fio2 is None else fio2,
        paco2=row.paco2_mmhg,
        pb=PB_MMHG,
        ph2o=PH2O_MMHG,
        p50=row.p50,
    )
    return found.pao2 if row.kind == "pao2" else found.sao2


def expected_error(row: Row, odds: float, drop: float) -> float:
    """√(measurement SD² + (dy/dFiO2 × FiO2 SD)²), the slope by a central difference."""
    if row.fio2_sd == 0.0:
        return row.measurement_sd
    h = _FIO2_STEP
    slope = (
        predicted(row, odds, drop, row.fio2 + h) - predicted(row, odds, drop, row.fio2 - h)
    ) / (2.0 * h)
    return math.hypot(row.measurement_sd, slope * row.fio2_sd)


def residuals(rows: Sequence[Row], odds: float, drop: float) -> np.ndarray:
    """(predicted − observed) / expected error; 1e3 each where the model has no steady state."""
    out = []
    for row in rows:
        try:
            out.append(
                (predicted(row, odds, drop) - row.observed) / expected_error(row, odds, drop)
            )
        except ValueError:  # the root finder's bracket: no steady state there
            return np.full(len(rows), 1e3)
    return np.array(out)


def chi_square(rows: Sequence[Row], odds: float, drop: float) -> float:
    return float(np.sum(residuals(rows, odds, drop) ** 2))


@dataclass(frozen=True)
class ReferenceFit:
    odds: float
    drop: float
    chi_square: float
    jacobian: np.ndarray  # d residual / d (odds[, ΔPO2]) at the minimum

    @property
    def shunt(self) -> float:
        return self.odds / (1.0 + self.odds)

    def covariance(self) -> np.ndarray:
        """(JᵀJ)⁻¹ (odds[, ΔPO2]), unscaled."""
        return np.linalg.inv(self.jacobian.T @ self.jacobian)


def fit(
    rows: Sequence[Row], *, fit_drop: bool, starts: Sequence[tuple[float, float]] = ((0.2, 20.0),)
) -> ReferenceFit:
    """The least weighted χ² by ``scipy.optimize.least_squares`` (odds ≥ 0, ΔPO2 ≥ 0)."""
    best = None
    for odds, drop in starts:
        if fit_drop:
            result = least_squares(
                lambda x: residuals(rows, float(x[0]), float(x[1])),
                [odds, drop],
                bounds=([0.0, 0.0], [19.0, 400.0]),
                jac="3-point",
                xtol=1e-13,
                ftol=1e-13,
                gtol=1e-13,
            )
        else:
            result = least_squares(
                lambda x: residuals(rows, float(x[0]), 0.0),
                [odds],
                bounds=([0.0], [19.0]),
                jac="3-point",
                xtol=1e-13,
                ftol=1e-13,
                gtol=1e-13,
            )
        if best is None or result.cost < best.cost:
            best = result
    assert best is not None
    odds = float(best.x[0])
    drop = float(best.x[1]) if fit_drop else 0.0
    return ReferenceFit(odds, drop, 2.0 * float(best.cost), np.asarray(best.jac))


def profile_over_odds(rows: Sequence[Row], drop: float, odds_high: float = 3.0) -> float:
    """The least χ² over the odds at a fixed ΔPO2 (``minimize_scalar``, bounded)."""
    result = minimize_scalar(
        lambda o: chi_square(rows, o, drop),
        bounds=(0.0, odds_high),
        method="bounded",
        options={"xatol": 1e-10},
    )
    return float(result.fun)


# --- the objective in oxygen content (docs/oxygen-response.md §3, confidence ranges) ----------
#
# Each observation carried into arterial oxygen content, C = 1.34 Hb S + 0.003 PO2, with its
# error carried by the slope (the delta method): a PaO2 by C'(PaO2); a saturation by
# 1.34 Hb + 0.003 dPO2/dS. The FiO2 error adds C'(Pc'O2) dPAO2/dFiO2 × FiO2 SD. The model is
# CaO2 = Cc'O2(PAO2 − ΔPO2) − odds × avd (the shunt equation, Berggren 1942), so χ² is a
# parabola in the odds at each ΔPO2; here it is minimised numerically all the same.

HB_G_DL = 14.0
AVD_ML_DL = 5.0
_PO2_STEP = 1e-4  # central difference for the content's slope in PO2


@dataclass(frozen=True)
class ContentRow:
    alveolar_po2_mmhg: float
    observed_content: float
    variance: float  # of the observed content, without the FiO2 term
    alveolar_sd: float  # dPAO2/dFiO2 × FiO2 SD
    p50: float


def _alveolar(fio2: float, paco2: float) -> float:
    return ref_alveolar(fio2, paco2, PB_MMHG, PH2O_MMHG)


def _content(po2: float, p50: float) -> float:
    return ref_content(po2, HB_G_DL, p50)


def _content_slope(po2: float, p50: float) -> float:
    h = _PO2_STEP
    return (_content(po2 + h, p50) - _content(po2 - h, p50)) / (2.0 * h)


def content_rows(points: Sequence[TitrationPoint]) -> list[ContentRow]:
    """The informative points carried into content space (standard conditions; a point's own
    pH moves its P50 by Severinghaus 1979 eq. 4)."""
    out = []
    for row in rows_of(points):
        p50 = ref_p50_at_ph(7.40) if row.p50 is None else row.p50
        if row.kind == "pao2":
            po2 = row.observed
            sd = _content_slope(po2, p50) * row.measurement_sd
        else:
            s = min(row.observed, 0.999)
            po2 = float(
                brentq(lambda x, s=s, p50=p50: ref_saturation(x, p50) - s, 1e-3, 2000.0, xtol=1e-12)
            )
            ds_dpo2 = (
                ref_saturation(po2 + _PO2_STEP, p50) - ref_saturation(po2 - _PO2_STEP, p50)
            ) / (2.0 * _PO2_STEP)
            sd = (1.34 * HB_G_DL + 0.003 / ds_dpo2) * row.measurement_sd
        h = _FIO2_STEP
        slope = (
            _alveolar(row.fio2 + h, row.paco2_mmhg) - _alveolar(row.fio2 - h, row.paco2_mmhg)
        ) / (2.0 * h)
        out.append(
            ContentRow(
                _alveolar(row.fio2, row.paco2_mmhg),
                _content(po2, p50),
                sd * sd,
                slope * row.fio2_sd,
                p50,
            )
        )
    return out


def content_chi_square(rows: Sequence[ContentRow], odds: float, drop: float) -> float:
    total = 0.0
    for row in rows:
        capillary = row.alveolar_po2_mmhg - drop
        variance = row.variance + (_content_slope(capillary, row.p50) * row.alveolar_sd) ** 2
        predicted = _content(capillary, row.p50) - odds * AVD_ML_DL
        total += (predicted - row.observed_content) ** 2 / variance
    return total


def largest_odds(rows: Sequence[ContentRow], drop: float) -> float:
    """The largest odds at which every point keeps a positive mixed venous content
    (Cc'O2 − avd (1 + odds) > 0), within the model's shunt limit of 0.95."""
    least = min(_content(r.alveolar_po2_mmhg - drop, r.p50) for r in rows)
    return min(0.95 / 0.05, (least - AVD_ML_DL) / AVD_ML_DL)


def content_profile_over_odds(rows: Sequence[ContentRow], drop: float) -> float:
    """The least content-space χ² over the odds (0 to the steady-state limit) at ``drop``;
    1e9 where no odds leave a steady state."""
    limit = largest_odds(rows, drop)
    if limit <= 0.0:
        return 1e9
    result = minimize_scalar(
        lambda o: content_chi_square(rows, o, drop),
        bounds=(0.0, limit),
        method="bounded",
        options={"xatol": 1e-12},
    )
    return float(result.fun)


def content_profile_over_drop(rows: Sequence[ContentRow], odds: float, max_drop: float) -> float:
    """The least content-space χ² over ΔPO2 in [0, ``max_drop``] at ``odds``."""
    result = minimize_scalar(
        lambda d: content_chi_square(rows, odds, d) if odds <= largest_odds(rows, d) else 1e9,
        bounds=(0.0, max_drop),
        method="bounded",
        options={"xatol": 1e-9},
    )
    return float(result.fun)
