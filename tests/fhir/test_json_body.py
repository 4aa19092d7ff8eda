"""The duplicate-key refusal of a JSON body, checked against the standard library.

The reference is Python's own ``json`` module with an ``object_pairs_hook``, which hands over
every object's keys as written (Python documentation, json module, "object_pairs_hook"): a text
has a repeated key exactly when some object's pairs hold a key twice. RFC 8259 §4 says names
within an object SHOULD be unique and leaves duplicates to the parser; the service refuses them.
"""

from __future__ import annotations

import json
import random
from typing import Any

import orjson
import pytest

from service.fhir import json_body
from service.fhir.outcome import BundleError


def _repeats(text: bytes) -> bool:
    """Whether some object in ``text`` has a key twice (the standard library's view)."""
    found: list[bool] = []

    def pairs(items: list[tuple[str, Any]]) -> dict[str, Any]:
        if len({key for key, _ in items}) != len(items):
            found.append(True)
        return dict(items)

    json.loads(text, object_pairs_hook=pairs)
    return bool(found)


def _refused(text: bytes) -> bool:
    try:
        json_body.loads(text)
    except BundleError as exc:
        assert exc.problems[0].code == "structure"
        assert "same key twice" in exc.problems[0].diagnostics
        return True
    return False


@pytest.mark.parametrize(
    ("text", "where"),
    [
        # Each holds as many `":` once parsed as it did as sent (an escaped quote before a
        # colon, written back as `\":`): a count of `":` took them for texts without a duplicate.
        (b'{"resourceType":"Bundle","a":"x","a":"\\u0022:"}', "Bundle.a"),
        (b'{"resourceType":"Bundle","type":1,"type":"\\":"}', "Bundle.type"),
        # An escaped colon in the kept value, a literal one in the dropped value.
        (b'{"entry":[{"id":"a:b","id":"\\u003a"}]}', "Bundle.entry[0].id"),
        (b'{"entry":[{"id":"a:b","id":"\\u003A\\u003a"}]}', "Bundle.entry[0].id"),
        # As sent with spaces, and as a str.
        (b'{ "total" : 1 ,\n  "total" : 2 }', "Bundle.total"),
    ],
)
def test_a_repeated_key_is_refused_where_it_is(text: bytes, where: str) -> None:
    assert _repeats(text)
    for sent in (text, bytearray(text), text.decode()):
        with pytest.raises(BundleError) as caught:
            json_body.loads(sent)
        assert caught.value.problems[0].expression == where


@pytest.mark.parametrize(
    "text",
    [
        b'{"a":"x:y","b":"\\u003a"}',  # escaped and literal colons, no key twice
        b'{"a":"\\"","b":"\\\\u003a"}',  # an escaped backslash before u003a
        b'{"a" : {"a" : {"a" : [1, {"a": "::"}]}}}',  # one key name, one per object
        b'{"a":1.0,"b":1e2,"c":-0.0,"d":"\\u00e9:"}',  # numbers written back otherwise
    ],
)
def test_a_text_without_a_repeated_key_is_parsed_as_orjson_parses_it(text: bytes) -> None:
    assert not _repeats(text)
    for sent in (text, bytearray(text), text.decode()):
        assert json_body.loads(sent) == orjson.loads(text)


_KEYS = ["a", "b", "a:", ":", "\\u003a", "\\u0061", '\\"', "c\\n"]
_STRINGS = ["x", ":", "a:b", "\\u003a", "\\u003A", '\\":', "\\\\", "\\u0022:", ""]


def _text(rng: random.Random, depth: int) -> str:
    """A random JSON text, written compact or with spaces, its keys drawn from a few (so
    some objects repeat one, written plainly or with escapes)."""
    space = rng.choice(["", " ", "\n  "])
    kind = rng.randrange(5) if depth < 4 else rng.randrange(2)
    if kind == 0:
        return '"' + rng.choice(_STRINGS) + '"'
    if kind == 1:
        return rng.choice(["1", "1.50", "-2e3", "true", "null"])
    if kind == 2:
        items = [_text(rng, depth + 1) for _ in range(rng.randrange(4))]
        return "[" + f",{space}".join(items) + "]"
    members = [
        f'"{rng.choice(_KEYS)}"{space}:{space}{_text(rng, depth + 1)}'
        for _ in range(rng.randrange(5))
    ]
    return "{" + space + f",{space}".join(members) + space + "}"


def test_random_texts_are_refused_exactly_when_the_standard_library_sees_a_key_twice() -> None:
    rng = random.Random(18)
    seen = {True: 0, False: 0}
    for _ in range(4000):
        text = _text(rng, 0).encode()
        compact = orjson.dumps(orjson.loads(text))
        for sent in (text, compact):
            expected = _repeats(sent)
            assert _refused(sent) is expected, sent
            seen[expected] += 1
    assert min(seen.values()) > 500  # both kinds well represented
