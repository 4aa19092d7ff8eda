"""Mutation testing of the core: does each small change to the code make a test fail?

    python -m tests.mutation.run                      # every area, two workers
    python -m tests.mutation.run --area physiology    # one area (physiology, engine, assess)
    python -m tests.mutation.run --module service/physiology/units.py --list
    python -m tests.mutation.run --area assess --survivors survivors.txt
    python -m tests.mutation.run --area assess --only survivors.txt   # those mutants again

One mutant at a time, each in a forked process: the mutated module is served by an import
hook from memory (the working tree is never written), then a targeted subset of the tests
runs with ``-x`` (``AREAS`` below). A mutant is *killed* when a test fails or errors, or when
it runs past the timeout; it *survives* when the subset passes. Survivors listed in
``equivalent.txt`` beside this file, each with the reason it cannot change behaviour, are
counted as equivalent, not as survivors; the kill rate is killed / (mutants - equivalent).

The mutation operators (``mutants.py``): comparison boundaries and negations (``<`` ↔ ``<=``,
``==`` ↔ ``!=``, ``in`` ↔ ``not in``, ``is`` ↔ ``is not``), arithmetic operators (``+`` ↔
``-``, ``*`` ↔ ``/``, ``**`` → ``*``), numeric constants ±10 %, booleans (``True`` ↔ ``False``,
``and`` ↔ ``or``, ``not x`` → ``x``) and ``min`` ↔ ``max``.

Why a runner of our own: the registry's mutation tools were weighed (from memory, not
re-measured here): cosmic-ray replaces numbers by ±1 (a unit factor of 0.3048 becomes 1.3048,
which any test catches, while a 10 % error in it is the realistic slip) and starts a fresh
test process per mutant; mutmut 3 mutates function bodies only, not the module-level
constants (unit factors, thresholds, limits) where the slips that matter here live. This
runner is a few hundred lines, forks from a process that has already imported the
third-party libraries, and runs a two-core machine's full set in minutes.
"""

from __future__ import annotations

import argparse
import importlib.abc
import importlib.machinery
import importlib.util
import os
import signal
import sys
import time
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import CodeType, ModuleType

from tests.mutation.mutants import Mutant, mutants_of

ROOT = Path(__file__).resolve().parents[2]
HERE = Path(__file__).resolve().parent
EQUIVALENT = HERE / "equivalent.txt"

# Area -> (modules to mutate, the tests that should kill their mutants).
ENGINE_EVALUATION = (
    "catalogue.py",
    "conditions.py",
    "data_requests.py",
    "evaluate.py",
    "facts.py",
    "leaves.py",
    "logic.py",
    "program.py",
    "rationale.py",
    "results.py",
    "ruleset.py",
    "scenarios.py",
    "verdict.py",
    "written_source.py",  # the check every source written at load passes (derivation steps too)
)
AREAS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "physiology": (
        tuple(
            f"service/physiology/{p.name}"
            for p in sorted((ROOT / "service/physiology").glob("*.py"))
            if p.name != "__init__.py"
        ),
        (
            "tests/physiology",
            "tests/assess",
            "tests/test_units_ucum.py",
            # the titration fixtures' numbers checked against the model written again
            # independently (tests/titration_reference.py), and every fixture's grades
            "tests/test_titration_fixtures.py",
            "tests/test_fixtures.py",
        ),
    ),
    "engine": (
        tuple(f"service/engine/{name}" for name in ENGINE_EVALUATION),
        ("tests/engine",),
    ),
    "assess": (
        tuple(
            f"service/assess/{p.name}"
            for p in sorted((ROOT / "service/assess").glob("*.py"))
            if p.name not in ("__init__.py", "summary.py", "presentation.py")
        ),
        (
            "tests/assess",
            "tests/test_fixtures.py",
            # the titration scenarios end to end: points, fit, facts and grades
            "tests/test_titration_fixtures.py",
            "tests/engine/test_catalogue.py",
            # a site's declared finding codes, whose `about` the assessment maps (about_data)
            "tests/engine/test_declared_findings.py",
            # the partition and the admixture are checked end to end where they are shown
            "tests/fhir/test_render_deficit.py",
            "tests/physiology/test_deficit.py",
            "tests/physiology/test_deficit_steps.py",
        ),
    ),
}
# Heavy third-party imports done once in the parent, before any fork (never `service`).
PRELOAD = (
    "pydantic",
    "pydantic_settings",
    "yaml",
    "orjson",
    "hypothesis",
    "pytest",
    "numpy",
    "fluids",
    "ambiance",
    "iapws",
    "ucumvert",
    "hl7",
    "fastapi",
    "httpx",
)
# Property tests run fewer examples per mutant: a mutant they catch, they catch early.
HYPOTHESIS_EXAMPLES = 25


