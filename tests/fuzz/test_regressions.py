"""Every input a fuzzer ever found to crash stays fixed, and the seed corpora stay valid.

Crashes found by ``python -m tests.fuzz.fhir_intake`` go into ``regressions/fhir/``, those of
``python -m tests.fuzz.hl7v2`` into ``regressions/hl7v2/``; each is replayed here through the
same property its fuzzer checks, with the seeds of its corpus.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from service.fhir.outcome import LocatedError
from service.hl7v2 import framing, handle, message
from service.runtime import Runtime
from tests.fuzz import fhir_intake, hl7v2

HERE = Path(__file__).resolve().parent


def cases(kind: str) -> list[Path]:
    return sorted((HERE / "regressions" / kind).glob("*")) + sorted(
        (HERE / "corpus" / kind).glob("*")
    )


FHIR_CASES, V2_CASES = cases("fhir"), cases("hl7v2")


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


@pytest.mark.parametrize("path", FHIR_CASES, ids=[p.name for p in FHIR_CASES])
def test_fuzz_input_gives_a_result_or_a_located_rejection(path: Path, runtime: Runtime) -> None:
    fhir_intake.check(runtime, LocatedError, path.read_bytes())


# python-hl7 calls the deprecated ``Logger.warn`` on an empty escape sequence; the suite makes
# warnings errors, which a running service does not (tests/hl7v2/test_properties_v2.py).
@pytest.mark.filterwarnings("ignore:The 'warn' method is deprecated:DeprecationWarning")
@pytest.mark.parametrize("path", V2_CASES, ids=[p.name for p in V2_CASES])
def test_v2_fuzz_input_gets_a_well_formed_answer(path: Path, runtime: Runtime) -> None:
    hl7v2.check(runtime, (handle, message, framing), path.read_bytes())


def test_both_corpora_have_seeds() -> None:
    assert len(FHIR_CASES) >= 10 and len(V2_CASES) >= 10
