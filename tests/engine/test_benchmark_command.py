"""The timing command runs and reports a ratio (it measures nothing in the test suite)."""

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine import evaluate
from service.engine.loader import build_ruleset
from tests.benchmarks.engine import BENCH_FACTS, generated_documents, main


def test_generated_bench_rule_set_loads_forty_rules_and_evaluates() -> None:
    ruleset = build_ruleset(generated_documents(), catalogue=DEFAULT_CATALOGUE)
    assert len(ruleset.evaluated) == 40
    assert len(evaluate(ruleset, BENCH_FACTS).results) == 40


def test_bench_main_prints_timings_and_the_ratio(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["--iterations", "1"]) == 0
    output = capsys.readouterr().out
    assert "40 evaluated rules" in output
    assert "ratio evaluate / baseline:" in output
