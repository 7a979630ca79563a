"""The in-process cache of stored API keys that the key check reads (see :mod:`service.security`).

``key_hash -> (key id, name, role, prefix, revoked_at)`` per app, each entry trusted for
:data:`KEY_CACHE_TTL` seconds after it was read from the store. Unknown keys are never cached;
a revocation in this process evicts the key from every cache at once (:func:`_forget_everywhere`).
"""

from __future__ import annotations

import threading
import time
import weakref
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from models_store.orm import ApiKey

__all__ = ["KEY_CACHE_TTL", "KeyCache"]

KEY_CACHE_TTL = 5.0  # seconds a key read from the store is trusted without reading it again
_KEY_CACHE_MAX = 4096  # entries per app (known keys only); cleared when full
_clock = time.monotonic  # the cache's clock (tests move it)


@dataclass(frozen=True)
class _KeyFacts:
    """What the key check needs of a stored key (no secret: ``key_hash`` is the digest)."""

    id: int
    name: str
    role: str
    prefix: str
    key_hash: str
    revoked_at: datetime | None


class KeyCache:
    """``key_hash -> (facts, read at)`` of one app, each entry trusted for ``ttl`` seconds.

    The clock is :func:`time.monotonic` (``_clock``); reads and writes of the dict are atomic
    under the GIL, the lock only serialises clearing a full cache.
    """

    def __init__(self, ttl: float = KEY_CACHE_TTL, max_entries: int = _KEY_CACHE_MAX) -> None:
        self.ttl = ttl
        self.max_entries = max_entries
        self._items: dict[str, tuple[_KeyFacts, float]] = {}
        self._lock = threading.Lock()
        _CACHES.add(self)

    def get(self, digest: str) -> _KeyFacts | None:
        hit = self._items.get(digest)
        if hit is None or _clock() - hit[1] >= self.ttl:
            return None
        return hit[0]

    def put(self, row: ApiKey) -> None:
        facts = _KeyFacts(row.id, row.name, row.role, row.prefix, row.key_hash, row.revoked_at)
        with self._lock:
            if len(self._items) >= self.max_entries:
                self._items.clear()
            self._items[row.key_hash] = (facts, _clock())

    def forget(self, digest: str) -> None:
        self._items.pop(digest, None)


_CACHES: weakref.WeakSet[KeyCache] = weakref.WeakSet()
_CACHES_LOCK = threading.Lock()


def _forget_everywhere(digest: str) -> None:
    for cache in list(_CACHES):
        cache.forget(digest)


def _cache_of(app: Any) -> KeyCache:
    cache: KeyCache | None = getattr(app.state, "key_cache", None)
    if cache is None:
        with _CACHES_LOCK:
            cache = getattr(app.state, "key_cache", None)
            if cache is None:
                cache = app.state.key_cache = KeyCache()
    return cache
