"""Compiling validated conditions into closures, once, at load time.

Every distinct leaf of the rule set (a fact, an operator, a resolved threshold and the
parameters it came from) gets one index and one test closure, shared by all rules and
blocks that use it; a block used by ten rules is compiled and tested once. Conditions
become closures over the state vector (see `compiled`), so evaluation never walks
YAML-shaped data.

Semantic checks happen here too, because this is where a leaf meets the catalogue and
the parameters: unknown facts, operators that do not fit the fact's kind, units that
differ from the catalogue unit, unknown parameters or codes, inverted `between` bounds,
thresholds outside the fact's accepted range (usually a number written in another
unit), unknown blocks and cycles between blocks.
"""

import difflib
from collections.abc import Mapping
from dataclasses import dataclass

from service.engine.catalogue import FactCatalogue
from service.engine.compiled import (
    BROKEN,
    CompiledCondition,
    all_of,
    any_of,
    definitely_of,
    leaf_node,
    named,
    not_of,
)
from service.engine.errors import RuleProblem
from service.engine.facts import FactKind, FactSpec
from service.engine.leaves import Leaf, Threshold, leaf_test
from service.engine.logic import COMPARISONS, Operator
from service.engine.parameters import MANIFEST, Parameter
from service.engine.schema import (
    AllNode,
    AnyNode,
    Condition,
    DefinitelyNode,
    LeafNode,
    NotNode,
    ParameterRef,
    RefNode,
    ThresholdValue,
)

__all__ = ["ConditionCompiler", "Location"]

_OPERATORS_BY_KIND: dict[FactKind, frozenset[Operator]] = {
    FactKind.QUANTITY: COMPARISONS | {Operator.PRESENT},
    FactKind.BOOLEAN: frozenset({Operator.IS, Operator.PRESENT}),
    FactKind.CODE: frozenset({Operator.IN, Operator.PRESENT}),
}


@dataclass(frozen=True, slots=True)
class Location:
    """Where in the rule set a condition was written, for problem reports."""

    file: str
    rule_id: str | None
    field: str

    def at(self, suffix: str) -> "Location":
        """The location of a child field."""
        return Location(self.file, self.rule_id, f"{self.field}{suffix}")


class _Cycle:
    """Marker returned when a block reference closes a cycle (already reported)."""


