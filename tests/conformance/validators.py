"""Validators that are not ours, each wrapped to return a list of problems (empty: valid).

* ``schema_errors``: the official FHIR R4 JSON Schema (``kept/fhir.schema.json``), checked with
  ``jsonschema_rs`` (a JSON Schema implementation from the registry; draft 06 as the schema
  declares). Loaded once per process.
* ``r4b_errors``: the FHIR R4B models of ``fhir.resources``.
* ``r4_model_errors``: the FHIR R4 (4.0.1) models of ``fhir.resources`` 6.4.0, in one separate
  process for a whole batch (``tests/conformance/r4_models.py``).
* ``unresolved_references``: every literal reference of a Bundle, resolved as FHIR R4 says
  (bundle.html, "Resolving references in Bundles", and references.html for contained ones).
  Written here because no registry library resolves Bundle references; the rules are short.
* ``fhirpath_misses``: each ``issue.expression`` of an OperationOutcome evaluated with
  ``fhirpathpy`` against the input it reports on; it must select at least one element.
* ``hl7_strict_errors``: an HL7 v2 message parsed by ``hl7apy`` with strict validation for the
  version it declares in MSH-12, then validated against that version's message structure.
* ``non_ucum_units``: every Quantity (and HL7 v2 OBX-6) that says UCUM, parsed by ``ucumvert``.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from collections.abc import Iterator, Mapping
from functools import cache
from pathlib import Path
from typing import Any

KEPT = Path(__file__).resolve().parent / "kept"
ROOT = Path(__file__).resolve().parents[2]
UCUM = "http://unitsofmeasure.org"

Json = dict[str, Any]


@cache
def _schema() -> Any:
    import jsonschema_rs

    schema = json.loads((KEPT / "fhir.schema.json").read_text(encoding="utf-8"))
    return jsonschema_rs.Draft6Validator(schema)


def schema_errors(resource: Mapping[str, Any]) -> list[str]:
    """Every way ``resource`` breaks the FHIR R4 JSON Schema."""
    return [
        f"{'/'.join(str(p) for p in error.instance_path)}: {error.message[:200]}"
        for error in _schema().iter_errors(resource)
    ]


def r4b_errors(resource: Mapping[str, Any]) -> list[str]:
    """Every way ``resource`` breaks its FHIR R4B model (fhir.resources)."""
    from fhir.resources.R4B import get_fhir_model_class
    from pydantic import ValidationError

    try:
        get_fhir_model_class(str(resource.get("resourceType"))).model_validate(dict(resource))
    except (ValidationError, KeyError, ValueError) as exc:
        return [str(exc)[:500]]
    return []


def r4_model_errors(resources: Mapping[str, Mapping[str, Any]]) -> dict[str, list[str]]:
    """Each named resource checked against the FHIR R4 4.0.1 models, in one process."""
    lines = "".join(
        json.dumps({"name": name, "resource": resource}) + "\n"
        for name, resource in resources.items()
    )
    done = subprocess.run(
        [sys.executable, "-m", "tests.conformance.r4_models"],
        input=lines,
        capture_output=True,
        text=True,
        check=False,
        cwd=ROOT,
        timeout=600,
    )
    if done.returncode != 0:
        raise RuntimeError(f"the R4 model check failed to run: {done.stderr[-2000:]}")
    found: dict[str, list[str]] = {}
    for line in done.stdout.splitlines():
        item = json.loads(line)
        found[item["name"]] = item["errors"]
    return found


# The RESTful URL of a resource (R4 references.html, the regex given there), resource type
# taken as any capitalised name.
RESTFUL = re.compile(
    r"^((?:https?)://(?:[A-Za-z0-9\-\\.:%$]*/)+)?([A-Z][A-Za-z]+)/([A-Za-z0-9\-.]{1,64})"
    r"(/_history/[A-Za-z0-9\-.]{1,64})?$"
)
ABSOLUTE = re.compile(r"^[A-Za-z][A-Za-z0-9+.\-]*:")


def _references(node: object, at: str) -> Iterator[tuple[str, str]]:
    """Every (FHIRPath-ish location, literal reference) below ``node``, not entering
    contained resources (those are walked as resources of their own)."""
    if isinstance(node, dict):
        for key, value in node.items():
            if key == "contained":
                continue
            if key == "reference" and isinstance(value, str):
                yield at, value
            else:
                yield from _references(value, f"{at}.{key}")
    elif isinstance(node, list):
        for i, item in enumerate(node):
            yield from _references(item, f"{at}[{i}]")


def _resolve(
    reference: str, full_url: str | None, full_urls: set[str], contained: set[str]
) -> str | None:
    """Why ``reference`` does not resolve, or None when it does (or is external)."""
    if reference.startswith("#"):
        if reference == "#" or reference[1:] in contained:
            return None
        return "no contained resource has this id (ref-1)"
    if "?" in reference:
        return "a conditional reference has a meaning only inside a transaction"
    if ABSOLUTE.match(reference):
        if reference in full_urls:
            return None
        if reference.startswith(("http://", "https://")):
            return None  # an absolute RESTful reference outside the Bundle: external
        return "an absolute URI that is no fullUrl of the Bundle and cannot be fetched"
    match = RESTFUL.match(reference)
    if match is None:
        return "neither Type/id nor an absolute URI"
    base = RESTFUL.match(full_url or "")
    if base is None or base.group(1) is None:
        return "a relative reference in an entry whose fullUrl is not a RESTful URL"
    return None  # made absolute against the entry's base: in the Bundle, or external


def unresolved_references(bundle: Mapping[str, Any]) -> list[str]:
    """Every literal reference in ``bundle`` that FHIR R4's rules do not resolve."""
    entries = bundle.get("entry") or []
    full_urls = {e["fullUrl"] for e in entries if isinstance(e.get("fullUrl"), str)}
    problems: list[str] = []
    for i, entry in enumerate(entries):
        resource = entry.get("resource") or {}
        full_url = entry.get("fullUrl")
        contained = {c.get("id") for c in resource.get("contained") or ()}
        roots = [(f"Bundle.entry[{i}].resource", resource)]
        roots += [
            (f"Bundle.entry[{i}].resource.contained[{j}]", c)
            for j, c in enumerate(resource.get("contained") or ())
        ]
        for root_at, root in roots:
            for at, reference in _references(root, root_at):
                why = _resolve(reference, full_url, full_urls, contained)
                if why is not None:
                    problems.append(f"{at}: {reference!r}: {why}")
    if len(full_urls) != sum(1 for e in entries if "fullUrl" in e):
        problems.append("Bundle.entry.fullUrl: not unique")
    return problems


