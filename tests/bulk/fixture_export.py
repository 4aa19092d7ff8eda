"""Every fixture Bundle re-exported as one FHIR Bulk Data export, as a server would write it.

Each fixture is one invented patient. Ids are prefixed per fixture (many fixtures call their
patient ``pt``), resources sent without an id get one, and every reference is rewritten to
``Type/id`` (a server resolves ``urn:uuid`` references when it stores a transaction). A fixture
with a Location gets an Encounter at that Location, named by its Observations' ``encounter``:
in an export, that is how a gas is tied to a place. Observations are split over two files (one
gzip-compressed) to read several files of one type.
"""

from __future__ import annotations

import gzip
import json
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from service.fhir.references import type_and_id

ROOT = Path(__file__).resolve().parents[2]
FIXTURES = ROOT / "fixtures"


def fixture_bundles() -> list[Path]:
    """Every fixture Bundle (the same inputs ``oxyrule assess`` is tested on), but those of
    ``fixtures/ehr``: they test the Bundle's own shapes (transaction requests, contained and
    conditional references, documents, messages), which a Bulk Data export, one resource per
    line with server ids, never has; their scenario is the demo's, exported with the rest."""
    ehr = FIXTURES / "ehr"
    return sorted(p for p in FIXTURES.rglob("*.bundle.json") if ehr not in p.parents)


@dataclass(frozen=True)
class Exported:
    """Where each fixture's patient went: fixture path -> Patient/<new id>."""

    patients: dict[Path, str]


def _rewrite(value: Any, refs: dict[str, str]) -> Any:
    if isinstance(value, dict):
        out = {k: _rewrite(v, refs) for k, v in value.items()}
        reference = value.get("reference")
        if isinstance(reference, str) and not reference.startswith("#"):
            typed = type_and_id(reference)
            out["reference"] = refs.get(reference) or refs.get(typed or "") or reference
        return out
    if isinstance(value, list):
        return [_rewrite(v, refs) for v in value]
    return value


def export_fixtures(
    folder: Path, bundles: list[Path] | None = None, *, names: str = ""
) -> Exported:
    """Write the fixtures as one export in ``folder`` (file names prefixed with ``names``);
    which patient each fixture became."""
    by_type: dict[str, list[dict[str, Any]]] = defaultdict(list)
    patients: dict[Path, str] = {}
    for number, path in enumerate(bundles or fixture_bundles()):
        prefix = f"fx{number:02d}"
        bundle = json.loads(path.read_text(encoding="utf-8"))
        resources: list[dict[str, Any]] = []
        refs: dict[str, str] = {}
        for i, entry in enumerate(bundle.get("entry", [])):
            resource = entry["resource"]
            kind = resource["resourceType"]
            old = resource.get("id")
            new = f"{prefix}-{old}" if old else f"{prefix}-{kind.lower()}{i}"
            target = f"{kind}/{new}"
            if old:
                refs[f"{kind}/{old}"] = target
            if entry.get("fullUrl"):
                refs[entry["fullUrl"]] = target
            resources.append({**resource, "id": new})
        resources = [_rewrite(r, refs) for r in resources]
        patient = next((r for r in resources if r["resourceType"] == "Patient"), None)
        patient_ref = f"Patient/{patient['id']}" if patient else f"Patient/{prefix}-pt"
        patients[path] = patient_ref
        places = [r for r in resources if r["resourceType"] == "Location"]
        if places:
            encounter = {
                "resourceType": "Encounter",
                "id": f"{prefix}-stay",
                "status": "finished",
                "class": {
                    "system": "http://terminology.hl7.org/CodeSystem/v3-ActCode",
                    "code": "IMP",
                },
                "subject": {"reference": patient_ref},
                "location": [{"location": {"reference": f"Location/{places[0]['id']}"}}],
            }
            resources.append(encounter)
            for r in resources:
                if r["resourceType"] == "Observation":
                    r["encounter"] = {"reference": f"Encounter/{encounter['id']}"}
        for r in resources:
            by_type[r["resourceType"]].append(r)
    folder.mkdir(parents=True, exist_ok=True)
    for kind, items in by_type.items():
        lines = [json.dumps(r, separators=(",", ":")) + "\n" for r in items]
        if kind == "Observation":
            half = len(lines) // 2
            (folder / f"{names}Observation.000.ndjson").write_text("".join(lines[:half]), "utf-8")
            gz = folder / f"{names}Observation.001.ndjson.gz"
            with gzip.open(gz, "wt", encoding="utf-8") as out:
                out.write("".join(lines[half:]))
        else:
            (folder / f"{names}{kind}.ndjson").write_text("".join(lines), "utf-8")
    return Exported(patients)
