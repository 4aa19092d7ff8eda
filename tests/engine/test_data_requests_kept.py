"""What a data request for a missing fact turns into is kept per set of known facts
(``FactCatalogue.kept_requests``). Kept answers must be the answers worked out afresh, never
another set's, and the keeping is bounded."""

from __future__ import annotations

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.catalogue import KEPT_SETS, FactCatalogue, FactKind, FactSpec
from service.engine.data_requests import DataRequest, DataRequests

BUDGET = 256  # the engine README ("Timing"): at most 256 sets of known facts per catalogue
KNOWN = {"arterial_po2": 60.0, "barometric_pressure": 700.0, "water_vapour_pressure": 47.1}


def _fresh_catalogue() -> FactCatalogue:
    return FactCatalogue(DEFAULT_CATALOGUE.values())


def _asked(catalogue: FactCatalogue, known: dict[str, float], fact: str) -> tuple[DataRequest, ...]:
    requests = DataRequests(known, catalogue)
    requests.ask(fact, "r@1")
    return requests.collected()


def test_a_kept_answer_is_the_answer_worked_out_afresh() -> None:
    catalogue = _fresh_catalogue()
    first = _asked(catalogue, KNOWN, "aa_gradient")
    again = _asked(catalogue, dict(KNOWN), "aa_gradient")
    assert first == again == _asked(_fresh_catalogue(), KNOWN, "aa_gradient")
    # alveolar_po2 needs FiO2 and PaCO2 besides what is known (the module's own example)
    assert [r.fact for r in first] == ["arterial_pco2", "fio2"]


def test_another_set_of_known_facts_gets_its_own_answer() -> None:
    catalogue = _fresh_catalogue()
    assert [r.fact for r in _asked(catalogue, KNOWN, "aa_gradient")] == ["arterial_pco2", "fio2"]
    reordered = dict(reversed(KNOWN.items()))  # the same facts named in another order
    assert [r.fact for r in _asked(catalogue, reordered, "aa_gradient")] == [
        "arterial_pco2",
        "fio2",
    ]
    more = {**KNOWN, "fio2": 0.21}
    assert [r.fact for r in _asked(catalogue, more, "aa_gradient")] == ["arterial_pco2"]
    assert [r.fact for r in _asked(catalogue, KNOWN, "aa_gradient")] == ["arterial_pco2", "fio2"]


def test_the_kept_sets_are_bounded() -> None:
    assert KEPT_SETS == BUDGET
    specs = [FactSpec(f"f{i}", FactKind.BOOLEAN, None, "x") for i in range(KEPT_SETS + 2)]
    catalogue = FactCatalogue(specs)
    for i in range(KEPT_SETS):
        catalogue.kept_requests((f"f{i}",))
    kept = catalogue.kept_requests(("f0",))
    kept["f1"] = ("f1",)
    assert catalogue.kept_requests(("f0",)) is kept  # still kept at the bound
    catalogue.kept_requests((f"f{KEPT_SETS}",))  # one more: starts afresh
    assert catalogue.kept_requests(("f0",)) == {}
    for i in range(3 * KEPT_SETS):
        catalogue.kept_requests((f"f{i % (KEPT_SETS + 2)}", "x"))
    assert len(catalogue._requests) <= KEPT_SETS


def test_asking_for_several_facts_at_once_skips_the_known_ones_unless_told() -> None:
    requests = DataRequests({"spo2": 93.0, "fio2": 0.5}, DEFAULT_CATALOGUE)
    requests.ask_all(("spo2", "mixed_venous_po2"), "r@1")
    assert requests.collected() == (DataRequest("mixed_venous_po2", ("r@1",)),)
    requests.ask_all(("fio2",), "d@1", even_if_known=True)
    assert [r.fact for r in requests.collected()] == ["fio2", "mixed_venous_po2"]
