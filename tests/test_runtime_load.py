"""What ``Runtime.load`` does before the first request: the derived-fact table and its steps
are written and compiled at load, so no request pays for it (~30 ms) and the memory the
compiler used for a moment is handed back before a worker serves (README, Performance)."""

from __future__ import annotations

import subprocess
import sys
import textwrap

from tests.api.conftest import ALTITUDE, ROOT

# A fresh interpreter: the plans of this test process may already be written.
FIRST_ASSESSMENT = textwrap.dedent(
    """
    import sys
    import orjson
    from service.assess import step_code, table_code
    from service.runtime import Runtime

    runtime = Runtime.load()

    def refused(*_args, **_kwargs):
        raise AssertionError("code written after load")

    table_code.compiled = step_code.compiled = refused
    result = runtime.assess_bundle(orjson.loads(open(sys.argv[1], "rb").read()))
    print(result["resourceType"])
    """
)


def test_the_first_assessment_after_load_compiles_nothing() -> None:
    done = subprocess.run(
        [sys.executable, "-c", FIRST_ASSESSMENT, str(ALTITUDE)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=60,
        check=False,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip() == "Bundle"
