"""A whole derived-fact table as one Python function, written once per plan.

``derivation._compute`` runs a table entry by entry: is every needed fact known, the entry's
outcome (its written function, ``step_code``), the union of the observations behind what it
read, the fact filed. Done in a loop, each entry paid a subset test on the known facts, a call
returning a tuple, a walk over its reads through the mapping of sources and a handful of
attribute look-ups, all of them fixed once the table is known. Here the loop is unrolled at
plan time: every fact is a local variable (its value, or the marker ``M`` while unknown) with
another for its observations, each entry's needed facts are tested as locals, its computation
is called with them as keywords and its union is one tuple sum of known locals. The function
fills ``facts``, ``sources``, the filed records and the problems exactly as the loop does
(``tests/assess/test_step_code.py`` compares the two on every fixture gas, with equal but
distinct observations, facts pushed out of range, dropped and zeroed).

Safe by construction, as ``step_code``: no text of a data file enters the source. The
keyword names are the computations' own parameter names (checked to be identifiers); every
other name is a fixed word of this module or a letter followed by a number made here
(``v3``, ``s3``, ``c7``); fact names, units, limits, texts and functions are values in the
function's namespace. ``written_source.is_safe`` checks the source before it is compiled.
"""

from __future__ import annotations

import keyword
import re
from collections.abc import Callable, Sequence
from typing import Any, Protocol

from service.engine.written_source import compiled, is_safe
from service.exceptions import PhysiologyError
from service.physiology.units import fraction_from_percent, percent_from_fraction

__all__ = ["TableRun", "TableStep", "unique_sources", "write_table"]

TableRun = Callable[[dict[str, Any], dict[str, Any], Any, dict[str, Any], list[str]], None]


class TableStep(Protocol):
    """What the writer reads of one planned entry (``derivation._Step``)."""

    @property
    def name(self) -> str: ...
    @property
    def reads(self) -> tuple[str, ...]: ...
    @property
    def percent_reads(self) -> tuple[str, ...]: ...
    @property
    def quantity(self) -> bool: ...
    @property
    def out_percent(self) -> bool: ...
    @property
    def compute(self) -> Callable[..., Any]: ...
    @property
    def wants_settings(self) -> bool: ...
    @property
    def result(self) -> str | None: ...
    @property
    def low(self) -> float: ...
    @property
    def high(self) -> float: ...
    @property
    def needed_order(self) -> tuple[str, ...]: ...
    @property
    def unit(self) -> str | None: ...
    @property
    def problem(self) -> Callable[[object], str | None]: ...
    @property
    def unknown(self) -> frozenset[str]: ...


_FIXED_NAMES = frozenset(
    {"def", "run", "facts", "sources", "settings", "filed", "problems", "append", "g", "h"}
    | {"M", "E", "E0", "S", "C", "D", "PE", "pct", "spct", "dd", "u", "out", "value"}
    | {"method", "problem", "error", "try", "except", "as", "if", "else", "elif", "is"}
    | {"not", "None", "isinstance", "float", "bool", "str", "assert", "len", "and", "get"}
    | {"return", "K", "P", "isdisjoint"}
)
_NUMBERED = re.compile(r"[vsancqpLHUr][0-9]+")


def _not_in_catalogue(name: str) -> None:
    """Refuse a known fact that an entry reads and the catalogue lacks, as a look-up would."""
    raise KeyError(name)


def unique_sources(found: tuple[Any, ...]) -> tuple[Any, ...]:
    """``found`` with each observation once, the first of equal ones kept (as
    ``tuple(dict.fromkeys(found))``); for two or more. Two need one comparison only, and
    dict.fromkeys hashes every one."""
    if len(found) == 2:
        return found if found[0] != found[1] else found[:1]
    return tuple(dict.fromkeys(found))


class _Missing:
    """The marker of a fact not known (a fact may be known as None, which is not this)."""

    __slots__ = ()


