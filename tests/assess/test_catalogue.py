"""The default fact catalogue's own entries (service/assess/catalogue.py)."""

from __future__ import annotations

from service.assess.catalogue import DEFAULT_CATALOGUE


def test_the_lowest_possible_fio2_is_an_fio2() -> None:
    # The least FiO2 a PaO2 allows is a fraction of inspired oxygen like the one sent: up to
    # pure oxygen (a device estimate's high end may be 1.0), never above.
    lowest, sent = DEFAULT_CATALOGUE["fio2_lowest_possible"], DEFAULT_CATALOGUE["fio2"]
    assert lowest.maximum == sent.maximum == 1.0
    assert lowest.problem(0.95) is None and lowest.problem(1.05) is not None
