"""Dependencies point one way: adapters depend on the core, never the reverse.

The physiology core and the rule engine are pure; they must not import the web framework,
the FHIR models or each other's adapters. The intake model, the terminology tables and the
assess glue serve every adapter, so they import none; the HL7 v2 adapter does not lean on the
FHIR adapter. Checked by walking every module's imports, relative ones included
(``from .derive import x`` in ``service/assess/assess.py`` is ``service.assess.derive``).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SERVICE = ROOT / "service"

_WEB = ("fastapi", "starlette", "uvicorn")
_FHIR_MODELS = ("fhir", "fhir_core")
_ADAPTERS = (
    "service.fhir",
    "service.api",
    "service.hl7v2",
    "service.workbench",
    "service.cds",
    "service.bulk",
    "pyarrow",
    "pyspark",
)

FORBIDDEN: dict[str, tuple[str, ...]] = {
    "physiology": (
        *_WEB,
        *_FHIR_MODELS,
        *_ADAPTERS,
        "service.engine",
        "service.assess",
        "service.intake",
        "service.terminology",
        "service.runtime",
        "yaml",
    ),
    "engine": (*_WEB, *_FHIR_MODELS, *_ADAPTERS, "service.assess", "service.runtime"),
    "intake": (*_WEB, *_FHIR_MODELS, *_ADAPTERS, "service.assess", "service.runtime"),
    "terminology": (*_WEB, *_FHIR_MODELS, *_ADAPTERS, "service.assess", "service.runtime"),
    "assess": (*_WEB, *_FHIR_MODELS, *_ADAPTERS, "service.runtime"),
    "hl7v2": (*_FHIR_MODELS, "service.fhir", "service.api"),
    # The CDS Hooks adapter speaks no HTTP framework: the routes in service/api do.
    "cds": (*_WEB, "service.api", "service.hl7v2"),
}


def module_name(path: Path) -> str:
    """The dotted name of the module at ``path`` (a file under the repository root)."""
    parts = list(path.resolve().relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _absolute(node: ast.ImportFrom, name: str, is_package: bool = False) -> str:
    """The module an ImportFrom names, a relative one resolved against module ``name``."""
    if node.level == 0:
        return node.module or ""
    package = name.split(".")
    if not is_package:
        package.pop()  # a module's package is its parent
    if node.level > 1:
        package = package[: len(package) - (node.level - 1)]
    return ".".join([*package, node.module] if node.module else package)


def imported_modules(path: Path, name: str | None = None) -> set[str]:
    """Every module ``path`` imports, relative imports resolved against its dotted ``name``
    (by default its place under the repository root); a relative ``from p import m`` adds
    both ``p`` and ``p.m`` (m may be a module)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    if name is None:
        name = module_name(path) if path.resolve().is_relative_to(ROOT) else path.stem
    is_package = path.name == "__init__.py"
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = _absolute(node, name, is_package)
            names.add(base)
            if node.level:  # `from . import codes` imports the module service.x.codes
                names.update(f"{base}.{alias.name}" for alias in node.names)
    return names


def _banned(package: str, imported: set[str]) -> list[str]:
    return sorted(
        name
        for name in imported
        for banned in FORBIDDEN[package]
        if name == banned or name.startswith(banned + ".")
    )


def _violations(package: str) -> list[str]:
    return [
        f"{path.relative_to(ROOT)} imports {name}"
        for path in sorted((SERVICE / package).rglob("*.py"))
        for name in _banned(package, imported_modules(path))
    ]


@pytest.mark.parametrize("package", sorted(FORBIDDEN))
def test_core_package_imports_no_adapter(package: str) -> None:
    assert (SERVICE / package).is_dir(), f"service/{package} is gone: update FORBIDDEN"
    assert _violations(package) == []


def test_the_checker_catches_a_forbidden_import(tmp_path: Path) -> None:
    module = tmp_path / "bad.py"
    module.write_text("from fastapi import FastAPI\nimport service.fhir.extract\n")
    assert imported_modules(module) == {"fastapi", "service.fhir.extract"}


def test_the_checker_resolves_relative_imports() -> None:
    # A module inside the tree: relative imports resolve against its package.
    assert "service.assess.pairing" in imported_modules(SERVICE / "assess" / "assess.py")
    sample = ast.parse("from ..fhir import render\nfrom . import sibling\n")
    resolved = {
        _absolute(node, "service.assess.assess")
        for node in sample.body
        if isinstance(node, ast.ImportFrom)
    }
    assert resolved == {"service.fhir", "service.assess"}


def test_a_relative_import_of_an_adapter_is_a_violation(tmp_path: Path) -> None:
    probe = tmp_path / "probe.py"
    probe.write_text("from ..fhir import codes\nfrom .values import read_value\n")
    imported = imported_modules(probe, "service.hl7v2.probe")
    assert {"service.fhir", "service.fhir.codes", "service.hl7v2.values"} <= imported
    assert _banned("hl7v2", imported) == ["service.fhir", "service.fhir.codes"]
