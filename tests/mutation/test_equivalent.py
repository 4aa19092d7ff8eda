"""The kept list of equivalent mutants stays true to the code, and the mutation operators make
the mutants DEVELOPERS.md ("Mutation testing") says they make."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.mutation.mutants import mutants_of
from tests.mutation.run import AREAS, ROOT, read_equivalent


def test_every_listed_equivalent_names_a_mutant_that_exists() -> None:
    """A key whose line moved no longer excuses anything: the runner would count the mutant
    at its new key as a survivor, and the stale line would hide that the list needs care."""
    listed = read_equivalent()
    mutated = {path for modules, _ in AREAS.values() for path in modules}
    by_path: dict[str, set[str]] = {}
    for key in listed:
        path = key.split(":", 1)[0]
        assert path in mutated, f"{key}: not a module any area mutates"
        by_path.setdefault(path, set()).add(key)
    stale = sorted(
        key
        for path, keys in by_path.items()
        for key in keys - {m.key for m in mutants_of(ROOT / path, path)}
    )
    assert not stale, "equivalent.txt lists mutants that no longer exist:\n" + "\n".join(stale)


def test_every_listed_equivalent_has_one_line() -> None:
    lines = [
        line.partition("  # ")[0].strip()
        for line in (ROOT / "tests/mutation/equivalent.txt").read_text("utf-8").splitlines()
        if line.strip() and not line.startswith("#")
    ]
    assert len(lines) == len(set(lines))


@pytest.mark.parametrize(
    ("source", "changes"),
    [
        # constants ±10 %: a unit factor's realistic slip (DEVELOPERS.md, "Mutation testing")
        ("X = 0.3048\n", {"0.3048 -> 0.27432", "0.3048 -> 0.33528"}),
        ("def f(a, b):\n    return a < b\n", {"< -> <="}),
        ("def f(a, b):\n    return a + b\n", {"+ -> -"}),
        ("def f(a, b):\n    return a * b\n", {"* -> /"}),
        ("def f(a, b):\n    return a and b\n", {"and -> or"}),
        ("def f(a, b):\n    return min(a, b)\n", {"min( -> max("}),
        ("def f(a):\n    return a == 1\n", {"== -> !=", "1 -> 0", "1 -> 2"}),
    ],
)
def test_operators_make_the_documented_mutants(
    tmp_path: Path, source: str, changes: set[str]
) -> None:
    file = tmp_path / "m.py"
    file.write_text(source, encoding="utf-8")
    made = {m.change for m in mutants_of(file, "m.py")}
    assert changes <= made, made
