"""Media types: what a request body is, and which media type its answer is sent as.

A body is a single Bundle (``application/fhir+json`` or ``application/json``) or NDJSON of
Bundles (``application/fhir+ndjson`` or ``application/ndjson``). A ``fhirVersion`` parameter is
honoured the same way on both headers: R4 (4.0, the version the service declares) and R4B (4.3,
which its answers also validate as) are accepted, any other is refused (415 on Content-Type,
406 on Accept); a ``charset`` is accepted when it is UTF-8. The answer has the same kind as the
body; FHIR's ``_format`` parameter (or else ``Accept``) picks its media type within that kind.
``Accept`` is read by python-mimeparse (q-values, wildcards, ``q=0`` as a refusal, ties to the
FHIR media type); only the ``fhirVersion`` parameter is checked here. Anything else is refused
with 415 (the body) or 406 (the answer); the refusal names the header or parameter and what is
accepted, never the text sent (SECURITY.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum

import mimeparse

from service.api.errors import ApiError

FHIR_JSON = "application/fhir+json"
JSON = "application/json"
FHIR_NDJSON = "application/fhir+ndjson"
NDJSON = "application/ndjson"


class BodyKind(Enum):
    """One Bundle, or one Bundle per line."""

    BUNDLE = "bundle"
    NDJSON = "ndjson"


# Media types of each kind, the preferred one first; `_format` short names map onto them.
TYPES: dict[BodyKind, tuple[str, ...]] = {
    BodyKind.BUNDLE: (FHIR_JSON, JSON),
    BodyKind.NDJSON: (FHIR_NDJSON, NDJSON),
}
SHORT_NAMES = {"json": FHIR_JSON, "ndjson": FHIR_NDJSON}
FHIR_VERSIONS = ("4.0", "4.3")  # R4 and R4B; a patch level (4.0.1, 4.3.0) is accepted too
DECLARED_VERSION = "4.0"  # R4: what the CapabilityStatement says and $versions names default
ACCEPTED_TYPES = ", ".join(TYPES[BodyKind.BUNDLE] + TYPES[BodyKind.NDJSON])


@dataclass(frozen=True, slots=True)
class MediaType:
    """A parsed media type: ``type/subtype`` in lower case and its parameters."""

    essence: str
    parameters: dict[str, str]

    @classmethod
    def parse(cls, text: str) -> MediaType:
        essence, *params = (part.strip() for part in text.split(";"))
        parsed: dict[str, str] = {}
        for param in params:
            name, _, value = param.partition("=")
            if name:
                parsed[name.strip().lower()] = value.strip().strip('"')
        return cls(essence.lower(), parsed)


def body_kind(content_type: str | None) -> BodyKind:
    """The kind of a request body from its ``Content-Type``.

    Raises:
        ApiError: 415 for a missing or unsupported media type, charset or FHIR version.
    """
    where = "http.Content-Type"
    if not content_type:
        raise ApiError.issue(
            415, "not-supported", f"Content-Type is required: one of {ACCEPTED_TYPES}", where
        )
    media = MediaType.parse(content_type)
    kind = next((k for k, types in TYPES.items() if media.essence in types), None)
    if kind is None:
        raise ApiError.issue(
            415,
            "not-supported",
            f"unsupported media type; send one of {ACCEPTED_TYPES}",
            where,
        )
    charset = media.parameters.get("charset", "utf-8").lower()
    if charset not in ("utf-8", "utf8"):
        raise ApiError.issue(415, "not-supported", "the body must be UTF-8 encoded", where)
    version = media.parameters.get("fhirversion")
    if version is not None and not _is_supported_version(version):
        raise ApiError.issue(
            415,
            "not-supported",
            "the fhirVersion parameter names a version this service does not read; "
            "it reads R4 (4.0) and R4B (4.3)",
            where,
        )
    return kind


def _is_supported_version(version: str) -> bool:
    return any(version == v or version.startswith(v + ".") for v in FHIR_VERSIONS)


@dataclass(frozen=True, slots=True)
class Answer:
    """The media type an answer is sent as, and the FHIR version it was asked in (None: not
    named; the answer is then the declared version, R4)."""

    media_type: str
    fhir_version: str | None = None

    @property
    def content_type(self) -> str:
        """The Content-Type header: the media type, with ``fhirVersion`` when one was asked."""
        if self.fhir_version is None:
            return self.media_type
        return f"{self.media_type}; fhirVersion={self.fhir_version}"


def _refused(header: str) -> ApiError:
    return ApiError.issue(
        406,
        "not-supported",
        f"{header} names a fhirVersion this service does not write; it writes R4 (4.0), "
        "which is also valid R4B (4.3)",
        f"http.{header}",
    )


def negotiate(kind: BodyKind, format_param: str | None, accept: str | None) -> Answer:
    """The media type and FHIR version of the answer to a body of ``kind``.

    Raises:
        ApiError: 406 when ``_format`` or ``Accept`` allows no media type of that kind, or
            names only FHIR versions the service does not write.
    """
    offered = TYPES[kind]
    if format_param is not None:
        media = MediaType.parse(format_param.replace(" ", "+"))  # '+' arrives as ' ' in a URL
        chosen = SHORT_NAMES.get(media.essence, media.essence)
        if chosen not in offered:
            raise ApiError.issue(
                406,
                "not-supported",
                "_format names no media type offered for this request; use one of "
                + ", ".join(offered),
                "http._format",
            )
        version = media.parameters.get("fhirversion")
        if version is not None and not _is_supported_version(version):
            raise _refused("_format")
        return Answer(chosen, _short(version))
    if not accept or not accept.strip():
        return Answer(offered[0])
    ranges, versions, dropped = [], [], False
    for item in accept.split(","):
        if not item.strip():
            continue
        try:
            kind_, subtype, params = mimeparse.parse_media_range(item)
        except ValueError:
            continue  # not a media range: ignored, as HTTP allows
        version = params.get("fhirversion")
        if version is not None and not _is_supported_version(version):
            dropped = True
            continue
        ranges.append(item)
        versions.append((f"{kind_}/{subtype}", version))
    # Ties go to the last of the list given to mimeparse: the preferred type goes last.
    chosen = mimeparse.best_match(list(reversed(offered)), ",".join(ranges)) if ranges else ""
    if not chosen:
        if dropped:
            raise _refused("Accept")
        raise ApiError.issue(
            406,
            "not-supported",
            "Accept allows none of the media types offered for this request: " + ", ".join(offered),
            "http.Accept",
        )
    asked = next((v for essence, v in versions if essence == chosen and v is not None), None)
    return Answer(chosen, _short(asked))


def _short(version: str | None) -> str | None:
    """``4.0.1`` -> ``4.0``: the fhirVersion parameter names a release by major.minor."""
    if version is None:
        return None
    return ".".join(version.split(".")[:2])


def answer_type(kind: BodyKind, format_param: str | None, accept: str | None) -> str:
    """The media type of the answer to a body of ``kind`` (``negotiate``, without version)."""
    return negotiate(kind, format_param, accept).media_type