def expressions(outcome: Mapping[str, Any]) -> list[str]:
    """Every ``issue.expression`` of an OperationOutcome."""
    return [e for issue in outcome.get("issue") or () for e in issue.get("expression") or ()]


def fhirpath_misses(outcome: Mapping[str, Any], sent: object) -> list[str]:
    """Each expression of ``outcome`` that selects nothing in ``sent`` (the input reported on)
    or that fhirpathpy cannot evaluate."""
    from fhirpathpy import evaluate

    misses: list[str] = []
    root: Mapping[str, Any] | list[Any] = sent if isinstance(sent, dict | list) else {}
    for expression in expressions(outcome):
        try:
            found = evaluate(root, expression, {})
        except Exception as exc:  # any failure to evaluate is a miss, named
            misses.append(f"{expression}: not evaluated ({type(exc).__name__})")
            continue
        if not found:
            misses.append(f"{expression}: selects nothing")
    return misses


# hl7apy 1.3.5 knows no v2.7.1 structures; v2.7.1 is a technical correction of v2.7 with the
# same message structures (HL7 v2.7.1 introduction), so a 2.7.1 message is checked as 2.7.
HL7APY_VERSION = {"2.7.1": "2.7"}


def hl7_strict_errors(er7: str) -> list[str]:
    """Why hl7apy, strict, for the declared version, refuses the message (empty: accepted).

    hl7apy finds the message structure in MSH-9.3, or else builds ``type_trigger`` from MSH-9;
    before v2.3.1 MSH-9 has no third component, and a general acknowledgment's structure is
    ``ACK`` whatever its trigger, which ``ACK_R01`` is not: for an ACK the structure is named
    here, as the standard defines it, and the segments are parsed and validated against it.
    """
    from hl7apy.consts import VALIDATION_LEVEL
    from hl7apy.core import Message
    from hl7apy.parser import get_message_info, parse_segments

    strict = VALIDATION_LEVEL.STRICT
    try:
        encoding, structure, version = get_message_info(er7)
        version = HL7APY_VERSION.get(str(version), version)
        msh9 = er7.split("\r", 1)[0].split("|")[8].split("^")
        if msh9[0] == "ACK":
            structure = "ACK"
        message = Message(structure, version=version, validation_level=strict)
        text = er7 if version is None else er7.replace("|2.7.1|", "|2.7|", 1)
        if (version, structure) in GROUP_FINDER_FAILS:
            # Every segment and field strictly, the order against the structure's table.
            children = parse_segments(text, version, encoding, strict, find_groups=False)
            return _sequence_errors(message.reference, [c.name for c in children])
        message.children = parse_segments(
            text, version, encoding, strict, message.reference, find_groups=True
        )
        message.validate()
    except Exception as exc:  # hl7apy raises several unrelated exception types
        return [f"{type(exc).__name__}: {str(exc)[:300]}"]
    return []