@dataclass(frozen=True, slots=True)
class Outcome:
    mutant: Mutant
    status: str  # killed | survived | timeout | equivalent
    seconds: float


class _MutatedModule(importlib.abc.MetaPathFinder, importlib.abc.Loader):
    """Serves the source of one module, mutated, in place of the file on disk."""

    def __init__(self, name: str, path: Path, code: CodeType) -> None:
        self.name, self.path, self.code = name, path, code

    def find_spec(
        self, fullname: str, path: Sequence[str] | None, target: ModuleType | None = None
    ) -> importlib.machinery.ModuleSpec | None:
        if fullname != self.name:
            return None
        return importlib.util.spec_from_file_location(fullname, self.path, loader=self)

    def create_module(self, spec: importlib.machinery.ModuleSpec) -> ModuleType | None:
        return None

    def exec_module(self, module: ModuleType) -> None:
        exec(self.code, module.__dict__)


def _module_name(path: str) -> str:
    return path.removesuffix(".py").replace("/", ".").removesuffix(".__init__")


def _run_tests(tests: Sequence[str]) -> int:
    import pytest

    os.chdir(ROOT)
    # No plugin autoloading (the API fuzzer's plugin alone costs seconds), no assertion
    # rewriting: a mutant needs a pass or a fail, not a message.
    os.environ["PYTEST_DISABLE_PLUGIN_AUTOLOAD"] = "1"
    args = [*tests, "-x", "-q", "-p", "no:cacheprovider", "--no-header", "-W", "ignore"]
    args += ["--assert=plain"]
    sys.stdout.flush()
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, 1)
    os.dup2(devnull, 2)
    return int(pytest.main(args))


def _child(mutant: Mutant | None, tests: Sequence[str]) -> None:
    import hypothesis

    hypothesis.settings.register_profile(
        "mutation", max_examples=HYPOTHESIS_EXAMPLES, database=None, deadline=None
    )
    hypothesis.settings.load_profile("mutation")
    os.environ["OXYRULE_HYPOTHESIS_PROFILE"] = "mutation"  # tests/conftest.py keeps it
    if mutant is not None:
        sys.meta_path.insert(
            0, _MutatedModule(_module_name(mutant.path), mutant.file, mutant.code())
        )
    os._exit(_run_tests(tests))


def _start(mutant: Mutant | None, tests: Sequence[str]) -> int:
    pid = os.fork()
    if pid == 0:  # pragma: no cover - the child
        try:
            _child(mutant, tests)
        finally:
            os._exit(99)
    return pid


def _wait(pids: dict[int, tuple[Mutant, float]], timeout: float) -> Iterator[Outcome]:
    """Yield outcomes as children finish; kill those past the timeout."""
    while pids:
        pid, status = os.waitpid(-1, os.WNOHANG)
        if pid == 0:
            now = time.monotonic()
            for child, (mutant, started) in list(pids.items()):
                if now - started > timeout:
                    os.kill(child, signal.SIGKILL)
                    os.waitpid(child, 0)
                    del pids[child]
                    yield Outcome(mutant, "timeout", now - started)
            time.sleep(0.02)
            continue
        if pid not in pids:
            continue
        mutant, started = pids.pop(pid)
        code = os.waitstatus_to_exitcode(status)
        yield Outcome(mutant, "survived" if code == 0 else "killed", time.monotonic() - started)


def read_equivalent(path: Path = EQUIVALENT) -> dict[str, str]:
    """Mutant key -> the reason it is equivalent (``key  # reason`` per line)."""
    found: dict[str, str] = {}
    if not path.is_file():
        return found
    for line in path.read_text(encoding="utf-8").splitlines():
        if not line.strip() or line.startswith("#"):
            continue
        key, _, reason = line.partition("  # ")
        if not reason.strip():
            raise SystemExit(f"{path.name}: every equivalent mutant needs a reason: {line}")
        found[key.strip()] = reason.strip()
    return found


def run(
    modules: Sequence[str],
    tests: Sequence[str],
    jobs: int,
    timeout: float,
    only: frozenset[str] | None = None,
) -> list[Outcome]:
    """Mutate every module, one mutant at a time, and run ``tests`` against each (only the
    mutants whose keys are in ``only``, when given)."""
    for name in PRELOAD:
        __import__(name)
    tests = [t for t in tests if (ROOT / t).exists()]
    baseline = _start(None, tests)
    _, status = os.waitpid(baseline, 0)
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"the unmutated tests fail: {' '.join(tests)}")
    equivalent = read_equivalent()
    queue = [m for path in modules for m in mutants_of(ROOT / path, path)]
    if only is not None:
        queue = [m for m in queue if m.key in only]
    outcomes: list[Outcome] = []
    running: dict[int, tuple[Mutant, float]] = {}
    for mutant in queue:
        if mutant.key in equivalent:
            outcomes.append(Outcome(mutant, "equivalent", 0.0))
            continue
        while len(running) >= jobs:
            outcomes.extend(_first(_wait(running, timeout)))
        running[_start(mutant, tests)] = (mutant, time.monotonic())
    outcomes.extend(_wait(running, timeout))
    return outcomes


