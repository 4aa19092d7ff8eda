"""The error tree drawn in ``service/exceptions.py`` is the real one.

The drawing is parsed (indentation gives the parent, parentheses the extra bases, the right
column the module) and compared with the classes; every exception class defined under
``service/`` must appear in it, so a new error family cannot slip in undrawn.
"""

from __future__ import annotations

import ast
import importlib
import re
from pathlib import Path

import service.exceptions

SERVICE = Path(__file__).resolve().parents[1] / "service"
_LINE = re.compile(
    r"^(?P<indent>[│ ├└─]*)(?P<name>\w+)(?: \((?P<bases>[\w, ]+)\))?\s+(?P<module>[\w.]+)$"
)


def _drawing() -> dict[str, tuple[str, str | None, tuple[str, ...]]]:
    """Class name -> (module, drawn parent or None for a root line, extra bases)."""
    doc = service.exceptions.__doc__ or ""
    drawn: dict[str, tuple[str, str | None, tuple[str, ...]]] = {}
    stack: list[tuple[int, str]] = []
    for raw in doc.splitlines():
        line = raw[4:] if raw.startswith("    ") else None
        if line is None:
            continue
        match = _LINE.match(line)
        if match is None:
            continue
        depth = len(match["indent"])
        while stack and stack[-1][0] >= depth:
            stack.pop()
        parent = stack[-1][1] if stack else None
        bases = tuple(b.strip() for b in (match["bases"] or "").split(",") if b.strip())
        drawn[match["name"]] = (match["module"], parent, bases)
        stack.append((depth, match["name"]))
    return drawn


def _defined_exceptions() -> set[tuple[str, str]]:
    """(module, class) of every class under service/ that derives from an exception."""
    found: set[tuple[str, str]] = set()
    for path in SERVICE.rglob("*.py"):
        module = ".".join(path.relative_to(SERVICE.parent).with_suffix("").parts)
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in tree.body:
            if isinstance(node, ast.ClassDef) and node.bases:
                cls = getattr(importlib.import_module(module), node.name)
                if isinstance(cls, type) and issubclass(cls, BaseException):
                    found.add((module, node.name))
    return found


def test_every_drawn_class_has_the_drawn_bases() -> None:
    drawn = _drawing()
    assert "ServiceError" in drawn and "FactError" in drawn
    for name, (module, parent, extra) in drawn.items():
        cls = getattr(importlib.import_module(module), name)
        expected = ([parent] if parent else []) + list(extra)
        assert [base.__name__ for base in cls.__bases__] == expected, name


def test_every_exception_class_of_the_service_is_drawn() -> None:
    drawn = {(module, name) for name, (module, _, _) in _drawing().items()}
    assert _defined_exceptions() == drawn