# hl7apy 1.3.5's group finder puts an OBX that follows OBR into v2.8's COMMON_ORDER /
# ORDER_DOCUMENT group (which comes first in the structure) and so refuses every v2.8 ORU_R01
# with two results in an order (tests/conformance/test_conformance.py shows it on a minimal
# message). For those, the segments are parsed strictly one by one and their order is matched
# against hl7apy's own table of the structure.
GROUP_FINDER_FAILS = frozenset({("2.8", "ORU_R01")})


def _pattern(reference: Any) -> str:
    """A regular expression of segment names for one hl7apy structure (sequence of children,
    each with its (min, max) cardinality)."""
    parts = []
    for child in reference[1]:
        name, ref, (low, high), kind = child[0], child[1], child[2], child[3]
        inner = f"(?:{_pattern(ref)})" if kind == "GRP" else f"(?:{name},)"
        parts.append(inner + {(1, 1): "", (0, 1): "?", (0, -1): "*", (1, -1): "+"}[(low, high)])
    return "".join(parts)


def _sequence_errors(reference: Any, names: list[str]) -> list[str]:
    if re.fullmatch(_pattern(reference), "".join(f"{n}," for n in names)):
        return []
    return [f"segment order {'-'.join(names)} does not fit the message structure"]


@cache
def _ucum_parser() -> Any:
    from ucumvert import get_ucum_parser

    return get_ucum_parser()


def is_ucum(code: str) -> bool:
    """Whether ``ucumvert`` parses ``code`` as a UCUM expression."""
    try:
        _ucum_parser().parse(code)
    except Exception:  # the parser's errors (lark) say only that it is not UCUM
        return False
    return True


def _quantities(node: object, at: str) -> Iterator[tuple[str, Mapping[str, Any]]]:
    if isinstance(node, dict):
        if node.get("system") == UCUM:
            yield at, node
        for key, value in node.items():
            yield from _quantities(value, f"{at}.{key}")
    elif isinstance(node, list):
        for i, item in enumerate(node):
            yield from _quantities(item, f"{at}[{i}]")


def non_ucum_units(resource: Mapping[str, Any]) -> list[str]:
    """Every element that names UCUM as its system but whose code is not UCUM (or absent)."""
    return [
        f"{at}: {q.get('code')!r}"
        for at, q in _quantities(resource, str(resource.get("resourceType", "")))
        if not isinstance(q.get("code"), str) or not is_ucum(q["code"])
    ]


def hl7_non_ucum_units(er7: str) -> list[str]:
    """Every OBX-6 of the message that names UCUM (its coding system) with a non-UCUM code."""
    problems: list[str] = []
    for number, segment in enumerate(re.split(r"\r\n?|\n", er7)):
        fields = segment.split("|")
        if fields[0] != "OBX" or len(fields) < 7 or not fields[6]:
            continue
        components = fields[6].split("^")
        systems = components[2:3] + components[5:6]
        if "UCUM" in systems and not is_ucum(components[0]):
            problems.append(f"segment {number + 1} OBX-6: {components[0]!r}")
    return problems
