"""The assess path decides the scenarios of uncertain inputs without their data requests
only when the representative counts (``evaluate_scenarios(ask=...)``), each once, and the
assessment is the one of scenarios decided in full, on every fixture with uncertain inputs.

Properties of the engine's own code (which parts of a scenario's verdict `combine` reads), not
clinical checks: the clinical answers are checked elsewhere against published sources.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import orjson
import pytest

from service.engine.evaluate import Evaluation, RuleRun
from service.engine.scenarios import evaluate_scenarios
from service.runtime import Runtime
from tests.engine.test_scenario_sharing import UNCERTAIN, labelled_scenarios


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


@pytest.mark.parametrize("path", UNCERTAIN, ids=lambda p: p.name)
def test_the_assessment_is_the_one_of_scenarios_decided_in_full(
    runtime: Runtime, path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import service.assess.assess as assess_module  # the module whose look-up is replaced

    intake = runtime.read(orjson.loads(path.read_bytes()))
    found = runtime.assess_intake(intake)
    decide_in_full = evaluate_scenarios

    def in_full(*args: object, **kwargs: object) -> object:
        return decide_in_full(*args, **{**kwargs, "ask": True})  # type: ignore[arg-type]

    monkeypatch.setattr(assess_module, "evaluate_scenarios", in_full)
    expected = runtime.assess_intake(intake)
    assert found.data_requested == expected.data_requested
    assert found.mechanisms == expected.mechanisms
    assert found.findings == expected.findings
    assert (found.pattern, found.hypoxaemia, found.gas_exchange) == (
        expected.pattern,
        expected.hypoxaemia,
        expected.gas_exchange,
    )


@pytest.mark.parametrize("path", UNCERTAIN, ids=lambda p: p.name)
def test_the_assess_path_decides_each_scenario_once(
    runtime: Runtime, path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Without its requests only when the representative counts (then `combine` never reads
    them); else with them, at once, never a second time."""
    _, _, ranges = labelled_scenarios(runtime, path)
    decided = RuleRun.decided
    calls: list[tuple[RuleRun, bool]] = []  # the runs kept, so that no id is reused

    def counted(run: RuleRun, input_errors: Sequence[str] = (), *, ask: bool = True) -> Evaluation:
        calls.append((run, ask))
        return decided(run, input_errors, ask=ask)

    monkeypatch.setattr(RuleRun, "decided", counted)
    runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    runs = [id(run) for run, _ in calls]
    assert len(runs) == len(set(runs)) >= 2
    assert (False in {ask for _, ask in calls}) is ranges.representative_counts
