"""Coverage-guided fuzzing of the FHIR intake and the whole assess path (a separate command).

    python -m tests.fuzz.fhir_intake [-max_total_time=300] [corpus dirs...]

Needs ``atheris`` (``pip install atheris``; not a test dependency). Starts from the seed corpus
in ``tests/fuzz/corpus/fhir`` and the fixture Bundles. Any input that raises anything but the
service's own located errors is a crash: libFuzzer writes it to ``crash-*``; copy it into
``tests/fuzz/regressions/fhir/`` and ``tests/fuzz/test_regressions.py`` keeps it fixed.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import orjson

from tests.fuzz.libfuzzer import fuzzer_args

HERE = Path(__file__).resolve().parent


def check(runtime: Any, located_error: type[Exception], data: bytes) -> None:
    """The property: bytes in, a result or a located rejection out, nothing else."""
    try:
        parsed = orjson.loads(data)
    except orjson.JSONDecodeError:
        return
    try:
        result = runtime.assess_bundle(parsed)
    except located_error as error:
        assert getattr(error, "problems", None), "a rejection must say where"
        return
    orjson.dumps(result)


def main() -> None:
    import atheris

    with atheris.instrument_imports():
        from service.fhir.outcome import LocatedError
        from service.runtime import Runtime
    runtime = Runtime.load()

    def one_input(data: bytes) -> None:
        check(runtime, LocatedError, data)

    atheris.Setup(fuzzer_args(sys.argv, "fhir", HERE / "corpus" / "fhir"), one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