def _first(outcomes: Iterator[Outcome]) -> list[Outcome]:
    for outcome in outcomes:
        return [outcome]
    return []


def report(area: str, outcomes: Sequence[Outcome], seconds: float) -> str:
    """Per-module counts and the area's kill rate."""
    lines = [f"== {area}"]
    by_module: dict[str, list[Outcome]] = {}
    for outcome in outcomes:
        by_module.setdefault(outcome.mutant.path, []).append(outcome)
    total_killed = total_counted = 0
    for path, found in by_module.items():
        killed = sum(o.status in ("killed", "timeout") for o in found)
        counted = sum(o.status != "equivalent" for o in found)
        total_killed += killed
        total_counted += counted
        rate = 100.0 * killed / counted if counted else 100.0
        lines.append(f"  {path:<42} {killed:>4}/{counted:<4} killed  {rate:5.1f} %")
    rate = 100.0 * total_killed / total_counted if total_counted else 100.0
    equivalent = sum(o.status == "equivalent" for o in outcomes)
    lines.append(
        f"  {area}: {total_killed}/{total_counted} killed = {rate:.1f} % "
        f"({equivalent} equivalent, {len(outcomes)} mutants, {seconds:.0f} s)"
    )
    return "\n".join(lines)


def _own_tests_first(module: str, tests: tuple[str, ...]) -> tuple[str, ...]:
    """The module's own test file (``tests/<package>/test_<stem>.py``) ahead of the rest, so
    that most mutants fail in the first seconds; pytest collects a file named twice once."""
    package, stem = Path(module).parent.name, Path(module).stem
    own = f"tests/{package}/test_{stem}.py"
    return (own, *tests) if (ROOT / own).is_file() else tests


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--area", choices=sorted(AREAS), action="append")
    parser.add_argument("--module", action="append", help="one module (path from the root)")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--timeout", type=float, default=60.0, help="seconds per mutant")
    parser.add_argument("--list", action="store_true", help="list the mutants and stop")
    parser.add_argument("--survivors", type=Path, help="write surviving mutants here")
    parser.add_argument(
        "--only", type=Path, help="run only the mutants listed in this file (one key a line)"
    )
    parser.add_argument(
        "--tests",
        action="append",
        help=(
            "run these tests instead of the area's subset (a quick check while writing tests;"
            " a mutant a narrower subset kills, the area's subset kills too when it holds"
            " these tests; the kill rate is measured with the area's subset)"
        ),
    )
    return parser


def _selected(options: argparse.Namespace) -> list[tuple[str, tuple[str, ...], tuple[str, ...]]]:
    """(name, modules, tests) for each module or area asked for."""
    selected: list[tuple[str, tuple[str, ...], tuple[str, ...]]] = []
    if options.module:
        for path in options.module:
            area = next(a for a, (mods, _) in AREAS.items() if path in mods)
            selected.append((path, (path,), _own_tests_first(path, AREAS[area][1])))
    else:
        for area in options.area or sorted(AREAS):
            selected.append((area, *AREAS[area]))
    if options.tests:
        selected = [(name, modules, tuple(options.tests)) for name, modules, _ in selected]
    return selected


def main(argv: Sequence[str] | None = None) -> int:
    options = _parser().parse_args(argv)
    selected = _selected(options)
    if options.list:
        for _, modules, _tests in selected:
            for path in modules:
                for mutant in mutants_of(ROOT / path, path):
                    sys.stdout.write(f"{mutant.key}\n")
        return 0
    only = None
    if options.only is not None:
        # a survivors listing as this runner prints it ("survived: key") is read too
        only = frozenset(
            line.strip().removeprefix("survived: ")
            for line in options.only.read_text(encoding="utf-8").splitlines()
            if line.strip()
        )
    survivors: list[Outcome] = []
    for name, modules, tests in selected:
        started = time.monotonic()
        outcomes = run(modules, tests, options.jobs, options.timeout, only)
        sys.stdout.write(report(name, outcomes, time.monotonic() - started) + "\n")
        sys.stdout.flush()
        survivors += [o for o in outcomes if o.status == "survived"]
    for outcome in survivors:
        sys.stdout.write(f"survived: {outcome.mutant.key}\n")
    if options.survivors is not None:
        options.survivors.write_text("".join(f"{o.mutant.key}\n" for o in survivors))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
