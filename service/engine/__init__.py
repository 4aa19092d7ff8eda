"""oxyrule's rule engine: declarative rules over named facts, with a full trace.

The engine knows nothing of FHIR or HTTP. It loads a rule-set directory once
(`load_ruleset`), then evaluates it against a mapping of facts (`evaluate`) and returns
every rule's three-valued result with a trace, plus a verdict: a grade per mechanism of
hypoxaemia, findings, the hypoxaemia status, the overall pattern and the data that would
settle what is still open. The rule-file format is described in README.md next to this
file; `catalogue_markdown(catalogue)` documents the facts of a catalogue.

Lifecycle decision: `testing` rules are shadow-evaluated. Their results appear in
`Evaluation.results` with `shadow=True` and never change the verdict.
"""

from service.engine.catalogue import (
    FactCatalogue,
    FactKind,
    FactOrigin,
    FactSpec,
    catalogue_markdown,
)
from service.engine.data_requests import DataRequest
from service.engine.errors import FactError, FactProblem, RuleProblem, RuleSetError
from service.engine.evaluate import Evaluation, evaluate
from service.engine.facts import FactValue
from service.engine.leaves import Leaf
from service.engine.loader import build_ruleset, content_hash, load_ruleset
from service.engine.logic import Operator, Truth
from service.engine.parameters import Parameter
from service.engine.results import LeafTrace, RuleResult
from service.engine.ruleset import (
    Discriminator,
    FindingOutcome,
    HypoxaemiaOutcome,
    MechanismOutcome,
    Outcome,
    RetiredRule,
    Rule,
    RuleSet,
)
from service.engine.verdict import FindingResult, MechanismAssessment, Verdict
from service.engine.vocabulary import (
    FindingCode,
    GasExchangeStatus,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    Pattern,
    RuleStatus,
    Severity,
)

__all__ = [
    "DataRequest",
    "Discriminator",
    "Evaluation",
    "FactCatalogue",
    "FactError",
    "FactKind",
    "FactOrigin",
    "FactProblem",
    "FactSpec",
    "FactValue",
    "FindingCode",
    "FindingOutcome",
    "FindingResult",
    "GasExchangeStatus",
    "Grade",
    "HypoxaemiaOutcome",
    "HypoxaemiaStatus",
    "Leaf",
    "LeafTrace",
    "Mechanism",
    "MechanismAssessment",
    "MechanismOutcome",
    "Operator",
    "Outcome",
    "Parameter",
    "Pattern",
    "RetiredRule",
    "Rule",
    "RuleProblem",
    "RuleResult",
    "RuleSet",
    "RuleSetError",
    "RuleStatus",
    "Severity",
    "Truth",
    "Verdict",
    "build_ruleset",
    "catalogue_markdown",
    "content_hash",
    "evaluate",
    "load_ruleset",
]
