"""Data requests: the facts that would settle what the verdict leaves open.

Rules ask for facts by name, and often for derived ones (`aa_gradient_excess`) that no
one can supply directly. A request for a missing derived fact is therefore turned into
requests for its missing inputs, recursively, with `needed_for` naming the derived fact
the rule wanted; a derived fact whose needed inputs are all known is translated into its
missing optional inputs, which some settings need (the residence, for the PaCO2 expected at
altitude), and requested itself only when none is missing (it could not be computed for
another reason).

A known fact is requested only when a discriminator names it: a discriminator such as
"a gas on a higher FiO2" asks for a *new* value of `arterial_po2` and `fio2`, and leaving
them out because the current gas has them would drop exactly what would settle the grade.
"""

from collections.abc import Iterable, Mapping
from dataclasses import dataclass

from service.engine.catalogue import FactCatalogue
from service.engine.facts import FactValue

__all__ = ["DataRequest", "DataRequests"]


@dataclass(frozen=True, slots=True)
class DataRequest:
    """A fact that would help, who asked for it, and which derived facts it feeds."""

    fact: str
    requested_by: tuple[str, ...]
    needed_for: tuple[str, ...] = ()


class DataRequests:
    """Collects data requests, translating missing derived facts into missing inputs."""

    __slots__ = ("_asked", "_catalogue", "_facts", "_needs", "_positions", "_turned")

    def __init__(self, facts: Mapping[str, FactValue], catalogue: FactCatalogue) -> None:
        self._facts = facts
        self._catalogue = catalogue
        self._needs = catalogue.needs
        self._positions = catalogue.positions
        self._asked: dict[str, tuple[set[str], set[str]]] = {}
        self._turned: dict[str, tuple[str, ...]] | None = None

    def ask(
        self, fact: str, rule: str, *, even_if_known: bool = False, wanted: str | None = None
    ) -> None:
        """Record that `rule` would like `fact` (or, if it is derived, its missing inputs).

        A known fact is skipped unless `even_if_known` (a discriminator asking for a new
        value of it). An empty `rule` asks on behalf of the verdict itself (a gas that is
        not classifiable asks for a trusted one).
        """
        self.ask_all((fact,), rule, even_if_known=even_if_known, wanted=wanted)

    def ask_all(
        self,
        facts: Iterable[str],
        rule: str,
        *,
        even_if_known: bool = False,
        wanted: str | None = None,
    ) -> None:
        """`ask` for each of `facts` in turn (one call for all the facts a rule asks for)."""
        known, asked = self._facts, self._asked
        turned = self._turned
        for fact in facts:
            if fact in known:
                if even_if_known:
                    entry = asked.get(fact)
                    if entry is None:
                        entry = asked[fact] = (set(), set())
                    if rule:
                        entry[0].add(rule)
                continue
            if turned is None:
                turned = self._kept()
            names = turned.get(fact)
            if names is None:
                names = self._requested(fact)
            for name in names:
                entry = asked.get(name)
                if entry is None:
                    entry = asked[name] = (set(), set())
                if rule:
                    entry[0].add(rule)
                # The fact itself is asked for the derived fact it was wanted for (if any); an
                # input it stands in for, for the fact (or what the fact was wanted for).
                feeds = wanted if name == fact else (wanted or fact)
                if feeds is not None:
                    entry[1].add(feeds)

    def _requested(self, fact: str) -> tuple[str, ...]:
        """What a request for the missing ``fact`` asks for: its missing inputs, recursively,
        or the missing optional inputs when every needed one is known, or itself. The same
        whoever asks, so worked out once per fact."""
        turned = self._kept()
        found = turned.get(fact)
        if found is None:
            needs = self._needs.get(fact)
            missing: list[str] = []
            if needs is not None:
                facts = self._facts
                missing = [name for name in needs[0] if name not in facts] or [
                    name for name in needs[1] if name not in facts
                ]
            if not missing:
                found = (fact,)
            elif len(missing) == 1:  # already without repeats
                found = self._requested(missing[0])
            else:
                found = tuple(
                    dict.fromkeys([asked for name in missing for asked in self._requested(name)])
                )
            turned[fact] = found
        return found

    def _kept(self) -> dict[str, tuple[str, ...]]:
        """What each missing fact turns into for this set of known facts: a function of that
        set alone, and the same few sets come back again and again (one panel of
        measurements, the uncertain-input scenarios of one gas), so the catalogue keeps the
        answers of each set and the walk through a derived fact's inputs is made once per
        set, not once per evaluation."""
        turned = self._turned
        if turned is None:
            # keyed by the names in order (cheaper than a set; an order not met before only
            # makes an entry of its own)
            turned = self._turned = self._catalogue.kept_requests(tuple(self._facts))
        return turned

    @property
    def empty(self) -> bool:
        """Whether nothing has been asked for yet."""
        return not self._asked

    def collected(self) -> tuple[DataRequest, ...]:
        """The requests so far, in catalogue order."""
        asked = self._asked
        requests = []
        for fact in sorted(asked, key=self._positions.__getitem__):
            by, needed = asked[fact]
            # Mostly one rule and one derived fact: a set of one needs no sorting.
            requests.append(
                DataRequest(
                    fact,
                    tuple(by) if len(by) < 2 else tuple(sorted(by)),
                    tuple(needed) if len(needed) < 2 else tuple(sorted(needed)),
                )
            )
        return tuple(requests)
