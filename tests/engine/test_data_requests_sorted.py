"""Data requests name their rules and the derived facts they feed in sorted order, however
the asking went: the result is the same text whoever asked first.

A set of two names comes out of a set in an order that depends on the string hashes of the
process, so each check here asks for many facts: an unsorted pair would be met in some of
them whatever the hash seed (a property of the engine's own code, not a clinical check).
"""

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.data_requests import DataRequests

# Facts with no inputs of their own: a request for one names the fact itself.
PLAIN = [name for name in DEFAULT_CATALOGUE if name not in DEFAULT_CATALOGUE.needs][:24]


def test_there_are_enough_plain_facts_to_ask_for() -> None:
    assert len(PLAIN) == 24


def test_rules_asking_for_the_same_fact_are_listed_sorted() -> None:
    requests = DataRequests({}, DEFAULT_CATALOGUE)
    for fact in PLAIN:
        for rule in ("zeta@1", "alpha@2", "beta@1"):
            requests.ask(fact, rule)
    found = requests.collected()
    assert [r.fact for r in found] == sorted(PLAIN, key=DEFAULT_CATALOGUE.position)
    assert {r.requested_by for r in found} == {("alpha@2", "beta@1", "zeta@1")}


def test_two_rules_asking_for_the_same_fact_are_listed_sorted() -> None:
    requests = DataRequests({}, DEFAULT_CATALOGUE)
    for fact in PLAIN:
        requests.ask(fact, "zeta@1")
        requests.ask(fact, "alpha@2")
    assert {r.requested_by for r in requests.collected()} == {("alpha@2", "zeta@1")}


def test_two_derived_facts_a_fact_feeds_are_listed_sorted() -> None:
    requests = DataRequests({}, DEFAULT_CATALOGUE)
    for fact in PLAIN:
        requests.ask(fact, "r@1", wanted="pao2_fall")
        requests.ask(fact, "r@1", wanted="aa_gradient")
    assert {r.needed_for for r in requests.collected()} == {("aa_gradient", "pao2_fall")}


def test_one_rule_and_one_derived_fact_are_listed_as_they_are() -> None:
    requests = DataRequests({}, DEFAULT_CATALOGUE)
    requests.ask(PLAIN[0], "r@1", wanted="aa_gradient")
    (only,) = requests.collected()
    assert (only.fact, only.requested_by, only.needed_for) == (PLAIN[0], ("r@1",), ("aa_gradient",))