def write_table(steps: Sequence[TableStep], computed: type, derived: type) -> TableRun:
    """The function ``run(facts, sources, settings, filed, problems)`` that computes every
    entry of ``steps`` whose needed facts are known, in order, as ``derivation._compute``
    does: into ``facts`` and ``sources``, the records (``derived``) filed by result name
    into ``filed`` and each problem (``fact: why``) appended to ``problems``. Every fact an
    entry reads that the catalogue lacks (``unknown``) is an error (``KeyError``) when it is
    known and the entry runs."""
    index: dict[str, int] = {}
    for step in steps:
        for name in (*step.reads, step.name):
            index.setdefault(name, len(index))
    namespace: dict[str, object] = {
        "M": _Missing(),
        "E": "",
        "E0": (),
        "S": "; not used",
        "C": computed,
        "D": derived,
        "PE": PhysiologyError,
        "pct": fraction_from_percent,
        "spct": percent_from_fraction,
        "dd": unique_sources,
        "K": _not_in_catalogue,
    }
    keywords: set[str] = set()
    read = {name for step in steps for name in step.reads}
    lines = ["def run(facts, sources, settings, filed, problems):", "    g = facts.get"]
    lines.append("    h = sources.get")
    # A fact the table sets is usually not known before it (a scenario derived in full may
    # bring one): when none is, each starts unknown without a look-up. Its observations are
    # read only once it is known, so only a fact known before needs them looked up.
    set_here = {step.name for step in steps}
    namespace["P"] = frozenset(set_here)
    unset, looked_up = ["    if P.isdisjoint(facts):"], ["    else:"]
    for name, i in index.items():
        namespace[f"n{i}"] = name
        if name in set_here:
            unset.append(f"        v{i} = M")
            looked_up.append(f"        v{i} = g(n{i}, M)")
            if name in read:
                looked_up.append(f"        s{i} = h(n{i}, E0)")
        else:
            lines.append(f"    v{i} = g(n{i}, M)")
            if name in read:
                lines.append(f"    s{i} = h(n{i}, E0)")
    if set_here:
        lines += unset + looked_up
    for j, step in enumerate(steps):
        for name in step.reads:
            if not name.isidentifier() or keyword.iskeyword(name) or name in _FIXED_NAMES:
                raise ValueError(f"{step.compute.__name__}: parameter {name!r} cannot be written")
            keywords.add(name)
        namespace.update(
            {
                f"c{j}": step.compute,
                f"q{j}": f"{step.name}: ",
                f"p{j}": step.problem,
                f"L{j}": step.low,
                f"H{j}": step.high,
                f"U{j}": step.unit,
                f"r{j}": step.result,
            }
        )
        lines += _step_lines(j, step, index)
    lines.append("    return None")
    source = "\n".join(lines) + "\n"
    if not is_safe(source, _FIXED_NAMES | keywords, _NUMBERED):
        raise ValueError("refused to write the derived-fact table")
    run: TableRun = compiled(source, namespace, "derived table")
    return run


def _step_lines(j: int, step: TableStep, index: dict[str, int]) -> list[str]:
    """The lines of entry ``j``: run when its needed facts are known."""
    needed = step.needed_order
    k = index[step.name]
    lines: list[str] = []
    pad = "    "
    if needed:
        known = " and ".join(f"v{index[name]} is not M" for name in needed)
        lines.append(f"    if {known}:")
        pad = "        "
    for name in step.reads:
        if name in step.unknown:  # the first one known, in the order read, is named
            lines.append(f"{pad}if v{index[name]} is not M:")
            lines.append(f"{pad}    K(n{index[name]})")
    arguments = []
    parts = []
    for m, name in enumerate(step.reads):
        i = index[name]
        if name in needed:
            lines.append(f"{pad}a{m} = v{i}")
            parts.append(f"s{i}")
        else:
            lines.append(f"{pad}a{m} = v{i} if v{i} is not M else None")
            parts.append(f"(s{i} if v{i} is not M else E0)")
        if name in step.percent_reads:
            lines.append(f"{pad}if isinstance(a{m}, float):")
            lines.append(f"{pad}    a{m} = pct(a{m})")
        arguments.append(f"{name}=a{m}")
    if step.wants_settings:
        arguments.append("settings=settings")
    lines += [
        f"{pad}try:",
        f"{pad}    out = c{j}({', '.join(arguments)})",
        f"{pad}except PE as error:",
        f"{pad}    problems.append(q{j} + str(error))",
        f"{pad}    out = None",
        f"{pad}if out is not None:",
        f"{pad}    if isinstance(out, C):",
        f"{pad}        value = out.value",
        f"{pad}        method = out.method",
        f"{pad}    else:",
        f"{pad}        value = out",
        f"{pad}        method = E",
    ]
    inner = pad + "    "
    if step.quantity:
        lines += [f"{inner}assert not isinstance(value, bool)", f"{inner}value = float(value)"]
        if step.out_percent:
            lines.append(f"{inner}value = spct(value)")
        lines += [
            f"{inner}if L{j} <= value <= H{j}:",
            f"{inner}    problem = None",
            f"{inner}else:",
            f"{inner}    problem = p{j}(value)",
            f"{inner}if problem is not None:",
            f"{inner}    problems.append(q{j} + problem + S)",
            f"{inner}else:",
        ]
    else:
        # A flag's outcome None (a Computed holding None) is not filed, as in the loop.
        lines += [
            f"{inner}problem = p{j}(value)",
            f"{inner}if problem is not None:",
            f"{inner}    problems.append(q{j} + problem + S)",
            f"{inner}elif value is not None:",
        ]
    body = inner + "    "
    union = " + ".join(parts) if parts else "E0"
    lines += [
        f"{body}u = {union}",
        f"{body}if len(u) > 1:",
        f"{body}    u = dd(u)",
        f"{body}v{k} = value",
        f"{body}s{k} = u",
        f"{body}facts[n{k}] = value",
        f"{body}sources[n{k}] = u",
    ]
    if step.result is not None:  # only quantities are filed (see DerivedTable.flag)
        lines.append(f"{body}filed[r{j}] = D(value, U{j}, method, u)")
    return lines
