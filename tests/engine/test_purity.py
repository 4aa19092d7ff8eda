"""The engine stays pure: no web, FHIR or logging imports, and I/O only in the loader."""

import ast
import sys
from pathlib import Path

import pytest

from tests.test_import_direction import imported_modules

ENGINE = Path(__file__).resolve().parents[2] / "service" / "engine"
MODULES = sorted(ENGINE.glob("*.py"))
THIRD_PARTY = {"pydantic", "pydantic_core", "yaml"}
FORBIDDEN_STDLIB = {"logging", "socket", "http", "urllib", "subprocess", "sqlite3"}
# Calls that read or write files; only the loader reads the rule directory.
IO_CALLS = {"open", "read_bytes", "read_text", "write_bytes", "write_text", "rglob", "iterdir"}


def _imports(path: Path) -> set[str]:
    return imported_modules(path)


def _calls(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            func = node.func
            if isinstance(func, ast.Name):
                found.add(func.id)
            elif isinstance(func, ast.Attribute):
                found.add(func.attr)
    return found


def test_the_engine_has_modules_to_check() -> None:
    assert {"loader.py", "evaluate.py", "verdict.py"} <= {path.name for path in MODULES}


@pytest.mark.parametrize("path", MODULES, ids=lambda path: path.name)
def test_engine_module_imports_only_stdlib_pydantic_yaml_and_the_engine(path: Path) -> None:
    for name in _imports(path):
        top = name.split(".")[0]
        if top == "service":
            assert name.startswith("service.engine"), f"{path.name} imports {name}"
        else:
            assert top in sys.stdlib_module_names or top in THIRD_PARTY, f"{path.name}: {name}"
            assert top not in FORBIDDEN_STDLIB, f"{path.name} imports {name}"


@pytest.mark.parametrize(
    "path", [p for p in MODULES if p.name != "loader.py"], ids=lambda path: path.name
)
def test_engine_module_other_than_the_loader_does_no_file_io(path: Path) -> None:
    assert not (_calls(path) & IO_CALLS), path.name


def test_purity_check_would_catch_a_forbidden_import(tmp_path: Path) -> None:
    sample = tmp_path / "sample.py"
    sample.write_text("import fastapi\nfrom service.fhir import models\nimport logging\n")
    assert _imports(sample) == {"fastapi", "service.fhir", "logging"}
    sample.write_text("data = open('x').read()\n")
    assert "open" in _calls(sample)
