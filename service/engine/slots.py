"""Quicker construction of the frozen result classes an evaluation builds many of.

A frozen dataclass's generated ``__init__`` sets each field through
``object.__setattr__(self, name, value)``; the result classes of an evaluation (rule results,
mechanism assessments, findings, data requests, the verdict) are built by the dozen per call,
and that costs about twice what it must. Those classes keep ``@dataclass(frozen=True,
slots=True)`` for everything else (eq, hash, repr, immutability) and write their own
``__init__`` with the slot descriptors' ``__set__``, which do the same store without the
attribute lookup. ``tests/engine/test_slots.py`` checks that each such ``__init__`` sets
every field, with every default.
"""

from collections.abc import Callable

__all__ = ["slot_setters"]


def slot_setters(cls: type, *names: str) -> tuple[Callable[[object, object], None], ...]:
    """The ``__set__`` of each named slot of `cls`, in the order given."""
    return tuple(cls.__dict__[name].__set__ for name in names)
