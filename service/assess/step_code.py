"""One derived-fact entry's outcome as a small Python function, written once per plan.

Running an entry through the general path (``derivation._outcome``) costs two Python calls,
a keyword-argument dict built and thrown away, and a handful of checks that are fixed once
the entry is known (does it read percentages, does it want the settings, is it a quantity,
does its value go out as a percentage). With about 70 entries a gas, that was most of the
derivation's own time. At plan time each entry is therefore also written out as one function
``run(facts, settings) -> (value, method, problem)`` that reads its facts with direct
look-ups and calls the computation with them as keywords; it gives the same triple as
``_outcome`` (``tests/assess/test_step_code.py`` compares the two on every fixture gas).

Safe by construction, since no text of a data file enters the source: the keyword names are
the computation's own parameter names (read from its signature, Python identifiers by
definition, and checked to be), and every other name is a fixed keyword of this module or a
letter followed by a number made here (``a3``, ``n3``). Fact names, limits and functions are
handed to the function as values in its namespace, never written into the text.
``_source_is_safe`` checks this before the source is compiled (no quote, no name outside
those forms), so an entry that could break it is refused rather than run.
"""

from __future__ import annotations

import keyword
import re
from collections.abc import Callable, Mapping
from typing import Any

from service.engine.written_source import compiled, is_safe
from service.exceptions import PhysiologyError
from service.physiology.units import fraction_from_percent, percent_from_fraction

__all__ = ["Outcome", "Run", "write_step"]

Outcome = tuple[Any, str, "str | None"]
Run = Callable[[Mapping[str, Any], Any], Outcome]

_FIXED_NAMES = frozenset(
    {"def", "run", "facts", "settings", "get", "None", "try", "except", "as", "error", "str"}
    | {"return", "if", "else", "is", "not", "out", "value", "method", "float", "isinstance"}
    | {"problem", "assert", "bool", "PE", "C", "c", "pct", "spct", "spec", "L", "H", "E", "S"}
)
_NUMBERED = re.compile(r"[an][0-9]+")


def _source_is_safe(source: str, keywords: frozenset[str]) -> bool:
    """True when ``source`` holds no string literal and no name outside the forms made here
    and the computation's own parameter names."""
    return is_safe(source, _FIXED_NAMES | keywords, _NUMBERED)


def write_step(
    compute: Callable[..., Any],
    computed: type,
    needed: tuple[str, ...],
    optional: tuple[str, ...],
    percent: frozenset[str],
    wants_settings: bool,
    quantity: bool,
    out_percent: bool,
    low: float,
    high: float,
    problem: Callable[[object], str | None],
) -> Run:
    """``derivation._outcome`` of one entry, for facts that hold all of ``needed`` and none
    of the names the catalogue lacks: the entry's computation reads ``needed`` (looked up) and
    ``optional`` (None when unknown, which is the parameter's default), the names in
    ``percent`` divided by 100 when they are floats, and the settings if it wants them."""
    keywords = frozenset((*needed, *optional))
    for name in keywords:
        if not name.isidentifier() or keyword.iskeyword(name) or name in _FIXED_NAMES:
            raise ValueError(f"{compute.__name__}: parameter {name!r} cannot be written")
    namespace: dict[str, object] = {
        "PE": PhysiologyError,
        "C": computed,
        "c": compute,
        "pct": fraction_from_percent,
        "spct": percent_from_fraction,
        "spec": problem,
        "L": low,
        "H": high,
        "E": "",
        "S": "; not used",
    }
    lines = ["def run(facts, settings):"]
    arguments = []
    for index, name in enumerate((*needed, *optional)):
        namespace[f"n{index}"] = name
        get = f"facts[n{index}]" if index < len(needed) else f"facts.get(n{index})"
        lines.append(f"    a{index} = {get}")
        if name in percent:
            lines.append(f"    if isinstance(a{index}, float):")
            lines.append(f"        a{index} = pct(a{index})")
        arguments.append(f"{name}=a{index}")
    if wants_settings:
        arguments.append("settings=settings")
    lines += [
        "    try:",
        f"        out = c({', '.join(arguments)})",
        "    except PE as error:",
        "        return None, E, str(error)",
        "    if out is None:",
        "        return None, E, None",
        "    if isinstance(out, C):",
        "        value = out.value",
        "        method = out.method",
        "    else:",
        "        value = out",
        "        method = E",
    ]
    if quantity:
        lines += ["    assert not isinstance(value, bool)", "    value = float(value)"]
        if out_percent:
            lines.append("    value = spct(value)")
        lines += ["    if L <= value <= H:", "        return value, method, None"]
    lines += [
        "    problem = spec(value)",
        "    if problem is not None:",
        "        return None, method, problem + S",
        "    return value, method, None",
    ]
    source = "\n".join(lines) + "\n"
    if not _source_is_safe(source, keywords):
        raise ValueError(f"{compute.__name__}: refused to write its step")
    run: Run = compiled(source, namespace, f"derived step {compute.__name__}")
    return run
