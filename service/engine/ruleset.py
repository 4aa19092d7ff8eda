"""A loaded, validated and compiled rule set, ready to evaluate many times.

Nothing here is parsed or checked again at evaluation time: conditions are closures,
rationales are parsed templates, parameters already include site overrides.
"""

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from operator import itemgetter

from service.engine.catalogue import FactCatalogue
from service.engine.compiled import CompiledCondition, StateVector
from service.engine.leaves import FactTest, Leaf
from service.engine.logic import TruthValue
from service.engine.parameters import Parameter
from service.engine.program import RuleProgram
from service.engine.rationale import Template
from service.engine.vocabulary import (
    GasExchangeStatus,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    RuleStatus,
    Severity,
)

__all__ = [
    "Discriminator",
    "FindingDeclaration",
    "FindingOutcome",
    "GasExchangeOutcome",
    "HypoxaemiaOutcome",
    "MechanismOutcome",
    "Outcome",
    "RetiredRule",
    "Rule",
    "RuleSet",
    "VerdictPlan",
]


@dataclass(frozen=True, slots=True)
class MechanismOutcome:
    """The rule grades a mechanism; among fired rules the lowest `priority` wins."""

    mechanism: Mechanism
    grade: Grade
    priority: int


@dataclass(frozen=True, slots=True)
class FindingOutcome:
    """The rule raises a finding: a built-in ``FindingCode`` or a code the rule set declares
    (``FindingDeclaration``)."""

    code: str
    severity: Severity


@dataclass(frozen=True, slots=True)
class FindingDeclaration:
    """A finding code a rule set adds, with the code system it belongs to."""

    code: str
    display: str
    description: str
    system: str
    about: str = "patient"  # "patient": clinical context; "data": the data's quality


@dataclass(frozen=True, slots=True)
class HypoxaemiaOutcome:
    """The rule states whether hypoxaemia is present or absent."""

    status: HypoxaemiaStatus


@dataclass(frozen=True, slots=True)
class GasExchangeOutcome:
    """The rule states whether gas exchange is abnormal (a defect) or normal for age."""

    status: GasExchangeStatus


Outcome = MechanismOutcome | FindingOutcome | HypoxaemiaOutcome | GasExchangeOutcome


@dataclass(frozen=True, slots=True)
class Discriminator:
    """What would settle a `possible` grade, and which facts to ask for."""

    text: str
    requests: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class Rule:
    """A compiled rule (status draft, testing or active)."""

    id: str
    version: str
    title: str
    status: RuleStatus
    description: str
    references: tuple[str, ...]
    outcome: Outcome
    rationale: Template
    discriminator: Discriminator | None
    file: str
    """Path of the rule file, relative to the rule-set directory."""
    condition: CompiledCondition = field(compare=False, repr=False)
    shadow: bool = field(init=False, compare=False, repr=False)
    """True for `testing` rules: evaluated and reported, never part of the verdict."""
    ref: str = field(init=False, compare=False, repr=False)
    """`id@version`, the way results cite a rule."""
    trace_prefix: str = field(init=False, compare=False, repr=False)
    """`id@version: `, what each of the rule's trace lines starts with."""

    def __post_init__(self) -> None:
        # Precomputed: these are read for every rule on every evaluation.
        object.__setattr__(self, "shadow", self.status is RuleStatus.TESTING)
        object.__setattr__(self, "ref", f"{self.id}@{self.version}")
        object.__setattr__(self, "trace_prefix", f"{self.id}@{self.version}: ")


@dataclass(frozen=True, slots=True)
class RetiredRule:
    """A retired rule: kept for the record, never compiled or evaluated."""

    id: str
    version: str
    title: str
    file: str


StatesAt = Callable[[StateVector], tuple[TruthValue, ...]]


def _no_states(states: StateVector) -> tuple[TruthValue, ...]:
    return ()


def states_at(positions: Sequence[int]) -> StatesAt:
    """A function giving the states at ``positions`` as a tuple, in one call (``itemgetter``,
    which reads them in C; a tuple even for one position)."""
    if len(positions) > 1:
        return itemgetter(*positions)
    if positions:
        only = positions[0]
        return lambda states: (states[only],)
    return _no_states


