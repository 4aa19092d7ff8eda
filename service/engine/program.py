"""The rule set's leaf tests and conditions as one Python function, written once at load.

Evaluating through closures costs a Python call per leaf and per node of every condition
(about 370 calls for the default rule set), which was most of the evaluation's time. At load
the compiled conditions are therefore also written out as the straight-line body of a single
function: one assignment per distinct leaf, one per node of a condition (a block is worked out
once for every rule that refers to it), and the rules' states read from those variables. The
closures stay what traces, trees and ``decide`` read; ``tests/engine/test_program.py`` checks
that both give the same states for every leaf, node and rule.

Safe by construction, since no text of a rule file ever enters the source: every name in it is
a fixed keyword or builtin of this module or a letter followed by a number made here (``l3``,
``n7``, ``T3``), and fact names, thresholds and codes are handed to the function as values in
its namespace, never written into the text. ``_source_is_safe`` checks this before the source
is compiled (no quote, no name outside those forms), so a rule set that could break it is
refused rather than run.
"""

import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any

from service.engine.compiled import CompiledCondition
from service.engine.leaves import Leaf, near
from service.engine.logic import Operator, TruthValue
from service.engine.written_source import compiled, is_safe

__all__ = ["RuleProgram"]

States = tuple[TruthValue, ...]
Run = Callable[[Mapping[str, Any]], tuple[States, list[TruthValue], States]]

_COMPARE = {Operator.LT: "<", Operator.LE: "<=", Operator.GT: ">", Operator.GE: ">="}
# The only names the source may hold: keywords and builtins it uses, and made-up numbered names.
_FIXED_NAMES = frozenset(
    {"def", "run", "facts", "get", "None", "True", "False", "is", "not", "in", "if", "else"}
    | {"or", "return", "near"}
)
_NUMBERED = re.compile(r"[flnNTLH][0-9]+")


def _source_is_safe(source: str) -> bool:
    """True when ``source`` holds no string literal and no name outside the forms made here."""
    return is_safe(source, _FIXED_NAMES, _NUMBERED)


# A path from a rule's root to one occurrence of a leaf: the node variables (all/any) on it.
_Path = tuple[int, ...]


class _Writer:
    """Writes the function body: leaves first, then each node after the nodes under it."""

    def __init__(self, leaves: Sequence[Leaf]) -> None:
        self.lines: list[str] = []
        self.namespace: dict[str, object] = {"near": near}
        self.nodes: dict[int, str] = {}
        """Variable of each node written, by the node's identity (blocks are shared objects)."""
        self.node_count = 0
        self._write_leaves(leaves)

    def _write_leaves(self, leaves: Sequence[Leaf]) -> None:
        fetched: dict[str, str] = {}
        for index, leaf in enumerate(leaves):
            name, target = f"N{index}", f"l{index}"
            self.namespace[name] = leaf.fact
            threshold = leaf.threshold
            if leaf.operator is Operator.PRESENT:
                self.namespace[f"T{index}"] = threshold
                self.lines.append(f"{target} = ({name} in facts) == T{index}")
                continue
            value = fetched.get(leaf.fact)
            if value is None:
                value = fetched[leaf.fact] = f"f{len(fetched)}"
                self.lines.append(f"{value} = get({name})")
            operator = leaf.operator
            if operator in _COMPARE:
                self.namespace[f"T{index}"] = threshold
                test = f"{value} {_COMPARE[operator]} T{index}"
            elif operator is Operator.EQ:
                self.namespace[f"T{index}"] = float(threshold)  # type: ignore[arg-type]
                test = f"near({value}, T{index})"
            elif operator is Operator.BETWEEN:
                low, high = threshold  # type: ignore[misc]
                self.namespace[f"L{index}"], self.namespace[f"H{index}"] = low, high
                test = f"L{index} <= {value} <= H{index}"
            elif operator is Operator.IS:
                self.namespace[f"T{index}"] = threshold
                test = f"{value} is T{index}"
            else:  # Operator.IN
                self.namespace[f"T{index}"] = frozenset(threshold)  # type: ignore[arg-type]
                test = f"{value} in T{index}"
            self.lines.append(f"{target} = None if {value} is None else {test}")

    def node(self, node: CompiledCondition) -> str:
        """The variable holding ``node``'s state, writing it (and its parts) when new."""
        if node.leaf is not None:  # a leaf, or a block of one leaf: read straight
            return f"l{node.leaf}"
        written = self.nodes.get(id(node))
        if written is not None:
            return written
        if node.kind == "ref":  # a block of several leaves: its condition, written once
            variable = self.node(node.parts[0])
            self.nodes[id(node)] = variable
            return variable
        parts = [self.node(part) for part in node.parts]
        variable = f"n{self.node_count}"
        self.node_count += 1
        self.lines.append(f"{variable} = {_expression(node.kind, parts)}")
        self.nodes[id(node)] = variable
        return variable

    def paths(self, node: CompiledCondition, above: _Path, out: list[tuple[int, _Path]]) -> None:
        """Each leaf occurrence under ``node`` that can keep it undecided, with the all/any
        nodes between (the ``undecided`` of ``compiled``: a part counts only while every node
        above it is unknown; nothing under ``definitely``, which is never unknown, counts)."""
        if node.leaf is not None:
            out.append((node.leaf, above))
        elif node.kind in ("all", "any"):
            inside = (*above, int(self.nodes[id(node)][1:]))
            for part in node.parts:
                self.paths(part, inside, out)
        elif node.kind in ("not", "ref"):
            self.paths(node.parts[0], above, out)


