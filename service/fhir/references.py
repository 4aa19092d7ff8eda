"""Resolving references between the resources of one Bundle.

FHIR resolves a reference inside a Bundle by ``fullUrl`` first, then by ``Type/id`` relative to
the server base (R4 bundle.html "Resolving references in Bundles"). The service needs this for
``Observation.specimen`` and ``Observation.subject``; it never fetches anything from outside
the Bundle.
"""

from __future__ import annotations

import re

from service.fhir.shape import JsonObject

# The R4 id type: 1-64 of letters, digits, '-' and '.'.
FHIR_ID = re.compile(r"[A-Za-z0-9\-.]{1,64}", re.ASCII)

_TYPE_ID = re.compile(r"(?:^|/)([A-Z][A-Za-z]+)/([A-Za-z0-9\-.]{1,64})(?:/_history/[^/]+)?$")


def type_and_id(reference: str) -> str | None:
    """``Type/id`` of a relative or absolute RESTful reference, or None (urn:uuid, '#x')."""
    if "/" not in reference:
        return None  # the pattern needs one: urn:uuid:..., urn:oid:..., #contained
    match = _TYPE_ID.search(reference)
    return None if match is None else f"{match.group(1)}/{match.group(2)}"


class BundleIndex:
    """The resources of a Bundle by ``fullUrl`` and by ``Type/id``.

    Entries are added in Bundle order; when several entries answer to one ``Type/id`` (by
    their own type and id, or by the ``Type/id`` at the end of their ``fullUrl``), the first
    wins. The keys taken from fullUrls are worked out only when a lookup needs them: a
    reference to the first entry (the Patient, usually) never parses the fullUrls.
    """

    __slots__ = (
        "_by_full_url",
        "_by_full_url_type_id",
        "_by_own_type_id",
        "_full_urls",
        "_parsed",
        "resources",
    )

    def __init__(self) -> None:
        # A plain __init__: one is made per Bundle read, and a dataclass's default
        # factories cost about twice as much.
        self.resources: dict[int, JsonObject] = {}
        self._by_full_url: dict[str, int] = {}
        self._by_own_type_id: dict[str, int] = {}
        self._full_urls: list[tuple[int, str]] = []
        self._by_full_url_type_id: dict[str, int] = {}
        self._parsed = 0  # how many of ``_full_urls`` have been parsed into the dict above

    def add(
        self, entry: int, resource: JsonObject, full_url: str | None, own: str | None = None
    ) -> None:
        """Index the resource of ``Bundle.entry[entry]``; the first of duplicates wins.

        ``own``: its ``Type/id`` when the caller has formed it already (the reader has, for an
        entry of the usual shape); otherwise it is formed here, from any string id.
        """
        self.resources[entry] = resource
        if full_url is not None:
            self._by_full_url.setdefault(full_url, entry)
            self._full_urls.append((entry, full_url))
        if own is None:
            kind, rid = resource.get("resourceType"), resource.get("id")
            if not isinstance(kind, str) or not isinstance(rid, str):
                return
            own = f"{kind}/{rid}"
        self._by_own_type_id.setdefault(own, entry)

    def resolve(self, reference: str) -> int | None:
        """The entry index a reference points at, or None when it is not in the Bundle."""
        if reference in self._by_full_url:
            return self._by_full_url[reference]
        key = type_and_id(reference)
        if key is None:
            return None
        own = self._by_own_type_id.get(key)
        self._parse_full_urls(before=own)
        by_url = self._by_full_url_type_id.get(key)
        if by_url is not None and (own is None or by_url < own):
            return by_url
        return own

    def _parse_full_urls(self, *, before: int | None) -> None:
        """Parse the fullUrls of the entries before ``before`` (None: all of them)."""
        urls, parsed = self._full_urls, self._parsed
        while parsed < len(urls) and (before is None or urls[parsed][0] < before):
            entry, full_url = urls[parsed]
            key = type_and_id(full_url)
            if key is not None:
                self._by_full_url_type_id.setdefault(key, entry)
            parsed += 1
        self._parsed = parsed


def resource_reference(resource: JsonObject, full_url: str | None) -> str:
    """How to point at a resource from the result: ``Type/id``, else its ``fullUrl``, else ''.

    An empty string means the resource has neither an id nor a fullUrl and cannot be referenced;
    renderers leave such a reference out.
    """
    return own_reference(resource.get("resourceType"), resource.get("id")) or full_url or ""


def own_reference(kind: object, rid: object) -> str | None:
    """``Type/id`` of a resource of type ``kind`` whose ``id`` is a FHIR id, else None."""
    if isinstance(kind, str) and isinstance(rid, str) and FHIR_ID.fullmatch(rid):
        return f"{kind}/{rid}"
    return None
