"""CUSUM control limits of a monitored segment: memory, then the store, then a simulation.

A limit (:func:`service.stats.cusum.limit_for_arl`) depends on the segment watched (model,
version, reset time), the size class of the segment (the limit is simulated again when the
segment grows past each of :data:`SIZE_CLASSES` records), the target in-control ARL, the
simulation (streams, stream length, seed, method) and the odds ratio R of the chart. Those
values form :func:`limit_key`; its SHA-256 (sorted-key JSON) names the limit:

1. in this process's :class:`LimitCache` (bounded, thread-safe);
2. else in the store (``cusum_limit`` table, :mod:`models_store.cusum_limits`), so a restart,
   another worker or another replica reuses a limit instead of simulating it again;
3. else simulated from the reference risks (the segment's first :data:`REFERENCE_RECORDS`
   predictions as they are at that moment), stored in the caller's transaction (committed
   with the drift evaluation) and remembered. Two writers of one key: the first row stands
   and the second reads it back, so every worker uses the same h.

No lock of this process is held while the store may wait for its write lock (a thread that
holds the store's write lock may be waiting for one of them). Within a size class the first
simulation stands (the reference is the segment's prefix at that time; the row records how
many reference records it used and their mean risk).
"""

from __future__ import annotations

import hashlib
import json
import threading
from dataclasses import fields
from datetime import datetime
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.cusum_limits import add_cusum_limit, find_cusum_limit
from models_store.orm import CusumLimitRecord, RiskModel
from service.config import Settings
from service.monitoring._json import jsonable
from service.stats.cusum import ControlLimit, limit_for_arl

__all__ = [
    "LENGTH_FACTOR",
    "REFERENCE_RECORDS",
    "SIZE_CLASSES",
    "LimitCache",
    "limit_key",
    "size_class",
]

REFERENCE_RECORDS = 20_000
LENGTH_FACTOR = 2
SIZE_CLASSES = (1_000, 5_000)  # segment sizes at which the limit is simulated again
SEED = 0
METHOD = "simulated-arl-v1"  # change when the simulation changes: old rows stop matching


def size_class(n: int) -> int:
    """0 below 1,000 records, 1 below 5,000, else 2."""
    return int(np.searchsorted(SIZE_CLASSES, n, side="right"))


def limit_key(
    *,
    model: RiskModel,
    version: int,
    reset_at: datetime | None,
    n: int,
    settings: Settings,
    odds_ratio: float,
) -> dict[str, Any]:
    """Everything the limit of one chart depends on, as a JSON-ready dict."""
    arl = float(settings.cusum_target_arl)
    return {
        "model_id": int(model.id),
        "version": int(version),
        "reset_at": None if reset_at is None else reset_at.isoformat(),
        "size_class": size_class(n),
        "size_classes": list(SIZE_CLASSES),
        "target_arl": arl,
        "n_sims": int(settings.cusum_n_sims),
        "max_length": int(LENGTH_FACTOR * arl),
        "reference_records": REFERENCE_RECORDS,
        "odds_ratio": float(odds_ratio),
        "seed": SEED,
        "method": METHOD,
    }


def _digest(key: dict[str, Any]) -> str:
    return hashlib.sha256(json.dumps(key, sort_keys=True).encode()).hexdigest()


def _from_row(row: CusumLimitRecord) -> ControlLimit:
    stored = row.control_limit
    return ControlLimit(**{f.name: stored[f.name] for f in fields(ControlLimit)})


class LimitCache:
    """Thread-safe, bounded in-memory cache in front of the store (see module docstring)."""

    def __init__(self, max_entries: int = 512) -> None:
        self._items: dict[str, ControlLimit] = {}
        self._lock = threading.Lock()
        self._key_locks: dict[str, threading.Lock] = {}
        self.max_entries = max_entries
        self.simulated = 0  # for tests and benchmarks: limits simulated by this process
        self.loaded = 0  # limits read from the store

    def _key_lock(self, digest: str) -> threading.Lock:
        with self._lock:
            return self._key_locks.setdefault(digest, threading.Lock())

    def get(
        self,
        *,
        session: Session | None,
        model: RiskModel,
        key: dict[str, Any],
        p_reference: np.ndarray,
    ) -> ControlLimit:
        """The limit named by ``key`` (:func:`limit_key`); ``session`` None: memory only."""
        digest = _digest(key)
        hit = self._items.get(digest)
        if hit is not None:
            return hit
        with self._key_lock(digest):  # one simulation per key in this process
            hit = self._items.get(digest)
            if hit is not None:
                return hit
            limit = self._stored(session, model, digest)
            simulated = limit is None
            if limit is None:
                limit = self._simulate(key, p_reference)
            self._remember(digest, limit)
        if simulated:  # outside the lock: the insert may wait for the store's write lock
            stored = self._store(session, model, digest, key, limit, p_reference)
            if stored != limit:
                self._remember(digest, stored)
            limit = stored
        return limit

    def _stored(
        self, session: Session | None, model: RiskModel, digest: str
    ) -> ControlLimit | None:
        if session is None:
            return None
        row = find_cusum_limit(session=session, model=model, key_digest=digest)
        if row is None:
            return None
        self.loaded += 1
        return _from_row(row)

    def _simulate(self, key: dict[str, Any], p_reference: np.ndarray) -> ControlLimit:
        self.simulated += 1
        return limit_for_arl(
            p_reference[:REFERENCE_RECORDS],
            odds_ratio=key["odds_ratio"],
            target_arl=key["target_arl"],
            n_sims=key["n_sims"],
            max_length=key["max_length"],
            seed=key["seed"],
        )

    def _store(
        self,
        session: Session | None,
        model: RiskModel,
        digest: str,
        key: dict[str, Any],
        limit: ControlLimit,
        p_reference: np.ndarray,
    ) -> ControlLimit:
        """Add the row (caller commits); if another writer stored the key first, use theirs."""
        if session is None:
            return limit
        reference = p_reference[:REFERENCE_RECORDS]
        body = jsonable(limit) | {
            "n_reference": int(reference.shape[0]),
            "reference_mean": float(reference.mean()) if reference.size else None,
        }
        row = add_cusum_limit(
            session=session,
            model=model,
            key_digest=digest,
            depends_on=key,
            h=limit.h,
            control_limit=body,
        )
        if row is None:
            stored = self._stored(session, model, digest)
            return limit if stored is None else stored
        return limit

    def _remember(self, digest: str, limit: ControlLimit) -> None:
        with self._lock:
            if len(self._items) >= self.max_entries:
                self._items.pop(next(iter(self._items)))
            self._items[digest] = limit
