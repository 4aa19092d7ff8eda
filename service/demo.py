"""The built-in demo: an invented patient's Bundle through the whole assess path.

Scenario (invented): a 67-year-old visitor at a clinic 2,500 m up, breathing room air, with a
low PaO2, a low PaCO2 and an A-a gradient a little above the limit for her age.
"""

from __future__ import annotations

from pathlib import Path

import orjson

from service.assess.summary import summary_text
from service.fhir.extract import read_bundle
from service.runtime import Runtime

DEMO_FILE = "altitude-visitor.bundle.json"


def demo_bundle_path() -> Path:
    """The demo Bundle: bundled in the wheel, or in ``fixtures/demo`` beside the package."""
    package = Path(__file__).resolve().parent
    bundled = package / "_bundled" / "demo" / DEMO_FILE
    return bundled if bundled.is_file() else package.parent / "fixtures" / "demo" / DEMO_FILE


def run_demo(*, as_json: bool = False) -> str:
    """The demo's output: a readable summary, or the result Bundle as JSON."""
    runtime = Runtime.load()
    data = orjson.loads(demo_bundle_path().read_bytes())
    if as_json:
        result = runtime.assess_bundle(data)
        return orjson.dumps(result, option=orjson.OPT_INDENT_2).decode() + "\n"
    assessment = runtime.assess_intake(read_bundle(data, concept_map=runtime.concept_map))
    header = (
        "oxyrule demo: an invented 68-year-old at 2,500 m on room air "
        f"({demo_bundle_path().name})\n\n"
    )
    return header + summary_text(assessment)
