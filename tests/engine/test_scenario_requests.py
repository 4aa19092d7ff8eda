"""Scenarios decided without their data requests (``evaluate_scenarios(ask=False)``) combine
to the same verdict, text and data requests included, as scenarios decided in full, on every
fixture with uncertain inputs: whether the representative counts or not, and when a refuted
representative makes a scenario's verdict stand in for it (then ``Scenario.complete``
decides that scenario again with its requests).

These are properties of the engine's own code (which parts of a scenario's verdict `combine`
reads), not clinical checks: the clinical answers are checked elsewhere against published
sources.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import orjson
import pytest

from service.engine.evaluate import Evaluation
from service.engine.scenarios import combine, evaluate_scenarios
from service.engine.vocabulary import Severity
from service.runtime import Runtime
from tests.engine.test_scenario_sharing import BUNDLES, UNCERTAIN, _said, labelled_scenarios


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _refuted(evaluation: Evaluation) -> bool:
    return any(f.severity is Severity.ERROR for f in evaluation.verdict.findings)


@pytest.fixture(scope="module")
def refuted(runtime: Runtime) -> Evaluation:
    """An index evaluation of a fixture whose data raised an error finding."""
    for path in BUNDLES:
        evaluation = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes()))).evaluation
        if _refuted(evaluation):
            return evaluation
    pytest.fail("no fixture raises an error finding")


@pytest.mark.parametrize("path", UNCERTAIN, ids=lambda p: p.name)
def test_scenarios_without_requests_combine_to_the_same_verdict(
    runtime: Runtime, refuted: Evaluation, path: Path
) -> None:
    ruleset = runtime.ruleset
    representative, labelled, ranges = labelled_scenarios(runtime, path)
    full = evaluate_scenarios(ruleset, labelled)
    light = evaluate_scenarios(ruleset, labelled, ask=False)
    assert [s.complete for s in full] == [None] * len(full)
    for whole, part in zip(full, light, strict=True):
        assert (part.label, part.only_for) == (whole.label, whole.only_for)
        assert part.complete is not None
        # Only the data requests are left out; the complete evaluation has them, made once.
        assert part.evaluation.verdict.data_requested == ()
        expected = whole.evaluation.verdict
        assert replace(part.evaluation.verdict, data_requested=expected.data_requested) == expected
        assert part.complete().verdict == expected
        assert part.complete() is part.complete()
    uncertainties = ranges.uncertainties
    for shown in (representative, refuted):
        for counts in (True, False):
            expected = combine(shown, full, uncertainties, representative_counts=counts)
            found = combine(shown, light, uncertainties, representative_counts=counts)
            assert _said(found) == _said(expected)
            assert found.data_requested == expected.data_requested


def test_the_refuted_representative_is_exercised(refuted: Evaluation) -> None:
    assert _refuted(refuted)
