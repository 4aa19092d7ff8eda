"""Scenarios whose rules run to the same states share one evaluation (``evaluate_scenarios``,
``RuleRun.same_states``), and the combined verdict, text included, is the one reached by
evaluating every scenario on its own, on every fixture.

These are properties of the engine's own code (a verdict reads the names of the known facts
and the leaves' states, never the values), not clinical checks: the clinical answers are
checked elsewhere against published sources.
"""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.assess.assess import ALVEOLAR_TOLERANCE
from service.assess.derive import derive_again
from service.assess.uncertainty import Ranges, input_ranges
from service.engine import Mechanism, evaluate
from service.engine.evaluate import Evaluation, run_rules
from service.engine.facts import FactValue
from service.engine.rationale import NO_UNITS
from service.engine.scenarios import Scenario, combine, evaluate_scenarios
from service.engine.verdict import Verdict
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _said(verdict: Verdict) -> object:
    """The verdict with the text its readers show (rationales of mechanisms and findings)."""
    return (
        verdict,
        [m.rationales_in(NO_UNITS) for m in verdict.mechanisms],
        [m.discriminators for m in verdict.mechanisms],
        [(f.code, f.rationale_in(NO_UNITS)) for f in verdict.findings],
    )


def _with_uncertain_inputs() -> list[Path]:
    """The fixtures whose index gas has scenarios of uncertain inputs (chosen at collection,
    so that the test runs only where there is something to share)."""
    runtime = Runtime.load()
    tolerance = runtime.ruleset.parameters.get(ALVEOLAR_TOLERANCE)
    chosen = []
    for path in BUNDLES:
        index = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes()))).index
        ranges = input_ranges(
            index, tolerance_mmhg=tolerance.value if tolerance else 0.0, settings=runtime.settings
        )
        if ranges.scenarios and ranges.uncertainties:
            chosen.append(path)
    return chosen


UNCERTAIN = _with_uncertain_inputs()


def test_most_fixtures_have_uncertain_inputs_to_share() -> None:
    assert len(UNCERTAIN) >= 40, len(UNCERTAIN)


def labelled_scenarios(
    runtime: Runtime, path: Path
) -> tuple[Evaluation, list[tuple[str, dict[str, FactValue], frozenset[Mechanism] | None]], Ranges]:
    """A fixture's representative evaluation, its scenarios' facts (labelled, as the assess
    path makes them) and its ranges."""
    ruleset, settings = runtime.ruleset, runtime.settings
    assessment = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    index = assessment.index
    tolerance = ruleset.parameters.get(ALVEOLAR_TOLERANCE)
    ranges = input_ranges(
        index, tolerance_mmhg=tolerance.value if tolerance else 0.0, settings=settings
    )
    assert ranges.scenarios and ranges.uncertainties
    common = dict(assessment.serial or {})
    labelled = [
        (label, {**derive_again(index, changes, settings=settings), **common}, only_for)
        for label, changes, only_for in ranges.scenarios
    ]
    return evaluate(ruleset, {**index.facts, **common}), labelled, ranges


@pytest.mark.parametrize("path", UNCERTAIN, ids=lambda p: p.name)
def test_shared_scenarios_combine_to_the_verdict_of_separate_ones(
    runtime: Runtime, path: Path
) -> None:
    ruleset = runtime.ruleset
    representative, labelled, ranges = labelled_scenarios(runtime, path)
    separate = [Scenario(label, evaluate(ruleset, f), o) for label, f, o in labelled]
    shared = evaluate_scenarios(ruleset, labelled)
    assert [(s.label, s.only_for) for s in shared] == [(s.label, s.only_for) for s in separate]
    for made in (separate, shared):
        assert [s.evaluation.verdict for s in made] == [s.evaluation.verdict for s in separate]
    counts = ranges.representative_counts
    expected = combine(representative, separate, ranges.uncertainties, representative_counts=counts)
    found = combine(representative, shared, ranges.uncertainties, representative_counts=counts)
    assert _said(found) == _said(expected)


@pytest.fixture(scope="module")
def demo_facts(runtime: Runtime) -> dict[str, FactValue]:
    path = ROOT / "fixtures" / "demo" / "altitude-visitor.bundle.json"
    assessment = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    return {k: v for k, v in assessment.index.facts.items() if k in runtime.ruleset.catalogue}


def test_same_states_of_the_same_facts(runtime: Runtime, demo_facts: dict[str, FactValue]) -> None:
    ruleset = runtime.ruleset
    assert run_rules(ruleset, demo_facts).same_states(run_rules(ruleset, dict(demo_facts)))


def test_other_leaf_states_are_not_the_same(
    runtime: Runtime, demo_facts: dict[str, FactValue]
) -> None:
    ruleset = runtime.ruleset
    # A tested fact sent as missing turns its leaves unknown; the set of names changes too,
    # so give a same-named stand-in: a tested fact at another value that flips a leaf.
    first = run_rules(ruleset, demo_facts)
    for leaf in ruleset.leaves:
        value = demo_facts.get(leaf.fact)
        if type(value) is not bool:
            continue
        changed = run_rules(ruleset, {**demo_facts, leaf.fact: not value})
        if changed.leaf_states != first.leaf_states:
            assert changed.known.keys() == first.known.keys()
            assert not first.same_states(changed)
            return
    pytest.fail("no boolean fact of the demo flips a leaf")


def test_other_known_facts_are_not_the_same(
    runtime: Runtime, demo_facts: dict[str, FactValue]
) -> None:
    ruleset = runtime.ruleset
    tested = {leaf.fact for leaf in ruleset.leaves}
    untested = [name for name in demo_facts if name not in tested]
    assert untested, "the demo sends a fact no leaf tests"
    fewer = {k: v for k, v in demo_facts.items() if k != untested[0]}
    first, second = run_rules(ruleset, demo_facts), run_rules(ruleset, fewer)
    assert first.leaf_states == second.leaf_states
    assert not first.same_states(second)


def test_scenarios_share_only_with_the_same_states_and_mechanisms(
    runtime: Runtime, demo_facts: dict[str, FactValue]
) -> None:
    ruleset = runtime.ruleset
    some = frozenset({Mechanism.SHUNT})
    flipped = next(
        {**demo_facts, leaf.fact: not demo_facts[leaf.fact]}
        for leaf in ruleset.leaves
        if type(demo_facts.get(leaf.fact)) is bool
        and run_rules(ruleset, {**demo_facts, leaf.fact: not demo_facts[leaf.fact]}).leaf_states
        != run_rules(ruleset, demo_facts).leaf_states
    )
    a, b, c, d = evaluate_scenarios(
        ruleset,
        [
            ("a", demo_facts, None),
            ("b", dict(demo_facts), None),
            ("c", dict(demo_facts), some),
            ("d", flipped, None),
        ],
    )
    assert b.evaluation is a.evaluation
    assert c.evaluation is not a.evaluation  # bears on other mechanisms
    assert d.evaluation is not a.evaluation  # other states
    assert d.evaluation.verdict == evaluate(ruleset, flipped).verdict
