"""Chi-square tail probabilities, against tables and scipy."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.stats import chi2

from service.exceptions import ImpossibleValueError
from service.physiology.goodness_of_fit import chi_square_survival


@pytest.mark.parametrize(
    ("dof", "critical"),
    # Upper 5 % points of χ² (any statistics table, e.g. the NIST/SEMATECH e-Handbook of
    # Statistical Methods; values from memory, and scipy agrees in the test below).
    [(1, 3.841), (2, 5.991), (3, 7.815), (4, 9.488), (5, 11.070), (10, 18.307), (30, 43.773)],
)
def test_upper_five_percent_points(dof: int, critical: float) -> None:
    assert chi_square_survival(chi_square=critical, degrees_of_freedom=dof) == pytest.approx(
        0.05, abs=2e-4
    )


@given(st.floats(min_value=0.0, max_value=200.0), st.integers(min_value=1, max_value=60))
def test_agrees_with_scipy(x: float, dof: int) -> None:
    # scipy.stats.chi2.sf, the reference implementation (test-only dependency).
    assert chi_square_survival(chi_square=x, degrees_of_freedom=dof) == pytest.approx(
        float(chi2.sf(x, dof)), rel=1e-9, abs=1e-15
    )


def test_zero_chi_square_has_probability_one_and_bad_input_is_refused() -> None:
    assert chi_square_survival(chi_square=0.0, degrees_of_freedom=3) == 1.0
    with pytest.raises(ImpossibleValueError):
        chi_square_survival(chi_square=-1.0, degrees_of_freedom=3)
    with pytest.raises(ImpossibleValueError):
        chi_square_survival(chi_square=1.0, degrees_of_freedom=0)
