"""The result says how long before the gas each paired value was taken."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import orjson

from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
# Invented: a blood count taken hours before the repeat gas (pairing windows per kind of value).
CASE = ROOT / "fixtures" / "cases" / "principles" / "p06-hb-hours-before-repeat-gas.bundle.json"


def _parts(parameter: dict[str, Any]) -> list[dict[str, Any]]:
    return list(parameter.get("part", []))


def test_each_paired_value_names_its_observation_and_its_age() -> None:
    result = Runtime.load().assess_bundle(orjson.loads(CASE.read_bytes()))
    parameters = next(
        e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "Parameters"
    )
    index = next(
        p
        for p in parameters["parameter"]
        if p["name"] == "gas" and {"name": "index", "valueBoolean": True} in _parts(p)
    )
    paired = {
        next(q["valueCode"] for q in _parts(p) if q["name"] == "quantity"): _parts(p)
        for p in _parts(index)
        if p["name"] == "paired"
    }
    assert {"arterial_pco2", "haemoglobin", "fio2"} <= set(paired)
    ages = {
        name: q["valueQuantity"]
        for name, parts in paired.items()
        for q in parts
        if q["name"] == "taken-before-gas"
    }
    assert "altitude" in paired and "altitude" not in ages  # a Location's altitude has no time
    assert ages["arterial_pco2"]["value"] == 0.0  # the same sample
    assert ages["haemoglobin"]["value"] > 60.0  # hours before: within its own window
    assert all(
        a["code"] == "min" and a["system"] == "http://unitsofmeasure.org" for a in ages.values()
    )
