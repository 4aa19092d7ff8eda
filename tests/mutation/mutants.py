"""The mutants of one module: small, single changes to its syntax tree.

A mutant is found by walking the module's tree in a fixed order and is rebuilt the same way
in the process that tests it (``Mutant.code``), so nothing is written to disk. Its ``key`` is
``path:line:column what`` (``service/physiology/units.py:139:67 0.3048 -> 0.33528``), the form
``equivalent.txt`` lists.

Not mutated: docstrings and other strings, annotations, decorators, ``assert`` statements,
``__all__``, ``if TYPE_CHECKING:`` blocks, subscripts (indexes), the keyword arguments of
``field``/``dataclass``/``Field`` (class plumbing, not behaviour), and lines that carry
``# pragma: no mutate``.
"""

from __future__ import annotations

import ast
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from types import CodeType

__all__ = ["Mutant", "mutants_of"]

_COMPARE: dict[type[ast.cmpop], type[ast.cmpop]] = {
    ast.Lt: ast.LtE,
    ast.LtE: ast.Lt,
    ast.Gt: ast.GtE,
    ast.GtE: ast.Gt,
    ast.Eq: ast.NotEq,
    ast.NotEq: ast.Eq,
    ast.Is: ast.IsNot,
    ast.IsNot: ast.Is,
    ast.In: ast.NotIn,
    ast.NotIn: ast.In,
}
_BINARY: dict[type[ast.operator], type[ast.operator]] = {
    ast.Add: ast.Sub,
    ast.Sub: ast.Add,
    ast.Mult: ast.Div,
    ast.Div: ast.Mult,
    ast.FloorDiv: ast.Div,
    ast.Pow: ast.Mult,
}
_SYMBOL = {
    ast.Lt: "<",
    ast.LtE: "<=",
    ast.Gt: ">",
    ast.GtE: ">=",
    ast.Eq: "==",
    ast.NotEq: "!=",
    ast.Is: "is",
    ast.IsNot: "is not",
    ast.In: "in",
    ast.NotIn: "not in",
    ast.Add: "+",
    ast.Sub: "-",
    ast.Mult: "*",
    ast.Div: "/",
    ast.FloorDiv: "//",
    ast.Pow: "**",
    ast.And: "and",
    ast.Or: "or",
}
_PLUMBING_CALLS = {"field", "dataclass", "Field", "ConfigDict", "SettingsConfigDict"}
PRAGMA = "# pragma: no mutate"

# A site: (node, what it becomes as text, the change applied to the tree in place).
Site = tuple[ast.AST, str, Callable[[], None]]


def _scaled(value: float | int) -> list[float | int]:
    """The ±10 % variants of a numeric constant (integers stay integers where they can)."""
    if value == 0:
        return []
    if isinstance(value, int):
        variants = {round(value * 1.1), round(value * 0.9)} - {value}
        return sorted(variants) if len(variants) == 2 else [value - 1, value + 1]
    return [value * 0.9, value * 1.1]


