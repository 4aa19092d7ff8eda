"""How the result points at what was sent: one FHIR ``Reference`` per input resource.

The result Bundle (``service.fhir.render``) is a ``collection`` whose entries have
``urn:uuid`` fullUrls. FHIR R4 resolves a reference inside a Bundle by fullUrl, and a relative
``Type/id`` only against an entry whose fullUrl is a RESTful URL (bundle.html, "Resolving
references in Bundles"), so a relative reference in the result would point nowhere. Each input
resource is therefore pointed at the way a receiver can resolve it:

1. it has an absolute RESTful address (its entry's ``fullUrl`` ``https://…/Observation/7``, an
   absolute reference as sent, or a relative one made absolute against the RESTful fullUrl of
   the entry that holds it): a literal ``reference`` to that URL, outside the result Bundle;
2. its address is a URI that means something only inside the input (``urn:uuid:…`` and other
   non-RESTful fullUrls of transaction, batch and collection Bundles): a logical reference,
   ``identifier`` with system ``urn:ietf:rfc:3986`` and the URI as value, which the sender can
   match against what it sent;
3. a conditional reference (``Patient?identifier=system|value``, legal in transactions): the
   identifier it names;
4. anything else (a relative reference with no base, a contained resource, an HL7 v2
   segment): the resource's own first identifier when it has one, and a ``display`` saying
   what it was in the input.

A literal reference is written only in case 1; the others are logical references, so nothing
in the result claims to resolve where it does not.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from urllib.parse import unquote

Json = dict[str, object]

# The RESTful URL of a resource (R4 references.html): [base]/Type/id[/_history/vid].
RESTFUL = re.compile(
    r"^(https?://(?:[A-Za-z0-9\-\\.:%$]*/)+)([A-Z][A-Za-z]+)/([A-Za-z0-9\-.]{1,64})"
    r"(?:/_history/[A-Za-z0-9\-.]{1,64})?$"
)
_RELATIVE = re.compile(r"^([A-Z][A-Za-z]+)/([A-Za-z0-9\-.]{1,64})(?:/_history/[^/]+)?$")
_ABSOLUTE = re.compile(r"^[A-Za-z][A-Za-z0-9+.\-]*:")
URI_SYSTEM = "urn:ietf:rfc:3986"


def restful_base(full_url: str | None) -> str | None:
    """The service base of a RESTful fullUrl (``https://ehr.example/fhir/``), else None."""
    if full_url is None:
        return None
    match = RESTFUL.match(full_url)
    return None if match is None else match.group(1)


def version_independent(url: str) -> str:
    """A RESTful URL without its ``/_history/vid``."""
    match = RESTFUL.match(url)
    return url if match is None else f"{match.group(1)}{match.group(2)}/{match.group(3)}"


def _identifier(resource: Mapping[str, object]) -> Json | None:
    """The resource's first identifier that has a value (system kept when it is a string)."""
    identifiers = resource.get("identifier")
    if not isinstance(identifiers, list):
        return None
    for item in identifiers:
        if isinstance(item, dict) and isinstance(item.get("value"), str) and item["value"]:
            found: Json = {"value": item["value"]}
            if isinstance(item.get("system"), str) and item["system"]:
                found["system"] = item["system"]
            return found
    return None


_WEB = ("http://", "https://")  # how every RESTful URL starts: tested before the pattern


def of_entry(kind: str, full_url: str | None, resource: Mapping[str, object], where: str) -> Json:
    """The Reference to the resource of an input entry (``where`` says which, in words)."""
    if full_url is not None:
        # One match gives both the test and the version-independent URL (``restful_base``,
        # ``version_independent``); a fullUrl such as urn:uuid needs none.
        match = RESTFUL.match(full_url) if full_url.startswith(_WEB) else None
        if match is not None:
            return {"reference": f"{match.group(1)}{match.group(2)}/{match.group(3)}", "type": kind}
        if full_url.startswith("urn:") or _ABSOLUTE.match(full_url):  # "urn:" is absolute
            return {"type": kind, "identifier": {"system": URI_SYSTEM, "value": full_url}}
    return _described(kind, resource, where)


def _described(kind: str, resource: Mapping[str, object], where: str) -> Json:
    found: Json = {"type": kind, "display": f"{kind}: {where}"}
    identifier = _identifier(resource)
    if identifier is not None:
        found["identifier"] = identifier
    return found


def of_reference(reference: str, holder_full_url: str | None, kind: str | None = None) -> Json:
    """The Reference to a resource named by ``reference`` but not in the input Bundle,
    ``holder_full_url`` being the fullUrl of the entry whose resource holds the reference."""
    if reference.startswith(("http://", "https://")):
        found: Json = {"reference": version_independent(reference)}
        match = RESTFUL.match(reference)
        if match is not None:
            found["type"] = match.group(2)
        return found
    if "?" in reference:
        conditional = _conditional(reference)
        if conditional is not None:
            return conditional
    relative = _RELATIVE.match(reference)
    base = restful_base(holder_full_url)
    if relative is not None:
        if base is not None:
            absolute = f"{base}{relative.group(1)}/{relative.group(2)}"
            return {"reference": absolute, "type": relative.group(1)}
        return {"type": relative.group(1), "display": f"{reference} (the input gave no base URL)"}
    if _ABSOLUTE.match(reference):
        described: Json = {"identifier": {"system": URI_SYSTEM, "value": reference}}
        if kind:
            described["type"] = kind
        return described
    return {"display": "a resource the input names but does not hold"}


def _conditional(reference: str) -> Json | None:
    """``Type?identifier=system|value`` as a logical reference; None for other searches."""
    kind, _, query = reference.partition("?")
    if not re.fullmatch(r"[A-Z][A-Za-z]+", kind):
        return None
    for pair in query.split("&"):
        name, _, value = pair.partition("=")
        if name != "identifier" or not value:
            continue
        system, bar, code = unquote(value).partition("|")
        identifier: Json = {"value": code} if bar else {"value": system}
        if bar and system:
            identifier["system"] = system
        if identifier["value"]:
            return {"type": kind, "identifier": identifier}
    return None
