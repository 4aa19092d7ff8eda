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

SCENARIOS = (
    ("altitude-visitor", "a 68-year-old visitor at 2,500 m on room air"),
    ("post-operative-drowsiness", "a drowsy 34-year-old after an operation, at sea level"),
    ("ventilated-two-fio2", "a ventilated 57-year-old with gases on FiO2 0.5 and 1.0"),
    ("venturi-titration", "a 61-year-old with pneumonia titrated on a Venturi mask, air to 0.40"),
)


def demo_dir() -> Path:
    """The demo Bundles: bundled in the wheel, or ``fixtures/demo`` beside the package."""
    package = Path(__file__).resolve().parent
    bundled = package / "_bundled" / "fixtures" / "demo"
    return bundled if bundled.is_dir() else package.parent / "fixtures" / "demo"


def run_demo(*, as_json: bool = False) -> str:
    """The demo's output: a readable summary per scenario, or the result Bundles as NDJSON."""
    runtime = Runtime.load()
    parts: list[str] = []
    for number, (name, label) in enumerate(SCENARIOS, start=1):
        data = orjson.loads((demo_dir() / f"{name}.bundle.json").read_bytes())
        if as_json:
            parts.append(orjson.dumps(runtime.assess_bundle(data)).decode() + "\n")
            continue
        assessment = runtime.assess_intake(read_bundle(data, concept_map=runtime.concept_map))
        rule = "=" * 100
        parts.append(f"{rule}\nScenario {number} (invented): {label}\n{rule}\n")
        parts.append(summary_text(assessment, settings=runtime.settings) + "\n")
    return "".join(parts)
