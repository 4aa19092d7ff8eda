"""Find conditions that can never be true (or never false) by trying the values that matter.

A rule's truth only changes where one of its facts crosses a threshold, so trying each
threshold and a value just either side of it, plus "missing", for every fact the rule reads
covers every combination of leaf outcomes that values can produce. A rule that is never true
over all of them is unreachable (contradictory conditions); one that is true whenever its facts
are known is a tautology (it decides nothing).
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator

from service.engine import FactKind, Rule, RuleSet

MAX_COMBINATIONS = 200_000


def _candidates(ruleset: RuleSet, rule: Rule) -> dict[str, list[object]]:
    leaves = ruleset.leaves
    values: dict[str, list[object]] = {}
    for index in rule.condition.leaves:
        leaf = leaves[index]
        spec = ruleset.catalogue[leaf.fact]
        found = values.setdefault(leaf.fact, [])
        if spec.kind is FactKind.BOOLEAN:
            found += [True, False]
        elif spec.kind is FactKind.CODE:
            found += sorted(spec.allowed or ())
        else:
            threshold = leaf.threshold
            points = threshold if isinstance(threshold, tuple) else (threshold,)
            for point in points:
                if isinstance(point, int | float) and not isinstance(point, bool):
                    step = max(abs(float(point)) * 1e-6, 1e-6)
                    found += [float(point) - step, float(point), float(point) + step]
    for fact, found in values.items():
        if not found:  # only `present` tests: any value of the fact will do
            spec = ruleset.catalogue[fact]
            low, high = spec.minimum or 0.0, spec.maximum or 1.0
            found.append((float(low) + float(high)) / 2)
    return {fact: list(dict.fromkeys(v)) for fact, v in values.items()}


def _assignments(candidates: dict[str, list[object]]) -> Iterator[dict[str, object]]:
    names = list(candidates)
    pools = [[*candidates[name], None] for name in names]
    for combo in itertools.product(*pools):
        yield {name: value for name, value in zip(names, combo, strict=True) if value is not None}


def reachability(ruleset: RuleSet, rule: Rule) -> tuple[bool, bool] | None:
    """(can be true, can be false with every fact known), or None when too many to try."""
    candidates = _candidates(ruleset, rule)
    total = 1
    for pool in candidates.values():
        total *= len(pool) + 1
    if total > MAX_COMBINATIONS:
        return None
    leaves = ruleset.leaves
    states: list[bool | None] = [None] * len(leaves)
    can_true = can_false_known = False
    for facts in _assignments(candidates):
        for index in rule.condition.leaves:
            states[index] = leaves[index].test(facts)
        truth = rule.condition.truth(states)
        if truth is True:
            can_true = True
        elif truth is False and len(facts) == len(candidates):
            can_false_known = True
        if can_true and can_false_known:
            break
    return can_true, can_false_known