class ConditionCompiler:
    """Compiles conditions of one rule set, sharing leaves and blocks between rules."""

    def __init__(
        self,
        catalogue: FactCatalogue,
        parameters: Mapping[str, Parameter],
        blocks: Mapping[str, Condition],
    ) -> None:
        self.catalogue = catalogue
        self.parameters = parameters
        self.blocks = blocks
        self.leaves: list[Leaf] = []
        self.problems: list[RuleProblem] = []
        self._leaf_index: dict[tuple[object, ...], int] = {}
        self._compiled_blocks: dict[str, CompiledCondition] = {}
        self._references: dict[str, CompiledCondition] = {}
        self._block_stack: list[str] = []

    def _problem(self, where: Location, message: str, hint: str) -> None:
        self.problems.append(RuleProblem(where.file, where.rule_id, where.field, message, hint))

    def compile(self, node: Condition, where: Location) -> CompiledCondition:
        """Compile one condition written at `where`."""
        if isinstance(node, AllNode):
            return all_of([self.compile(p, where.at(f".all[{i}]")) for i, p in enumerate(node.all)])
        if isinstance(node, AnyNode):
            return any_of(
                [self.compile(p, where.at(f".any[{i}]")) for i, p in enumerate(node.any_)]
            )
        if isinstance(node, NotNode):
            return not_of(self.compile(node.not_, where.at(".not")))
        if isinstance(node, DefinitelyNode):
            return definitely_of(self.compile(node.definitely, where.at(".definitely")))
        if isinstance(node, RefNode):
            return self._reference(node.ref, where.at(".ref"))
        return self._leaf(node, where)

    def compile_blocks(self) -> None:
        """Compile every block, used or not, so that broken blocks are always reported."""
        for name in self.blocks:
            self.block(name)

    def block(self, name: str) -> CompiledCondition | _Cycle | None:
        """The compiled block `name`; None if undefined; a `_Cycle` if it depends on itself."""
        if name in self._compiled_blocks:
            return self._compiled_blocks[name]
        node = self.blocks.get(name)
        if node is None:
            return None
        if name in self._block_stack:
            cycle = [*self._block_stack[self._block_stack.index(name) :], name]
            self._problem(
                Location(MANIFEST, None, f"blocks.{cycle[0]}"),
                "blocks refer to each other in a cycle: " + " -> ".join(cycle),
                "remove one of these refs so that no block depends on itself",
            )
            return _Cycle()
        self._block_stack.append(name)
        compiled = self.compile(node, Location(MANIFEST, None, f"blocks.{name}"))
        self._block_stack.pop()
        self._compiled_blocks[name] = compiled
        return compiled

    def _reference(self, name: str, where: Location) -> CompiledCondition:
        compiled = self.block(name)
        if compiled is None:
            close = difflib.get_close_matches(name, list(self.blocks), n=3)
            suggestion = f" (did you mean {', '.join(close)}?)" if close else ""
            self._problem(
                where,
                f"unknown block {name}{suggestion}",
                "define the block under blocks in ruleset.yaml or correct the name",
            )
            return BROKEN
        if isinstance(compiled, _Cycle):
            return BROKEN
        reference = self._references.get(name)
        if reference is None:  # one node per block, shared by every rule that refers to it
            reference = self._references[name] = named(name, compiled)
        return reference

    def _resolve(
        self, value: ThresholdValue, spec: FactSpec, where: Location
    ) -> tuple[float, str | None] | None:
        """A threshold as (number, parameter name); None after reporting a problem."""
        if not isinstance(value, ParameterRef):
            number, name = value, None
        else:
            parameter = self.parameters.get(value.param)
            if parameter is None:
                known = ", ".join(sorted(self.parameters)) or "none"
                self._problem(
                    where.at(".param"),
                    f"unknown parameter {value.param}",
                    f"define it under parameters in ruleset.yaml; known: {known}",
                )
                return None
            if parameter.unit != spec.unit:
                self._problem(
                    where.at(".param"),
                    f"parameter {value.param} is in {parameter.unit} "
                    f"but fact {spec.name} is in {spec.unit}",
                    f"compare {spec.name} with a parameter in {spec.unit}",
                )
                return None
            number, name = parameter.value, parameter.name
        assert spec.minimum is not None and spec.maximum is not None  # quantity facts
        if not spec.minimum <= number <= spec.maximum:
            self._problem(
                where,
                f"threshold {number:g} is outside the accepted range of {spec.name} "
                f"({spec.minimum:g} to {spec.maximum:g} {spec.unit})",
                f"write the threshold in {spec.unit}; it may be in another unit",
            )
            return None
        return float(number), name

    def _leaf(self, node: LeafNode, where: Location) -> CompiledCondition:
        spec = self.catalogue.get(node.fact)
        if spec is None:
            close = difflib.get_close_matches(node.fact, list(self.catalogue), n=3)
            suggestion = f" (did you mean {', '.join(close)}?)" if close else ""
            self._problem(
                where.at(".fact"),
                f"unknown fact {node.fact}{suggestion}",
                "use a fact from the catalogue (rules/README.md, 'The fact catalogue')",
            )
            return BROKEN
        operator = node.operator
        usable = _OPERATORS_BY_KIND[spec.kind]
        if operator not in usable:
            self._problem(
                where.at(f".{operator}"),
                f"operator {operator} does not apply to {spec.kind} fact {spec.name}",
                "use one of " + ", ".join(sorted(usable)),
            )
            return BROKEN
        if not self._unit_ok(node, spec, operator, where):
            return BROKEN
        resolved = self._threshold(node, spec, operator, where.at(f".{operator}"))
        if resolved is None:
            return BROKEN
        threshold, parameters = resolved
        key = (spec.name, operator, threshold, parameters)
        index = self._leaf_index.get(key)
        if index is None:
            index = len(self.leaves)
            self._leaf_index[key] = index
            unit = spec.unit if spec.kind is FactKind.QUANTITY else None
            test = leaf_test(spec.name, operator, threshold)
            self.leaves.append(Leaf(spec.name, operator, threshold, parameters, unit, test))
        return leaf_node(index)

    def _unit_ok(self, node: LeafNode, spec: FactSpec, operator: Operator, where: Location) -> bool:
        if spec.kind is not FactKind.QUANTITY:
            if node.unit is None:
                return True
            self._problem(
                where.at(".unit"), f"{spec.kind} fact {spec.name} has no unit", "remove unit"
            )
            return False
        if node.unit is None:
            if operator is Operator.PRESENT:
                return True
            self._problem(
                where.at(".unit"),
                f"comparison on {spec.name} has no unit",
                f'add unit: "{spec.unit}" (thresholds are read in the catalogue unit)',
            )
            return False
        if node.unit != spec.unit:
            self._problem(
                where.at(".unit"),
                f"unit {node.unit} differs from the catalogue unit {spec.unit} of {spec.name}",
                f'convert the threshold to {spec.unit} and write unit: "{spec.unit}"',
            )
            return False
        return True

    def _threshold(
        self, node: LeafNode, spec: FactSpec, operator: Operator, where: Location
    ) -> tuple[Threshold, tuple[str, ...]] | None:
        argument = node.argument(operator)
        if operator in (Operator.PRESENT, Operator.IS):
            assert isinstance(argument, bool)
            return argument, ()
        if operator is Operator.IN:
            assert isinstance(argument, tuple)
            unknown = [code for code in argument if code not in spec.allowed]
            if unknown:
                self._problem(
                    where,
                    f"unknown code(s) {', '.join(unknown)} for {spec.name}",
                    "use codes from: " + ", ".join(sorted(spec.allowed)),
                )
                return None
            return tuple(sorted(set(argument))), ()
        if operator is Operator.BETWEEN:
            assert isinstance(argument, tuple)
            low = self._resolve(argument[0], spec, where.at("[0]"))
            high = self._resolve(argument[1], spec, where.at("[1]"))
            if low is None or high is None:
                return None
            if low[0] > high[0]:
                self._problem(
                    where,
                    f"between bounds are inverted ({low[0]:g} > {high[0]:g})",
                    "write between: [low, high]",
                )
                return None
            names = tuple(name for _, name in (low, high) if name is not None)
            return (low[0], high[0]), names
        single = self._resolve(argument, spec, where)  # type: ignore[arg-type]
        if single is None:
            return None
        return single[0], (single[1],) if single[1] is not None else ()
