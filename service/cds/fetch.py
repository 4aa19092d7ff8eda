"""Reading the EHR's FHIR server for prefetch the client did not send, within budgets.

CDS Hooks 2.0 ("FHIR Resource Access"): with ``fhirServer`` and ``fhirAuthorization`` the
service may read what it needs itself, presenting the access token as a bearer token. Here
that happens only for servers listed in ``OXYRULE_CDS_FHIR_SERVERS`` (the token and the
patient's data go nowhere else), and within budgets, each tested:

* time: ``OXYRULE_CDS_FETCH_TIMEOUT_S`` per request (connect, read, write, pool) and
  ``OXYRULE_CDS_FETCH_DEADLINE_S`` for all requests of one hook call;
* bytes: a response over ``OXYRULE_CDS_FETCH_MAX_BYTES`` is refused as it streams in;
* pages: at most ``OXYRULE_CDS_FETCH_MAX_PAGES`` per search, following ``link`` ``next``
  only when it stays under the same ``fhirServer`` base (never another host);
* entries: at most ``OXYRULE_CDS_FETCH_MAX_ENTRIES`` resources per hook call;
* connections: one pooled ``httpx.AsyncClient`` per worker, ``OXYRULE_CDS_FETCH_MAX_
  CONNECTIONS`` at most, no redirects followed.

httpx is used rather than a FHIR client library: the service needs GET, paging and hard
budgets, which a plain HTTP client gives exactly. The token is sent only in the
``Authorization`` header and never appears in a message, a log line or an exception text
that leaves this module (``FetchError`` carries a fixed phrase and a status, no URL).
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit

import orjson

if TYPE_CHECKING:
    # httpx is imported where a fetch needs it: a worker that never fetches keeps ~7 MiB less
    # resident (measured with VmRSS; the memory budget is 80 MB a worker).
    import httpx

Json = dict[str, Any]
FHIR_JSON = "application/fhir+json"


class FetchError(Exception):
    """A read that failed; ``reason`` is a fixed phrase (no URL, token or patient id)."""

    def __init__(self, reason: str) -> None:
        self.reason = reason
        super().__init__(reason)


@dataclass(frozen=True, slots=True)
class Budget:
    """The limits of one hook call's reads."""

    timeout_s: float
    deadline_s: float
    max_pages: int
    max_bytes: int
    max_entries: int


@dataclass(slots=True)
class Page:
    """One searchset page (or one read resource) and whether a next page was left unread."""

    resources: list[Json]
    next_url: str | None = None


@dataclass(slots=True)
class Search:
    """Every resource a search returned, and what stopped it early (None: nothing did)."""

    resources: list[Json] = field(default_factory=list)
    stopped: str | None = None


def same_base(url: str, base: str) -> bool:
    """Whether ``url`` lies under the FHIR base ``base`` (same scheme, host, port, path)."""
    u, b = urlsplit(url), urlsplit(base)
    path = b.path.rstrip("/")
    return (
        u.scheme == b.scheme
        and u.netloc.lower() == b.netloc.lower()
        and (u.path == path or u.path.startswith(path + "/"))
    )


def _entries(bundle: Json) -> list[Json]:
    """The resources of a searchset page; OperationOutcome entries (search mode ``outcome``,
    warnings about the search) are not patient data and are left out."""
    found = []
    for entry in bundle.get("entry") or ():
        if not isinstance(entry, dict):
            continue
        resource = entry.get("resource")
        if isinstance(resource, dict) and resource.get("resourceType") != "OperationOutcome":
            found.append(resource)
    return found


def next_link(bundle: Json) -> str | None:
    """The ``next`` link of a searchset Bundle, if any."""
    for link in bundle.get("link") or ():
        if isinstance(link, dict) and link.get("relation") == "next":
            url = link.get("url")
            return url if isinstance(url, str) and url else None
    return None


