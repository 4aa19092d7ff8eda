"""The JWT ids already seen, so a captured token cannot be sent twice (CDS Hooks ``jti``).

In memory, per worker process: each ``(iss, jti)`` is kept until its token expires (``exp``
plus the clock skew allowed), then forgotten. A token replayed to another worker or another
replica is not caught here; what bounds that risk is the token's short life, which the
service enforces (``OXYRULE_CDS_JWT_MAX_LIFETIME_S``, 5 minutes by default). The memory is
bounded: at most ``capacity`` ids; when it is full of ids that have not yet expired, new calls
are refused (``MemoryFull``, answered 429) rather than forgetting an id early, which would
reopen the replay.
"""

from __future__ import annotations

import heapq
import time
from collections.abc import Callable


class MemoryFull(Exception):
    """Every slot holds an id that has not expired yet."""


class ReplayMemory:
    """``(iss, jti)`` pairs seen, each until its expiry."""

    def __init__(self, capacity: int, clock: Callable[[], float] = time.time) -> None:
        self.capacity = capacity
        self.clock = clock
        self._until: dict[tuple[str, str], float] = {}
        self._expiries: list[tuple[float, tuple[str, str]]] = []

    def __len__(self) -> int:
        return len(self._until)

    def _forget_expired(self) -> None:
        now = self.clock()
        while self._expiries and self._expiries[0][0] < now:
            until, key = heapq.heappop(self._expiries)
            if self._until.get(key) == until:
                del self._until[key]

    def first_use(self, issuer: str, jti: str, until: float) -> bool:
        """Record ``(issuer, jti)`` until ``until`` (epoch seconds); False if already seen.

        Raises:
            MemoryFull: no room without forgetting an id that has not expired.
        """
        self._forget_expired()
        key = (issuer, jti)
        if key in self._until:
            return False
        if len(self._until) >= self.capacity:
            raise MemoryFull()
        self._until[key] = until
        heapq.heappush(self._expiries, (until, key))
        return True