@dataclass(frozen=True, slots=True)
class VerdictPlan:
    """Which rules can shape the verdict, by what they assert: positions in a rule sequence.

    Worked out once per rule set (and per call of `decide` on loose results), so that the
    verdict reads only the states of the rules that matter. Testing (shadow) rules are left
    out: they never shape the verdict.
    """

    mechanisms: tuple[tuple[Mechanism, tuple[tuple[int, MechanismOutcome], ...]], ...]
    """Every mechanism in `Mechanism` order, with its grading rules in rule order."""
    findings: tuple[tuple[int, FindingOutcome], ...]
    hypoxaemia: tuple[tuple[int, HypoxaemiaOutcome, str], ...]
    """Rules that state hypoxaemia present or absent, each with its `ref`."""
    gas_exchange: tuple[tuple[int, GasExchangeOutcome, str], ...] = ()
    """Rules that state gas exchange abnormal or normal, each with its `ref`."""
    refs: tuple[str, ...] = ()
    """`id@version` of every rule, by position."""
    finding_states: "StatesAt" = field(default=_no_states, compare=False, repr=False)
    """The states of the `findings` rules, in their order, read in one call."""
    grading_states: tuple["StatesAt", ...] = field(default=(), compare=False, repr=False)
    """For each of `mechanisms`, the states of its grading rules, in their order."""

    @classmethod
    def of(cls, rules: Sequence[Rule]) -> "VerdictPlan":
        """The plan of `rules` (positions index this sequence)."""
        grading: dict[Mechanism, list[tuple[int, MechanismOutcome]]] = {
            mechanism: [] for mechanism in Mechanism
        }
        findings: list[tuple[int, FindingOutcome]] = []
        hypoxaemia: list[tuple[int, HypoxaemiaOutcome, str]] = []
        gas_exchange: list[tuple[int, GasExchangeOutcome, str]] = []
        for position, rule in enumerate(rules):
            if rule.shadow:
                continue
            outcome = rule.outcome
            if isinstance(outcome, MechanismOutcome):
                grading[outcome.mechanism].append((position, outcome))
            elif isinstance(outcome, FindingOutcome):
                findings.append((position, outcome))
            elif isinstance(outcome, GasExchangeOutcome):
                gas_exchange.append((position, outcome, rule.ref))
            else:
                hypoxaemia.append((position, outcome, rule.ref))
        return cls(
            tuple((mechanism, tuple(found)) for mechanism, found in grading.items()),
            tuple(findings),
            tuple(hypoxaemia),
            tuple(gas_exchange),
            tuple([rule.ref for rule in rules]),
            states_at([position for position, _ in findings]),
            tuple(states_at([position for position, _ in found]) for found in grading.values()),
        )


@dataclass(frozen=True, slots=True)
class RuleSet:
    """A rule set loaded from one directory, with site overrides applied."""

    id: str
    version: str
    title: str
    description: str
    content_hash: str
    """sha256 (hex) over every file read and the overrides; see `loader`."""
    parameters: Mapping[str, Parameter]
    overrides: Mapping[str, float]
    catalogue: FactCatalogue
    rules: tuple[Rule, ...]
    """Draft, testing and active rules, in file-path order."""
    retired: tuple[RetiredRule, ...]
    leaves: tuple[Leaf, ...]
    """Every distinct leaf; a rule's condition refers to them by index."""
    findings: Mapping[str, FindingDeclaration] = field(default_factory=dict)
    """Finding codes the rule set declares beside the built-in ones, by code."""
    evaluated: tuple[Rule, ...] = field(init=False, repr=False, compare=False)
    """Active and testing rules: the ones `evaluate` runs."""
    leaf_tests: tuple[FactTest, ...] = field(init=False, repr=False, compare=False)
    """The leaves' test closures, kept as a plain tuple for the evaluation loop."""
    rule_truths: tuple[Callable[[StateVector], TruthValue], ...] = field(
        init=False, repr=False, compare=False
    )
    """The condition of each evaluated rule, in the order of `evaluated`."""
    verdict_plan: VerdictPlan = field(init=False, repr=False, compare=False)
    """What each evaluated rule can contribute to the verdict."""
    compared: frozenset[str] = field(init=False, repr=False, compare=False)
    """The facts some leaf tests: the numbers `evaluate` rounds to their stated precision."""
    program: RuleProgram = field(init=False, repr=False, compare=False)
    """The leaf tests and the evaluated rules' conditions as one function (``program``)."""

    def __post_init__(self) -> None:
        evaluated = tuple(
            rule for rule in self.rules if rule.status in (RuleStatus.ACTIVE, RuleStatus.TESTING)
        )
        object.__setattr__(self, "evaluated", evaluated)
        object.__setattr__(self, "leaf_tests", tuple(leaf.test for leaf in self.leaves))
        object.__setattr__(self, "rule_truths", tuple(rule.condition.truth for rule in evaluated))
        object.__setattr__(self, "verdict_plan", VerdictPlan.of(evaluated))
        object.__setattr__(self, "compared", frozenset(leaf.fact for leaf in self.leaves))
        program = RuleProgram(self.leaves, [rule.condition for rule in evaluated])
        object.__setattr__(self, "program", program)

    @property
    def identity(self) -> str:
        """`id|version` of the rule set."""
        return f"{self.id}|{self.version}"

    def rule(self, rule_id: str) -> Rule:
        """The compiled rule with this id (KeyError if absent or retired)."""
        for rule in self.rules:
            if rule.id == rule_id:
                return rule
        raise KeyError(rule_id)