class FhirReader:
    """The reads of one hook call against one FHIR server, sharing one budget."""

    def __init__(
        self, client: httpx.AsyncClient, base: str, token: str | None, budget: Budget
    ) -> None:
        self.client = client
        self.base = base.rstrip("/")
        self._headers = {"Accept": FHIR_JSON}
        if token is not None:
            self._headers["Authorization"] = f"Bearer {token}"
        self.budget = budget
        self.entries = 0
        self.requests = 0
        self._deadline = time.monotonic() + budget.deadline_s

    def __repr__(self) -> str:  # never show the headers (the token)
        return f"FhirReader(requests={self.requests}, entries={self.entries})"

    @asynccontextmanager
    async def _within_deadline(self) -> AsyncIterator[None]:
        left = self._deadline - time.monotonic()
        if left <= 0:
            raise FetchError("the time budget for reading the FHIR server was used up")
        try:
            async with asyncio.timeout(left):
                yield
        except TimeoutError:
            raise FetchError("the time budget for reading the FHIR server was used up") from None

    async def _get(self, url: str, params: httpx.QueryParams | None = None) -> Json | None:
        """The JSON resource at ``url``; None for 404/410 (nothing there)."""
        import httpx

        self.requests += 1
        limit = self.budget.max_bytes
        try:
            async with (
                self._within_deadline(),
                self.client.stream("GET", url, params=params, headers=self._headers) as answer,
            ):
                if answer.status_code in (404, 410):
                    return None
                if answer.status_code in (401, 403):
                    raise FetchError(f"the FHIR server refused the token ({answer.status_code})")
                if answer.status_code != 200:
                    raise FetchError(f"the FHIR server answered {answer.status_code}")
                length = answer.headers.get("content-length")
                if length is not None and length.isdigit() and int(length) > limit:
                    raise FetchError(f"a FHIR response was larger than {limit} bytes")
                chunks, size = [], 0
                async for chunk in answer.aiter_bytes():
                    size += len(chunk)
                    if size > limit:
                        raise FetchError(f"a FHIR response was larger than {limit} bytes")
                    chunks.append(chunk)
        except httpx.TimeoutException:
            raise FetchError("the FHIR server did not answer in time") from None
        except httpx.HTTPError as exc:  # its text may hold the URL: only the type leaves
            raise FetchError(f"the FHIR server could not be read ({type(exc).__name__})") from None
        try:
            data = orjson.loads(b"".join(chunks))
        except orjson.JSONDecodeError:
            raise FetchError("the FHIR server answered something that is not JSON") from None
        if not isinstance(data, dict) or not isinstance(data.get("resourceType"), str):
            raise FetchError("the FHIR server answered something that is not a FHIR resource")
        if data["resourceType"] == "OperationOutcome":
            raise FetchError("the FHIR server answered with an OperationOutcome")
        return data

    def _count(self, resources: list[Json]) -> list[Json]:
        room = self.budget.max_entries - self.entries
        kept = resources[: max(room, 0)]
        self.entries += len(kept)
        return kept

    async def read(self, relative: str) -> Json | None:
        """``GET [base]/Type/id``: the resource, or None when the server has none."""
        resource = await self._get(f"{self.base}/{relative}")
        if resource is not None:
            self._count([resource])
        return resource

    async def search(self, relative: str) -> Search:
        """``GET [base]/Type?params`` and its next pages, within the budgets."""
        import httpx

        path, _, query = relative.partition("?")
        page = await self._get(f"{self.base}/{path}", httpx.QueryParams(query))
        found = Search()
        if page is not None and self._take(page, found):
            await self.more(next_link(page), found, pages_read=1)
        return found

    def _take(self, page: Json, found: Search) -> bool:
        """Add a page's resources within the entry budget; False when the budget stopped it."""
        if page.get("resourceType") != "Bundle":
            raise FetchError("a FHIR search answered something other than a Bundle")
        resources = _entries(page)
        kept = self._count(resources)
        found.resources.extend(kept)
        if len(kept) < len(resources):
            found.stopped = f"the entry budget ({self.budget.max_entries}) was reached"
            return False
        return True

    async def more(self, url: str | None, found: Search, pages_read: int) -> None:
        """Read the pages from ``url`` on (a ``next`` link), within the budgets."""
        while url is not None:
            if not same_base(url, self.base):
                found.stopped = "a next page outside fhirServer was not followed"
                return
            if pages_read >= self.budget.max_pages:
                found.stopped = f"more than {self.budget.max_pages} page(s): the rest was not read"
                return
            page = await self._get(url)
            pages_read += 1
            if page is None or not self._take(page, found):
                return
            url = next_link(page)


def new_client(*, timeout_s: float, max_connections: int) -> httpx.AsyncClient:
    """The pooled client of one worker: bounded connections, per-request timeouts, no
    redirects (a redirect could carry the token elsewhere), no proxies from the environment."""
    import httpx

    return httpx.AsyncClient(
        timeout=httpx.Timeout(timeout_s),
        limits=httpx.Limits(
            max_connections=max_connections, max_keepalive_connections=max_connections
        ),
        follow_redirects=False,
        trust_env=False,
    )
