"""A JSON body as parsed data, refusing an object that has the same key twice.

JSON parsers keep the last of two equal keys without a word (RFC 8259 §4 leaves it to them),
so ``{"value": 58, "value": 30}`` would be assessed as a PaO2 of 30: a silent guess at what the
sender meant. The service refuses it instead, located (``BundleError``, HTTP 422).

Parsing stays with orjson (fast). Duplicates are then looked for cheaply, in C, by counting
colons: in the text as sent, every key is followed by one, and a colon elsewhere can only be a
character of a string (JSON writes none between tokens otherwise). orjson's compact
serialisation of what it parsed writes every colon of every string as a colon too (it never escapes
one), but only one key per distinct key of an object.
So when the text holds no escaped colon (``\\u003a``), the two counts agree exactly when no key
was dropped: a duplicate drops a key, and its first value's strings, so the parsed data has
fewer colons. Whether the text holds a backslash at all is one ``memchr``; only then is it
searched for an escape in ``\\u0030``–``\\u003f``. When the counts differ, or there may be an
escaped colon, the text is parsed again with the standard library, which reports every object's
keys as sent, and the duplicate, if there is one, is located. Counting single colons is sound
where counting ``":`` was not (``{"a": "x", "a": "\\u0022:"}`` held as many ``":`` before as after
parsing), and it takes half the time. A body that orjson would itself write (compact, as most
libraries send it) is recognised by comparing the two texts and needs no count. On the 6 kB
compact demo Bundle the check costs about a third of the parse (4 µs against 14 µs, timed on a
busy machine; 15 µs when it counted ``":``); written with spaces and new lines (8 kB), about
0.85 of it (12 µs; 17 µs before).
"""

from __future__ import annotations

import json
import re
from typing import Any

import orjson

from service.fhir.outcome import BundleError, Problem

# A key is named in a path only when it has the shape of a FHIR element name: keys are the
# sender's text too, and an error never quotes anything else.
_ELEMENT = re.compile(r"[a-z][A-Za-z0-9_]{0,63}|resourceType")


def loads(raw: bytes | bytearray | str, root: str = "Bundle") -> Any:
    """The parsed JSON.

    Raises:
        orjson.JSONDecodeError: not JSON.
        BundleError: an object has a key twice; the problem names where (from ``root``).
    """
    data = orjson.loads(raw)
    if not _may_repeat(raw, orjson.dumps(data)):
        return data
    where = _duplicate(raw, root)
    if where is not None:
        message = (
            "an object has the same key twice (JSON keys must be unique; the service does "
            "not choose between the values)"
        )
        raise BundleError([Problem("error", "structure", message, where)])
    return data


def _may_repeat(raw: bytes | bytearray | str, written: bytes) -> bool:
    """Whether the text as sent may have a key twice: False only when it certainly has not
    (``written`` is orjson's serialisation of what it parsed; see the module's docstring)."""
    if isinstance(raw, str):
        if "\\" in raw and "\\u003" in raw:
            return True
        return written.count(b":") != raw.count(":")
    if written == raw:
        return False
    if b"\\" in raw and b"\\u003" in raw:
        return True
    return written.count(b":") != raw.count(b":")


def _duplicate(raw: bytes | bytearray | str, root: str) -> str | None:
    """Where the first object with a repeated key is (a FHIRPath-like path), or None."""
    found: list[tuple[int, str]] = []

    def pairs(items: list[tuple[str, Any]]) -> dict[str, Any]:
        mapping = dict(items)
        if len(mapping) != len(items) and not found:
            seen: set[str] = set()
            for key, _ in items:
                if key in seen:
                    found.append((id(mapping), key))
                    break
                seen.add(key)
        return mapping

    data = json.loads(raw, object_pairs_hook=pairs)
    if not found:
        return None
    target, key = found[0]
    path, whole = _path_to(data, target, root)
    return f"{path}.{key}" if whole and _ELEMENT.fullmatch(key) else path


def _path_to(data: Any, target: int, root: str) -> tuple[str, bool]:
    """The path of the object whose ``id`` is ``target`` (element names and indexes, cut where
    a key is not element-shaped) and whether it is whole."""
    stack: list[tuple[Any, str, bool]] = [(data, root, True)]
    while stack:
        item, path, whole = stack.pop()
        if id(item) == target:
            return path, whole
        if type(item) is dict:
            for key, value in item.items():
                keep = whole and _ELEMENT.fullmatch(key) is not None
                stack.append((value, f"{path}.{key}" if keep else path, keep))
        elif type(item) is list:
            for index, value in enumerate(item):
                stack.append((value, f"{path}[{index}]" if whole else path, whole))
    return root, False
