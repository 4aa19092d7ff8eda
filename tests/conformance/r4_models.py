"""Validate resources with the FHIR R4 (4.0.1) models of ``fhir.resources`` 6.4.0.

Run as a separate process (``python -m tests.conformance.r4_models``): it reads one JSON
object per line on stdin, ``{"name": ..., "resource": {...}}``, and writes one JSON line per
input, ``{"name": ..., "errors": [...]}``. The models are the kept wheel (``kept/README.md``),
written for pydantic 1: before they are imported, every ``pydantic`` module is made to be the
matching ``pydantic.v1`` module, which pydantic 2 ships for exactly this. That would break the
service's own pydantic 2 models, hence the separate process.
"""

from __future__ import annotations

import importlib
import importlib.abc
import importlib.machinery
import importlib.util
import json
import sys
import types
import warnings
from pathlib import Path
from typing import Any

WHEEL = Path(__file__).resolve().parent / "kept" / "fhir.resources-6.4.0-py2.py3-none-any.whl"


class _PydanticV1(importlib.abc.MetaPathFinder, importlib.abc.Loader):
    """Imports of ``pydantic.X`` answered with ``pydantic.v1.X``."""

    def find_spec(
        self, name: str, path: object = None, target: object = None
    ) -> importlib.machinery.ModuleSpec | None:
        if name.startswith("pydantic.v1"):
            return None
        if name == "pydantic" or name.startswith("pydantic."):
            return importlib.util.spec_from_loader(name, self)
        return None

    def create_module(self, spec: importlib.machinery.ModuleSpec) -> types.ModuleType:
        return importlib.import_module("pydantic.v1" + spec.name[len("pydantic") :])

    def exec_module(self, module: types.ModuleType) -> None:
        return None


def _load_models() -> Any:
    warnings.simplefilter("ignore")  # pydantic.v1 warns about running on a newer Python
    import pydantic.v1

    loaded = [name for name in sys.modules if name.startswith("pydantic")]
    v1 = {name: sys.modules[name] for name in loaded if name.startswith("pydantic.v1")}
    for name in loaded:
        del sys.modules[name]
    for name, module in v1.items():
        sys.modules["pydantic" + name[len("pydantic.v1") :]] = module
    sys.modules["pydantic.v1"] = pydantic.v1
    sys.meta_path.insert(0, _PydanticV1())
    # The wheel's ``fhir`` package, not the installed one (fhir.resources 8, R4B and R5).
    package = types.ModuleType("fhir")
    package.__path__ = [f"{WHEEL}/fhir"]
    sys.modules["fhir"] = package
    resources = importlib.import_module("fhir.resources")
    assert resources.__fhir_version__ == "4.0.1", resources.__fhir_version__
    return resources


def main() -> int:
    resources = _load_models()
    for line in sys.stdin:
        if not line.strip():
            continue
        item = json.loads(line)
        errors: list[str] = []
        resource = item["resource"]
        try:
            resources.construct_fhir_element(resource["resourceType"], resource)
        except Exception as exc:  # every failure is reported, whatever raised it
            errors = [f"{type(exc).__name__}: {exc}"]
        sys.stdout.write(json.dumps({"name": item["name"], "errors": errors}) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
