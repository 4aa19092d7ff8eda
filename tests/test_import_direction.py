"""Dependencies point one way: adapters depend on the core, never the reverse.

The physiology core and the rule engine are pure; they must not import the web framework,
the FHIR models or each other's adapters. Checked by walking every module's imports.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SERVICE = Path(__file__).resolve().parents[1] / "service"

FORBIDDEN: dict[str, tuple[str, ...]] = {
    "physiology": (
        "fastapi",
        "starlette",
        "uvicorn",
        "fhir",
        "fhir_core",
        "service.fhir",
        "service.engine",
        "service.api",
        "service.hl7v2",
        "service.bulk",
        "pyarrow",
        "pyspark",
        "yaml",
    ),
    "engine": (
        "fastapi",
        "starlette",
        "uvicorn",
        "fhir",
        "fhir_core",
        "service.fhir",
        "service.api",
        "service.hl7v2",
        "service.bulk",
        "pyarrow",
        "pyspark",
    ),
}


def imported_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module)
    return names


def _violations(package: str) -> list[str]:
    found = []
    for path in sorted((SERVICE / package).rglob("*.py")):
        for name in imported_modules(path):
            for banned in FORBIDDEN[package]:
                if name == banned or name.startswith(banned + "."):
                    found.append(f"{path.relative_to(SERVICE.parent)} imports {name}")
    return found


@pytest.mark.parametrize("package", sorted(FORBIDDEN))
def test_core_package_imports_no_adapter(package: str) -> None:
    if not (SERVICE / package).is_dir():
        pytest.skip(f"service/{package} does not exist yet")
    assert _violations(package) == []


def test_the_checker_catches_a_forbidden_import(tmp_path: Path) -> None:
    module = tmp_path / "bad.py"
    module.write_text("from fastapi import FastAPI\nimport service.fhir.extract\n")
    assert imported_modules(module) == {"fastapi", "service.fhir.extract"}
