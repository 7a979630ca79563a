"""Decoded versions for scoring, cached in memory (versions are immutable, so never stale)."""

from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.orm import RiskModel
from models_store.versions import require_version
from service.stats.design import Encoding

__all__ = ["LoadedVersion", "VersionCache"]


@dataclass(frozen=True)
class LoadedVersion:
    """What scoring needs from a stored version, decoded once."""

    number: int
    encoding: Encoding
    kinds: dict[str, str]  # feature name -> kind
    offset: str | None  # name of the offset column the fit used, if any
    term_names: tuple[str, ...]
    coef: np.ndarray
    cov: np.ndarray
    ranges: dict[str, Any]

    @property
    def inputs(self) -> list[str]:
        """The raw columns a record must carry (features, then the offset column)."""
        return list(self.kinds) + ([self.offset] if self.offset else [])


class VersionCache:
    """In-memory cache of decoded versions (immutable, so never stale); bounded in size."""

    def __init__(self, max_entries: int = 256) -> None:
        self._items: dict[tuple[int, int], LoadedVersion] = {}
        self._lock = threading.Lock()
        self.max_entries = max_entries

    def get(self, session: Session, model: RiskModel, number: int) -> LoadedVersion:
        key = (model.id, number)
        hit = self._items.get(key)
        if hit is not None:
            return hit
        row = require_version(session=session, model=model, number=number)
        spec = row.spec
        loaded = LoadedVersion(
            number=row.number,
            encoding=Encoding.from_dict(row.encoding),
            kinds={f["name"]: f["kind"] for f in spec["features"]},
            offset=(spec.get("options") or {}).get("offset"),
            term_names=tuple(row.term_names),
            coef=np.asarray(row.coef, dtype=np.float64),
            cov=np.asarray(row.cov, dtype=np.float64),
            ranges=row.training_ranges,
        )
        with self._lock:
            if len(self._items) >= self.max_entries:
                self._items.pop(next(iter(self._items)))
            self._items[key] = loaded
        return loaded
