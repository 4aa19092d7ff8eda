"""When the waterfall shows an unattributed step: a rest that shows at the display precision,
and always when it carries a part that is not known.

A pressure is shown to 0.1 mm[Hg] (the module's display precision), so a rest is a part
exactly when it does not show as 0.0 there.
"""

from __future__ import annotations

import pytest

from service.physiology.deficit import DeficitPartition
from service.physiology.deficit_steps import shown_parts, waterfall


def _with_rest(rest: float) -> DeficitPartition:
    # expected 80, inspired 5, ventilation 5, gas exchange 9: PaO2 61 less the rest.
    return DeficitPartition(80.0, 61.0 - rest, 5.0, 5.0, 9.0, rest)


@pytest.mark.parametrize("rest", [0.047, 0.0499, 0.05, 0.051, 0.053, -0.047, -0.05, -0.053])
def test_a_rest_is_shown_when_it_does_not_round_to_zero(rest: float) -> None:
    shown = "unattributed" in dict(shown_parts(_with_rest(rest)))
    assert shown is (f"{abs(rest):.1f}" != "0.0")  # as a surface shows it


@pytest.mark.parametrize(("ventilation", "gas_exchange"), [(0.0, None), (None, 0.0), (None, None)])
def test_a_part_not_known_is_carried_by_the_unattributed_step_even_when_zero(
    ventilation: float | None, gas_exchange: float | None
) -> None:
    # The rest then holds what is not known; a zero there is a value, not "nothing".
    partition = DeficitPartition(80.0, 60.0, 20.0, ventilation, gas_exchange, 0.0)
    parts = dict(shown_parts(partition))
    assert parts["unattributed"] == 0.0
    steps = waterfall(partition)
    assert steps[-2].key == "unattributed" and steps[-2].end_mmhg == pytest.approx(60.0)