class _Sites(ast.NodeVisitor):
    """Collects the mutation sites of a tree in a fixed order."""

    def __init__(self, lines: list[str]) -> None:
        self.lines = lines
        self.sites: list[Site] = []

    def _skipped(self, node: ast.AST) -> bool:
        line = getattr(node, "lineno", None)
        return line is not None and PRAGMA in self.lines[line - 1]

    def generic_visit(self, node: ast.AST) -> None:
        if self._skipped(node):
            return
        super().generic_visit(node)

    # Skipped wholesale.
    def visit_Assert(self, node: ast.Assert) -> None:
        return

    def visit_Subscript(self, node: ast.Subscript) -> None:
        self.visit(node.value)  # the indexed expression, not the index

    def visit_AnnAssign(self, node: ast.AnnAssign) -> None:
        if node.value is not None:
            self.visit(node.value)

    def visit_arg(self, node: ast.arg) -> None:
        return  # annotations

    def visit_FunctionDef(self, node: ast.FunctionDef) -> None:
        self._function(node)

    def visit_AsyncFunctionDef(self, node: ast.AsyncFunctionDef) -> None:
        self._function(node)

    def _function(self, node: ast.FunctionDef | ast.AsyncFunctionDef) -> None:
        self.visit(node.args)
        body = node.body
        if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
            body = body[1:]  # the docstring
        for statement in body:
            self.visit(statement)

    def visit_arguments(self, node: ast.arguments) -> None:
        for default in [*node.defaults, *node.kw_defaults]:
            if default is not None:
                self.visit(default)

    def visit_ClassDef(self, node: ast.ClassDef) -> None:
        for statement in node.body:
            if isinstance(statement, ast.Expr) and isinstance(statement.value, ast.Constant):
                continue  # docstrings of the class and its fields
            self.visit(statement)

    def visit_If(self, node: ast.If) -> None:
        test = node.test
        if isinstance(test, ast.Name) and test.id == "TYPE_CHECKING":
            return
        self.generic_visit(node)

    def visit_Assign(self, node: ast.Assign) -> None:
        if any(isinstance(t, ast.Name) and t.id == "__all__" for t in node.targets):
            return
        self.generic_visit(node)

    def visit_Expr(self, node: ast.Expr) -> None:
        if isinstance(node.value, ast.Constant):
            return  # a bare string (docstring)
        self.generic_visit(node)

    def visit_Call(self, node: ast.Call) -> None:
        name = node.func.id if isinstance(node.func, ast.Name) else None
        if name in _PLUMBING_CALLS:
            return
        if name in ("min", "max"):
            other = "max" if name == "min" else "min"
            func = node.func
            assert isinstance(func, ast.Name)

            def swap(func: ast.Name = func, other: str = other) -> None:
                func.id = other

            self.sites.append((node, f"{name}( -> {other}(", swap))
        self.generic_visit(node)

    # Mutated.
    def visit_Compare(self, node: ast.Compare) -> None:
        for position, op in enumerate(node.ops):
            new = _COMPARE.get(type(op))
            if new is None:
                continue

            def change(node: ast.Compare = node, position: int = position, new: type = new) -> None:
                node.ops[position] = new()

            which = f" (comparison {position + 1})" if len(node.ops) > 1 else ""
            self.sites.append((node, f"{_SYMBOL[type(op)]} -> {_SYMBOL[new]}{which}", change))
        self.generic_visit(node)

    def visit_BinOp(self, node: ast.BinOp) -> None:
        new = _BINARY.get(type(node.op))
        if new is not None:

            def change(node: ast.BinOp = node, new: type = new) -> None:
                node.op = new()

            self.sites.append((node, f"{_SYMBOL[type(node.op)]} -> {_SYMBOL[new]}", change))
        self.generic_visit(node)

    def visit_AugAssign(self, node: ast.AugAssign) -> None:
        new = _BINARY.get(type(node.op))
        if new is not None:

            def change(node: ast.AugAssign = node, new: type = new) -> None:
                node.op = new()

            self.sites.append((node, f"{_SYMBOL[type(node.op)]}= -> {_SYMBOL[new]}=", change))
        self.generic_visit(node)

    def visit_BoolOp(self, node: ast.BoolOp) -> None:
        new: type[ast.boolop] = ast.Or if isinstance(node.op, ast.And) else ast.And

        def change(node: ast.BoolOp = node, new: type = new) -> None:
            node.op = new()

        self.sites.append((node, f"{_SYMBOL[type(node.op)]} -> {_SYMBOL[new]}", change))
        self.generic_visit(node)

    def visit_UnaryOp(self, node: ast.UnaryOp) -> None:
        if isinstance(node.op, ast.Not):

            def change(node: ast.UnaryOp = node) -> None:
                node.operand = ast.UnaryOp(ast.Not(), node.operand)  # not not x: bool(x)

            self.sites.append((node, "not x -> x", change))
        self.generic_visit(node)

    def visit_Constant(self, node: ast.Constant) -> None:
        value = node.value
        if isinstance(value, bool):

            def flip(node: ast.Constant = node) -> None:
                node.value = not node.value

            self.sites.append((node, f"{value} -> {not value}", flip))
        elif isinstance(value, int | float):
            for variant in _scaled(value):

                def scale(node: ast.Constant = node, variant: float | int = variant) -> None:
                    node.value = variant

                self.sites.append((node, f"{value!r} -> {variant!r}", scale))


def _sites(tree: ast.Module, lines: list[str]) -> list[Site]:
    collector = _Sites(lines)
    collector.visit(tree)
    return collector.sites


@dataclass(frozen=True, slots=True)
class Mutant:
    """One mutant: the module (path from the root), which site, and how it reads."""

    path: str
    file: Path
    index: int
    line: int
    column: int
    change: str

    @property
    def key(self) -> str:
        return f"{self.path}:{self.line}:{self.column} {self.change}"

    def code(self) -> CodeType:
        """The module's code with this mutation applied."""
        source = self.file.read_text(encoding="utf-8")
        tree = ast.parse(source)
        _sites(tree, source.splitlines())[self.index][2]()
        ast.fix_missing_locations(tree)
        return compile(tree, str(self.file), "exec")


def mutants_of(file: Path, path: str) -> Iterator[Mutant]:
    """Every mutant of the module at ``file`` (``path`` names it in keys)."""
    source = file.read_text(encoding="utf-8")
    for index, (node, change, _) in enumerate(_sites(ast.parse(source), source.splitlines())):
        line = getattr(node, "lineno", 0)
        column = getattr(node, "col_offset", 0)
        yield Mutant(path, file, index, line, column, change)
