"""Compiled conditions: three-valued combinators as closures over the state vector.

Evaluation first runs every leaf test once into a *state vector* (True, False or None
per leaf index); a compiled condition then only reads that vector. Each node also
carries `undecided`: for a node whose truth is unknown, the leaves whose missing facts
keep it undecided. Parts that are already true or false do not count, so "data
requested" never asks for a fact that could not change the answer.
"""

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, replace
from operator import itemgetter

from service.engine.logic import TruthValue

__all__ = [
    "BROKEN",
    "BlockStates",
    "CompiledCondition",
    "StateVector",
    "all_of",
    "any_of",
    "definitely_of",
    "leaf_node",
    "named",
    "not_of",
]

StateVector = Sequence[TruthValue]


class BlockStates(tuple[TruthValue, ...]):
    """A state vector that keeps, for the one evaluation it belongs to, the truth and the
    undecided leaves of each named block once they are first read: a block that ninety rules
    refer to is worked out once, not ninety times. Both are functions of the vector alone, so
    keeping them changes no answer; any other vector (a plain tuple) is read as before."""

    truths: dict[object, TruthValue]
    undecided: dict[object, frozenset[int]]

    def __new__(cls, states: Iterable[TruthValue]) -> "BlockStates":
        made = super().__new__(cls, states)
        made.truths = {}
        made.undecided = {}
        return made


@dataclass(frozen=True, slots=True)
class CompiledCondition:
    """A condition as closures over the state vector."""

    truth: Callable[[StateVector], TruthValue]
    undecided: Callable[[StateVector], frozenset[int]]
    leaves: tuple[int, ...]
    """Indices of every leaf under this node, in order of first appearance."""
    leaf: int | None = None
    """The index when the node is a single leaf (lets parents read the vector directly)."""
    kind: str = "leaf"
    """What the node is, for traces: all, any, not, definitely, leaf, or ref (a named block)."""
    parts: tuple["CompiledCondition", ...] = ()
    """The nodes under this one, as written (a ref has its block's condition)."""
    name: str | None = None
    """The block's name, for a ref."""


def _never_decided(states: StateVector) -> frozenset[int]:
    return frozenset()


def _always_unknown(states: StateVector) -> TruthValue:
    return None


BROKEN = CompiledCondition(_always_unknown, _never_decided, (), kind="broken")
"""Stand-in for a condition that failed to compile; the load fails anyway."""


def _undecided_under(
    parts: Sequence[CompiledCondition], truth: Callable[[StateVector], TruthValue]
) -> Callable[[StateVector], frozenset[int]]:
    def undecided(states: StateVector) -> frozenset[int]:
        if truth(states) is not None:
            return frozenset()
        return frozenset().union(
            *(part.undecided(states) for part in parts if part.truth(states) is None)
        )

    return undecided


def _ordered_leaves(parts: Sequence[CompiledCondition]) -> tuple[int, ...]:
    return tuple(dict.fromkeys(index for part in parts for index in part.leaves))


def all_of(parts: Sequence[CompiledCondition]) -> CompiledCondition:
    """`all`: false if any part is false, else unknown if any is unknown, else true."""
    direct = tuple(part.leaf for part in parts if part.leaf is not None)
    nested = tuple(part.truth for part in parts if part.leaf is None)

    def truth(states: StateVector) -> TruthValue:
        result: TruthValue = True
        for index in direct:
            value = states[index]
            if value is False:
                return False
            if value is None:
                result = None
        for part in nested:
            value = part(states)
            if value is False:
                return False
            if value is None:
                result = None
        return result

    return CompiledCondition(
        truth,
        _undecided_under(parts, truth),
        _ordered_leaves(parts),
        kind="all",
        parts=tuple(parts),
    )


def any_of(parts: Sequence[CompiledCondition]) -> CompiledCondition:
    """`any`: true if any part is true, else unknown if any is unknown, else false."""
    direct = tuple(part.leaf for part in parts if part.leaf is not None)
    nested = tuple(part.truth for part in parts if part.leaf is None)

    def truth(states: StateVector) -> TruthValue:
        result: TruthValue = False
        for index in direct:
            value = states[index]
            if value is True:
                return True
            if value is None:
                result = None
        for part in nested:
            value = part(states)
            if value is True:
                return True
            if value is None:
                result = None
        return result

    return CompiledCondition(
        truth,
        _undecided_under(parts, truth),
        _ordered_leaves(parts),
        kind="any",
        parts=tuple(parts),
    )


def not_of(part: CompiledCondition) -> CompiledCondition:
    """`not`: swaps true and false, keeps unknown."""
    inner = part.truth

    def truth(states: StateVector) -> TruthValue:
        value = inner(states)
        return None if value is None else not value

    return CompiledCondition(truth, part.undecided, part.leaves, kind="not", parts=(part,))


def definitely_of(part: CompiledCondition) -> CompiledCondition:
    """`definitely`: true when the part is true, false when it is false or unknown."""
    inner = part.truth

    def truth(states: StateVector) -> TruthValue:
        return inner(states) is True

    return CompiledCondition(truth, _never_decided, part.leaves, kind="definitely", parts=(part,))


def named(name: str, block: CompiledCondition) -> CompiledCondition:
    """A reference to the block ``name``, marked for traces: a single-leaf block is still read
    straight from the vector; any other is the block's own closures, their answers kept in a
    ``BlockStates`` vector for the rest of its evaluation."""
    if block.leaf is not None:
        return replace(block, kind="ref", parts=(block,), name=name)
    block_truth, block_undecided = block.truth, block.undecided
    key = object()  # this reference's own entry in a vector's kept answers

    def truth(states: StateVector) -> TruthValue:
        if not isinstance(states, BlockStates):
            return block_truth(states)
        kept = states.truths
        if key in kept:
            return kept[key]
        value = kept[key] = block_truth(states)
        return value

    def undecided(states: StateVector) -> frozenset[int]:
        if not isinstance(states, BlockStates):
            return block_undecided(states)
        kept = states.undecided
        found = kept.get(key)
        if found is None:
            found = kept[key] = block_undecided(states)
        return found

    return replace(block, truth=truth, undecided=undecided, kind="ref", parts=(block,), name=name)


def leaf_node(index: int) -> CompiledCondition:
    """A node that reads one leaf's state."""
    read: Callable[[StateVector], TruthValue] = itemgetter(index)

    def undecided(states: StateVector) -> frozenset[int]:
        return frozenset((index,)) if states[index] is None else frozenset()

    return CompiledCondition(read, undecided, (index,), index)
