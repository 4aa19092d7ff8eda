"""An invented patient with distinctive words and values that must never reach a log."""

from __future__ import annotations

import json
from typing import Any

from tests.api.conftest import ALTITUDE, ROOT

NAME = ("Zephyrine", "Quillborne")
IDENTIFIER = "MRN-58301977"
PATIENT_ID = "pt-quillborne-9921"
VALUES = ("48.0371", "31.0629", "16.2047")
BIRTH_DATE = "1961-07-23"
SECRETS = (*NAME, IDENTIFIER, PATIENT_ID, *VALUES, BIRTH_DATE)


def marked_bundle() -> dict[str, Any]:
    """The altitude demo Bundle, re-labelled with the distinctive patient and values."""
    text = ALTITUDE.read_text().replace("demo-visitor", PATIENT_ID)
    data: dict[str, Any] = json.loads(text)
    values = dict(zip(("2703-7", "2019-8", "718-7"), VALUES, strict=True))
    for entry in data["entry"]:
        resource = entry["resource"]
        if resource["resourceType"] == "Patient":
            resource["name"] = [{"family": NAME[1], "given": [NAME[0]]}]
            resource["identifier"] = [
                {"system": "urn:oid:2.16.840.1.113883.19.5", "value": IDENTIFIER}
            ]
            resource["birthDate"] = BIRTH_DATE
        code = resource.get("code", {}).get("coding", [{}])[0].get("code")
        if code in values:
            resource["valueQuantity"]["value"] = float(values[code])
    return data


def marked_bodies() -> list[tuple[str, bytes]]:
    """(content type, body) pairs: a good Bundle, a broken one, and NDJSON of both."""
    good = marked_bundle()
    broken = marked_bundle()
    broken["entry"][2]["resource"]["valueQuantity"]["code"] = "psi"
    good_line, broken_line = json.dumps(good).encode(), json.dumps(broken).encode()
    return [
        ("application/fhir+json", good_line),
        ("application/fhir+json", broken_line),
        ("application/fhir+ndjson", good_line + b"\n" + broken_line + b"\nnot json\n"),
    ]


def leaks(text: str) -> list[str]:
    """The secrets that appear in ``text``."""
    return [secret for secret in SECRETS if secret in text]


V2_BIRTH_DATE = BIRTH_DATE.replace("-", "")  # as HL7 v2 writes it
V2_ESCAPED_BIRTH_DATE = "1961\\Q07\\23"  # an escape sequence python-hl7 cannot read
V2_SECRETS = (V2_BIRTH_DATE, V2_ESCAPED_BIRTH_DATE)


def marked_v2_messages() -> list[bytes]:
    """HL7 v2 messages of the same invented patient: one assessed, one refused AE, and one
    whose birth date and value carry escape sequences python-hl7 cannot read (it would log
    the whole field: tests/fuzz/hl7v2.py found that)."""
    base = (ROOT / "fixtures" / "hl7v2" / "altitude-visitor.hl7").read_text()
    base = base.replace("\n", "\r").replace("DEMO-0002", IDENTIFIER)
    base = base.replace("INVENTED^PATIENT", f"{NAME[1].upper()}^{NAME[0].upper()}")
    base = base.replace("||19580314|", f"||{V2_BIRTH_DATE}|")
    good = base.replace("||48|", f"||{VALUES[0]}|")
    refused = base.replace("||48|", f"||{VALUES[0]} high|")
    escaped = base.replace("||48|", f"||{VALUES[0]}\\Zq\\|")
    escaped = escaped.replace(f"||{V2_BIRTH_DATE}|", f"||{V2_ESCAPED_BIRTH_DATE}|")
    return [m.encode() for m in (good, refused, escaped)]


def v2_leaks(text: str) -> list[str]:
    """The secrets, in their HL7 v2 forms too, that appear in ``text``."""
    return leaks(text) + [s for s in (*V2_SECRETS, NAME[1].upper()) if s in text]
