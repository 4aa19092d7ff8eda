"""Every input a fuzzer ever found to crash stays fixed, and the seed corpus stays valid.

Crashes found by ``python -m tests.fuzz.fhir_intake`` go into ``regressions/fhir/``; each is
replayed here through the same property the fuzzer checks.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from service.fhir.outcome import LocatedError
from service.runtime import Runtime
from tests.fuzz.fhir_intake import check

HERE = Path(__file__).resolve().parent
CASES = sorted((HERE / "regressions" / "fhir").glob("*")) + sorted(
    (HERE / "corpus" / "fhir").glob("*")
)


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


@pytest.mark.parametrize("path", CASES, ids=[p.name for p in CASES])
def test_fuzz_input_gives_a_result_or_a_located_rejection(path: Path, runtime: Runtime) -> None:
    check(runtime, LocatedError, path.read_bytes())
