"""How much one input may make the service read and say: its entries, and the issues listed.

An answer used to grow with its input without bound: a Bundle of 100,000 entries the service
does not read was answered with 100,004 issues (47 MB, from 3.7 MB). Now the adapters refuse
an input with more entries than ``max_entries`` (``TooLargeError``, HTTP 413), and
``condense`` shortens what they report: the same issue (same code, severity and message) is
listed ``REPEATS`` times and then counted in one more issue, and no more than ``max_issues``
are listed in all, the most severe first, the rest counted in a last one. Nothing is dropped
silently: every omission is said, with where the first omitted one was. The verdict is not
affected: the issues kept include the first of every kind, and so every error.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Sequence
from dataclasses import dataclass
from typing import TypeVar

from service.intake.model import IntakeIssue

REPEATS = 3  # the same issue is listed this many times, then counted

T = TypeVar("T")


@dataclass(frozen=True, slots=True)
class ReadLimits:
    """Budgets of one input (settings ``OXYRULE_MAX_BUNDLE_ENTRIES``, ``OXYRULE_MAX_ISSUES``)."""

    max_entries: int = 1000
    max_issues: int = 100

    def __post_init__(self) -> None:
        if self.max_entries < 1 or self.max_issues < REPEATS + 2:
            raise ValueError(f"max_entries >= 1 and max_issues >= {REPEATS + 2}")


DEFAULT_READ_LIMITS = ReadLimits()

_RANK = {"fatal": 0, "error": 1, "warning": 2, "information": 3}


def condense(
    items: Sequence[T],
    *,
    kind: Callable[[T], Hashable],
    severity: Callable[[T], str],
    more: Callable[[T, int, bool], T],
    limit: int,
) -> list[T]:
    """``items`` as listed: see the module docstring.

    Args:
        items: issues (or problems) in the order they were met.
        kind: what makes two of them the same (code, severity, message).
        severity: an item's severity (``error``, ``warning``, ``information``; ``fatal``).
        more: the item that stands for ``n`` omitted ones, built from the first of them (it
            keeps that one's code, severity and location); the flag says whether they are all
            of its kind (True) or the least severe of any kind, over ``limit`` (False).
        limit: the most items returned (at least ``REPEATS + 2``).
    """
    seen: dict[Hashable, int] = {}
    listed: list[tuple[T, int, T]] = []  # (item, how many it stands for, the first of them)
    omitted: dict[Hashable, tuple[T, int]] = {}
    for item in items:
        key = kind(item)
        count = seen[key] = seen.get(key, 0) + 1
        if count <= REPEATS:
            listed.append((item, 1, item))
        else:
            first, n = omitted.get(key, (item, 0))
            omitted[key] = (first, n + 1)
    listed += [(more(first, n, True), n, first) for first, n in omitted.values()]
    if len(listed) <= limit:
        return [item for item, _, _ in listed]
    # Over the limit: the most severe first (stable, so in reading order within a severity).
    order = sorted(range(len(listed)), key=lambda i: _RANK.get(severity(listed[i][0]), 4))
    chosen = sorted(order[: limit - 1])
    rest = [listed[i] for i in order[limit - 1 :]]
    count = sum(n for _, n, _ in rest)
    return [listed[i][0] for i in chosen] + [more(rest[0][2], count, False)]


def condensed_issues(issues: Sequence[IntakeIssue], limit: int) -> list[IntakeIssue]:
    """Intake issues as reported (``condense``), in both adapters alike."""
    return condense(
        issues,
        kind=lambda i: (i.code, i.severity, i.message),
        severity=lambda i: i.severity.value,
        more=_more_issues,
        limit=limit,
    )


def _more_issues(first: IntakeIssue, count: int, same_kind: bool) -> IntakeIssue:
    if same_kind:
        message = f"and {count} more like the one above, not listed: {first.message}"
    else:
        message = f"and {count} more issues not listed (setting OXYRULE_MAX_ISSUES)"
    return IntakeIssue(first.code, first.severity, message, first.expression)
