"""``decide`` on loose results (each rule's result, as a caller may hold them) reaches the
verdict ``evaluate`` reaches from the rule program's states, on every fixture: the two paths
work out which missing facts keep a rule undecided each their own way (``RuleResult.undecided``
from the closures, ``RuleProgram.undecided`` from the program's node states)."""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.engine import evaluate
from service.engine.verdict import decide
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


@pytest.mark.parametrize("path", BUNDLES, ids=lambda p: p.name)
def test_decide_on_the_results_gives_the_evaluations_verdict(runtime: Runtime, path: Path) -> None:
    ruleset = runtime.ruleset
    assessment = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    facts = {k: v for k, v in assessment.index.facts.items() if k in ruleset.catalogue}
    evaluation = evaluate(ruleset, facts)
    known = ruleset.catalogue.as_stated(facts)
    verdict = decide(evaluation.results, known, ruleset.catalogue)  # type: ignore[arg-type]
    assert verdict == evaluation.verdict
    assert [m.undecided for m in verdict.mechanisms] == [
        m.undecided for m in evaluation.verdict.mechanisms
    ]
