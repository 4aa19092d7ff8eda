"""The same input and rule set give the same result, byte for byte, apart from the decision id
and the timestamps; every result names the rule-set and settings hashes to replay it."""

from __future__ import annotations

import re
from datetime import UTC, datetime
from pathlib import Path

import orjson

from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[1]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))


def test_results_are_byte_identical_for_the_same_id_and_clock() -> None:
    runtime = Runtime.load()
    now = datetime(2026, 12, 1, 8, 0, tzinfo=UTC)
    decision = "0b3f1c2e-4d5a-4b6c-8d7e-9f0a1b2c3d4e"
    for path in BUNDLES:
        data = orjson.loads(path.read_bytes())
        first = orjson.dumps(runtime.assess_bundle(data, now=now, decision_id=decision))
        second = orjson.dumps(Runtime.load().assess_bundle(data, now=now, decision_id=decision))
        assert first == second, path.name


def test_results_differ_only_in_decision_id_and_timestamps() -> None:
    runtime = Runtime.load()
    uuid = re.compile(rb"urn:uuid:[0-9a-f-]{36}")
    stamp = re.compile(rb'"(timestamp|occurrenceDateTime|identifiedDateTime)":"[^"]+"')
    for path in BUNDLES:
        data = orjson.loads(path.read_bytes())
        a, b = (orjson.dumps(runtime.assess_bundle(data)) for _ in range(2))
        assert a != b  # fresh decision ids
        assert stamp.sub(b"", uuid.sub(b"", a)) == stamp.sub(b"", uuid.sub(b"", b)), path.name


def test_every_result_names_what_it_was_computed_with() -> None:
    runtime = Runtime.load()
    result = runtime.assess_bundle(orjson.loads(BUNDLES[0].read_bytes()))
    params = {p["name"]: p for p in result["entry"][1]["resource"]["parameter"]}
    assert params["ruleset"]["valueString"] == runtime.ruleset.identity
    assert params["ruleset-hash"]["valueString"] == runtime.ruleset.content_hash
    assert params["settings-hash"]["valueString"] == runtime.settings_hash
    module = result["entry"][0]["resource"]["moduleUri"]
    assert runtime.ruleset.content_hash in module