def _expression(kind: str, parts: Sequence[str]) -> str:
    """One node's three-valued state from its parts' (see ``compiled``)."""
    if kind == "not":
        return f"None if {parts[0]} is None else not {parts[0]}"
    if kind == "definitely":
        return f"{parts[0]} is True"
    if kind not in ("all", "any"):  # a condition that failed to compile: always unknown
        return "None"
    decisive, otherwise = ("False", "True") if kind == "all" else ("True", "False")
    if not parts:
        return otherwise
    decided = " or ".join(f"{part} is {decisive}" for part in parts)
    unknown = " or ".join(f"{part} is None" for part in parts)
    return f"{decisive} if {decided} else None if {unknown} else {otherwise}"


def _tuple(names: Iterable[str]) -> str:
    """A tuple display of ``names`` (``()`` when there are none)."""
    return "(" + "".join(f"{name}, " for name in names) + ")"


class RuleProgram:
    """The leaf tests and rule conditions of a rule set as one function (see the module
    docstring), and what it takes to say which missing facts keep a rule undecided."""

    __slots__ = ("_undecided", "run", "source")

    def __init__(self, leaves: Sequence[Leaf], conditions: Sequence[CompiledCondition]) -> None:
        writer = _Writer(leaves)
        roots = [writer.node(condition) for condition in conditions]
        leaf_states = _tuple(f"l{index}" for index in range(len(leaves)))
        node_states = _tuple(f"n{number}" for number in range(writer.node_count))
        body = [
            "get = facts.get",
            *writer.lines,
            f"return {leaf_states}, [{', '.join(roots)}], {node_states}",
        ]
        self.source = "def run(facts):\n" + "".join(f"    {line}\n" for line in body)
        if not _source_is_safe(self.source):  # pragma: no cover - cannot happen, see above
            raise ValueError("the rule program's source holds something it must not")
        self.run: Run = compiled(self.source, writer.namespace, "rule program")
        """``run(facts)``: the leaves' states, the rules' states and the nodes' states."""
        undecided = []
        for condition in conditions:
            found: list[tuple[int, _Path]] = []
            writer.paths(condition, (), found)
            by_leaf: dict[int, list[_Path]] = {}
            for index, path in found:
                by_leaf.setdefault(index, []).append(path)
            undecided.append(
                tuple(
                    (index, leaves[index].fact, tuple(by_leaf[index]))
                    for index in condition.leaves
                    if index in by_leaf
                )
            )
        self._undecided = tuple(undecided)

    def undecided(self, position: int, leaf_states: States, node_states: States) -> tuple[str, ...]:
        """The missing facts that keep rule ``position`` unknown, in written order: a leaf
        counts when it is unknown and every all/any node above one of its occurrences is too
        (``RuleResult.undecided``, from this run's states)."""
        found: dict[str, None] = {}
        for index, fact, paths in self._undecided[position]:
            if leaf_states[index] is not None or fact in found:
                continue
            for path in paths:
                for node in path:
                    if node_states[node] is not None:
                        break
                else:
                    found[fact] = None
                    break
        return tuple(found)
