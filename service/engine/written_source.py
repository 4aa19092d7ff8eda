"""Python functions written at load (the rule program, the derivation steps): the one check
their source must pass and the one way it is compiled.

Such a source is made only of fixed words and names numbered by its writer; every value
(fact names, thresholds, codes, functions) is handed over in the namespace, never written into
the text. ``is_safe`` holds a source to that before it is compiled: no quote, no backslash, no
name outside the writer's fixed words and numbered forms, so no text of a rule or data file
can ever run.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

_NAME = re.compile(r"[A-Za-z_][A-Za-z_0-9]*")


def is_safe(source: str, fixed: frozenset[str], numbered: re.Pattern[str]) -> bool:
    """True when ``source`` holds no string literal and no name but ``fixed`` words and names
    that ``numbered`` matches whole."""
    if "'" in source or '"' in source or "\\" in source:
        return False
    return all(name in fixed or numbered.fullmatch(name) for name in _NAME.findall(source))


def compiled(source: str, namespace: dict[str, Any], label: str) -> Callable[..., Any]:
    """The function ``run`` that ``source`` defines, its names looked up in ``namespace``
    (``label`` names it in tracebacks). The caller has checked the source with ``is_safe``."""
    exec(compile(source, f"<{label}>", "exec"), namespace)
    run: Callable[..., Any] = namespace["run"]
    return run
