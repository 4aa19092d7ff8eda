"""Chi-square tail probabilities at their edges: a probability is never above 1, and the
largest number of degrees of freedom the function takes is still computed right.

The reference is scipy.stats.chi2.sf (test-only dependency)."""

from __future__ import annotations

import pytest
from scipy.stats import chi2

from service.exceptions import ImpossibleValueError
from service.physiology.goodness_of_fit import chi_square_survival


@pytest.mark.parametrize(
    ("chi_square", "dof"),
    [
        # Where the series' rounding alone would give 1.0000000000000002 [calc]: even and odd
        # degrees of freedom.
        (1e-6, 6),
        (1e-4, 10),
        (0.19872184654880454, 21),
        (0.4457822860419679, 27),
    ],
)
def test_a_probability_is_never_above_one(chi_square: float, dof: int) -> None:
    p = chi_square_survival(chi_square=chi_square, degrees_of_freedom=dof)
    assert p <= 1.0
    assert p == pytest.approx(float(chi2.sf(chi_square, dof)), rel=1e-12)


def test_up_to_1000_degrees_of_freedom_are_taken_and_computed_right() -> None:
    # The limit is the function's documented range (1–1000); at it the closed form still
    # agrees with scipy, around the median of χ²(1000) and far in its upper tail.
    for x in (950.0, 1000.0, 1100.0):
        assert chi_square_survival(chi_square=x, degrees_of_freedom=1000) == pytest.approx(
            float(chi2.sf(x, 1000)), rel=1e-9
        )
    assert chi_square_survival(chi_square=1000.0, degrees_of_freedom=999) == pytest.approx(
        float(chi2.sf(1000.0, 999)), rel=1e-9
    )
    with pytest.raises(ImpossibleValueError, match="degrees_of_freedom"):
        chi_square_survival(chi_square=1000.0, degrees_of_freedom=1001)
