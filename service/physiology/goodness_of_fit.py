"""Chi-square tail probabilities for judging a least-squares fit.

Written by hand because the runtime carries no statistics library (scipy is a test-only
reference, see tests/physiology/test_goodness_of_fit.py) and integer degrees of freedom have
a closed form (Abramowitz M & Stegun IA, Handbook of Mathematical Functions, 1964, §26.4;
from memory, and checked against scipy):

    even ν:  Q(χ² | ν) = e^(−χ²/2) Σ_{j=0}^{ν/2−1} (χ²/2)^j / j!
    odd ν:   Q(χ² | ν) = erfc(√(χ²/2)) + e^(−χ²/2) Σ_{j=1}^{(ν−1)/2} (χ²/2)^(j−1/2) / Γ(j + 1/2)
"""

from __future__ import annotations

import math

from service.physiology.bounds import require_possible

MAX_DEGREES_OF_FREEDOM = 1000


def chi_square_survival(*, chi_square: float, degrees_of_freedom: int) -> float:
    """P(X ≥ ``chi_square``) for X ~ χ²(``degrees_of_freedom``): the probability of a fit at
    least this poor if the model and the stated measurement errors were right.

    Raises:
        ImpossibleValueError: chi-square negative, or degrees of freedom outside 1–1000.
    """
    require_possible("chi_square", chi_square, 0.0, math.inf, "1")
    require_possible("degrees_of_freedom", degrees_of_freedom, 1, MAX_DEGREES_OF_FREEDOM, "1")
    half = chi_square / 2.0
    if degrees_of_freedom % 2 == 0:
        term = 1.0
        total = 1.0
        for j in range(1, degrees_of_freedom // 2):
            term *= half / j
            total += term
        return min(1.0, math.exp(-half) * total)
    total = 0.0
    term = 2.0 * math.sqrt(half / math.pi)  # (χ²/2)^(1/2) / Γ(3/2)
    for j in range(1, (degrees_of_freedom - 1) // 2 + 1):
        total += term
        term *= half / (j + 0.5)
    return min(1.0, math.erfc(math.sqrt(half)) + math.exp(-half) * total)
